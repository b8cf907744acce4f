// levels of detail from one newest-vertex bisection hierarchy.
//
// a level at tolerance e is the coarsest conforming mesh of the hierarchy that splits every node
// whose critical tolerance exceeds e: the smallest node set closed under "parent" and "pair"
// (the node bisected together with it), which is exactly what conforming bisection needs. levels
// are extracted coarse to fine, each starting from the coarser one's set, so they nest: every
// vertex of a coarser level is a vertex of the finer ones. each level is verified a posteriori
// like the finest one.
//
// morph targets: a vertex missing from the next coarser level sits, there, at the midpoint of its
// parent edge's morph positions (recursively), which lies on the coarser level's triangles.
//
// seams: chunks are the nodes at bisection level 2c, so chunk edges are edges of every level.
// a stitched variant removes, along the chosen chunk edges, the vertices the coarser neighbour
// lacks: the triangles around them are taken out and the hole is re-triangulated by ear clipping
// (Meisters 1975, "Polygons have ears"), keeping every other edge, so the chunk meets the
// coarser neighbour with no crack and no T-junction.
#include "lod.hpp"

#include <algorithm>
#include <cmath>
#include <map>
#include <unordered_map>

#include "measure.hpp"

namespace gm {
namespace {

std::uint64_t edge_key(std::uint32_t a, std::uint32_t b) {
    return (static_cast<std::uint64_t>(std::min(a, b)) << 32) | std::max(a, b);
}

// add node x and everything conforming bisection needs with it
void close_set(const Hierarchy& h, std::vector<std::uint8_t>& in, std::vector<std::uint32_t>& stack) {
    while (!stack.empty()) {
        std::uint32_t x = stack.back();
        stack.pop_back();
        const Node& n = h.nodes[x];
        for (std::uint32_t y : {n.parent, n.pair}) {
            if (y != kNone && !in[y]) {
                in[y] = 1;
                stack.push_back(y);
            }
        }
    }
}

// ear clipping of a simple counter-clockwise polygon in 2d; appends triangles of vertex ids
bool ear_clip(const std::vector<std::uint32_t>& ids, const std::vector<double>& x,
              const std::vector<double>& y, std::vector<std::uint32_t>& out) {
    std::vector<int> v(ids.size());
    for (std::size_t i = 0; i < v.size(); ++i) v[i] = static_cast<int>(i);
    auto cross = [&](int a, int b, int c) {
        return (x[b] - x[a]) * (y[c] - y[a]) - (y[b] - y[a]) * (x[c] - x[a]);
    };
    std::size_t guard = 0;
    while (v.size() > 3) {
        if (++guard > 4 * ids.size() * ids.size() + 16) return false;
        bool clipped = false;
        // the ear with the best-shaped triangle first: fewer slivers than taking the first ear
        int best = -1;
        double best_q = -1;
        const std::size_t n = v.size();
        for (std::size_t i = 0; i < n; ++i) {
            int a = v[(i + n - 1) % n], b = v[i], c = v[(i + 1) % n];
            double area = cross(a, b, c);
            if (area <= 0) continue;
            bool empty = true;
            for (std::size_t j = 0; j < n && empty; ++j) {
                int p = v[j];
                if (p == a || p == b || p == c) continue;
                if (cross(a, b, p) >= 0 && cross(b, c, p) >= 0 && cross(c, a, p) >= 0) empty = false;
            }
            if (!empty) continue;
            double l = (x[b] - x[a]) * (x[b] - x[a]) + (y[b] - y[a]) * (y[b] - y[a]) +
                       (x[c] - x[b]) * (x[c] - x[b]) + (y[c] - y[b]) * (y[c] - y[b]) +
                       (x[a] - x[c]) * (x[a] - x[c]) + (y[a] - y[c]) * (y[a] - y[c]);
            double q = area / l;  // proportional to the shape quality of the ear
            if (q > best_q) {
                best_q = q;
                best = static_cast<int>(i);
            }
        }
        if (best >= 0) {
            std::size_t i = static_cast<std::size_t>(best);
            int a = v[(i + n - 1) % n], b = v[i], c = v[(i + 1) % n];
            out.insert(out.end(), {ids[static_cast<std::size_t>(a)], ids[static_cast<std::size_t>(b)],
                                   ids[static_cast<std::size_t>(c)]});
            v.erase(v.begin() + static_cast<std::ptrdiff_t>(i));
            clipped = true;
        }
        if (!clipped) return false;
    }
    if (v.size() == 3) {
        if (cross(v[0], v[1], v[2]) <= 0) return false;
        out.insert(out.end(), {ids[static_cast<std::size_t>(v[0])], ids[static_cast<std::size_t>(v[1])],
                               ids[static_cast<std::size_t>(v[2])]});
    }
    return true;
}

struct EdgeOf {
    std::vector<std::uint8_t> corner;        // per vertex
    std::vector<std::uint32_t> cedge;        // per vertex: chunk edge it lies on (non-corners)
    std::vector<std::array<std::uint32_t, 2>> ends;  // per chunk edge: its two corners
};

bool on_edge(const EdgeOf& eo, std::uint32_t v, std::uint32_t e) {
    if (eo.corner[v]) return eo.ends[e][0] == v || eo.ends[e][1] == v;
    return eo.cedge[v] == e;
}

// one stitched variant: triangles `tris` of a chunk, with the vertices in `removed` (all on the
// chunk's boundary edges) taken out
bool stitch_variant(const Hierarchy& h, const std::vector<std::uint32_t>& tris,
                    const std::vector<std::uint8_t>& removed, std::vector<std::uint32_t>& out) {
    const std::size_t nt = tris.size() / 3;
    std::vector<std::uint8_t> hole(nt, 0);
    for (std::size_t t = 0; t < nt; ++t)
        for (int k = 0; k < 3; ++k)
            if (removed[tris[3 * t + static_cast<std::size_t>(k)]]) hole[t] = 1;
    for (std::size_t t = 0; t < nt; ++t)
        if (!hole[t]) out.insert(out.end(), {tris[3 * t], tris[3 * t + 1], tris[3 * t + 2]});
    // group hole triangles into edge-connected components
    std::unordered_map<std::uint64_t, std::vector<std::uint32_t>> by_edge;
    for (std::size_t t = 0; t < nt; ++t) {
        if (!hole[t]) continue;
        for (int k = 0; k < 3; ++k) {
            std::uint32_t a = tris[3 * t + static_cast<std::size_t>(k)];
            std::uint32_t b = tris[3 * t + static_cast<std::size_t>((k + 1) % 3)];
            by_edge[edge_key(a, b)].push_back(static_cast<std::uint32_t>(t));
        }
    }
    std::vector<int> comp(nt, -1);
    int ncomp = 0;
    for (std::size_t t0 = 0; t0 < nt; ++t0) {
        if (!hole[t0] || comp[t0] >= 0) continue;
        std::vector<std::uint32_t> stack{static_cast<std::uint32_t>(t0)};
        comp[t0] = ncomp;
        while (!stack.empty()) {
            std::uint32_t t = stack.back();
            stack.pop_back();
            for (int k = 0; k < 3; ++k) {
                std::uint32_t a = tris[3 * t + static_cast<std::size_t>(k)];
                std::uint32_t b = tris[3 * t + static_cast<std::size_t>((k + 1) % 3)];
                for (std::uint32_t o : by_edge[edge_key(a, b)]) {
                    if (comp[o] < 0) {
                        comp[o] = ncomp;
                        stack.push_back(o);
                    }
                }
            }
        }
        ++ncomp;
    }
    for (int c = 0; c < ncomp; ++c) {
        // directed boundary edges of the component (an edge whose reverse is not in it)
        std::map<std::uint32_t, std::uint32_t> next;
        std::vector<std::pair<std::uint32_t, std::uint32_t>> dedges;
        for (std::size_t t = 0; t < nt; ++t)
            if (comp[t] == c)
                for (int k = 0; k < 3; ++k)
                    dedges.emplace_back(tris[3 * t + static_cast<std::size_t>(k)],
                                        tris[3 * t + static_cast<std::size_t>((k + 1) % 3)]);
        std::sort(dedges.begin(), dedges.end());
        for (auto [a, b] : dedges) {
            if (std::binary_search(dedges.begin(), dedges.end(), std::make_pair(b, a))) continue;
            if (next.count(a)) return false;  // the hole touches itself at a vertex
            next[a] = b;
        }
        // splice the removed vertices out of the loop: p -> r -> q becomes p -> q
        std::vector<std::uint32_t> loop;
        std::uint32_t first = kNone;
        for (auto& kv : next)
            if (!removed[kv.first]) {
                first = kv.first;
                break;
            }
        if (first == kNone) return false;
        std::uint32_t cur = first;
        std::size_t guard = 0;
        do {
            loop.push_back(cur);
            auto it = next.find(cur);
            if (it == next.end()) return false;
            std::uint32_t nx = it->second;
            while (removed[nx]) {
                auto jt = next.find(nx);
                if (jt == next.end()) return false;
                nx = jt->second;
                if (++guard > next.size() + 4) return false;
            }
            cur = nx;
            if (++guard > 4 * next.size() + 8) return false;
        } while (cur != first);
        if (loop.size() < 3) return false;
        // project onto the tangent plane at the loop's mean direction (outward normal up)
        Vec3 m{};
        for (std::uint32_t v : loop) m += h.dir[v];
        m = normalize(m);
        Vec3 a = std::fabs(m.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
        Vec3 e1 = normalize(a - dot(a, m) * m);
        Vec3 e2 = cross(m, e1);
        std::vector<double> x(loop.size()), y(loop.size());
        for (std::size_t i = 0; i < loop.size(); ++i) {
            Vec3 d = h.dir[loop[i]];
            double s = dot(d, m);
            x[i] = dot(d, e1) / s;  // gnomonic: great circles stay straight
            y[i] = dot(d, e2) / s;
        }
        if (!ear_clip(loop, x, y, out)) return false;
    }
    return true;
}

}  // namespace

Status extract_levels(const Field& field, Hierarchy& h, const std::vector<double>& tolerances,
                      int verify_order, int threads, bool stitch, std::vector<Level>& levels,
                      ChunkInfo& chunks, std::string& error) {
    const std::size_t nn = h.nodes.size(), nv = h.dir.size();
    const std::size_t L = tolerances.size();
    if (L == 0) {
        error = "at least one level is needed";
        return Status::InvalidArgument;
    }
    levels.assign(L, Level{});
    std::vector<std::uint8_t> in(nn, 0), coarser(nn, 0);
    std::vector<std::uint32_t> stack;
    // coarse to fine: each level starts from the coarser one's split set, so levels nest
    for (std::size_t li = L; li-- > 0;) {
        const double eps = tolerances[li];
        Level& lv = levels[li];
        lv.tolerance_m = eps;
        in = coarser;
        for (std::uint32_t i = 0; i < nn; ++i) {
            const Node& n = h.nodes[i];
            if (n.child == kNone || in[i]) continue;
            if (n.level < h.min_level || n.tau > eps) {
                in[i] = 1;
                stack.push_back(i);
            }
        }
        close_set(h, in, stack);
        // verification of this level's leaves (measurements are cached on the nodes)
        std::vector<std::uint32_t> leaves;
        for (;;) {
            leaves.clear();
            for (std::uint32_t i = 0; i < nn; ++i) {
                const Node& n = h.nodes[i];
                if (!in[i] && (n.parent == kNone || in[n.parent])) leaves.push_back(i);
            }
            if (verify_order <= 0) break;
            parallel_for(leaves.size(), threads, [&](std::size_t b, std::size_t e) {
                for (std::size_t k = b; k < e; ++k) {
                    Node& t = h.nodes[leaves[k]];
                    if (t.err >= 0) continue;
                    double m2s, s2m;
                    t.err = static_cast<float>(triangle_deviation(
                        field, h.pos(t.v[0]), h.pos(t.v[1]), h.pos(t.v[2]), verify_order, m2s, s2m));
                    t.m2s = static_cast<float>(m2s);
                    t.s2m = static_cast<float>(s2m);
                }
            });
            bool more = false;
            for (std::uint32_t id : leaves) {
                const Node& t = h.nodes[id];
                if (t.err > eps && t.child != kNone && !at_floor(h, t, eps)) {
                    in[id] = 1;
                    stack.push_back(id);
                    ++lv.repaired;
                    more = true;
                }
            }
            if (!more) break;
            close_set(h, in, stack);
        }
        coarser = in;
        // triangles grouped by chunk, in node order within a chunk
        std::vector<std::uint32_t> order(leaves);
        std::stable_sort(order.begin(), order.end(), [&](std::uint32_t a, std::uint32_t b) {
            return h.nodes[a].chunk < h.nodes[b].chunk;
        });
        lv.present.assign(nv, 0);
        lv.triangles.reserve(order.size() * 3);
        for (std::uint32_t id : order) {
            const Node& t = h.nodes[id];
            lv.triangles.insert(lv.triangles.end(), {t.v[0], t.v[1], t.v[2]});
            lv.chunk.push_back(t.chunk);
            lv.errors.push_back(t.err);
            for (int k = 0; k < 3; ++k) lv.present[t.v[k]] = 1;
            lv.max_error_m = std::max(lv.max_error_m, static_cast<double>(t.err));
            lv.mesh_to_surface_m = std::max(lv.mesh_to_surface_m, static_cast<double>(t.m2s));
            lv.surface_to_mesh_m = std::max(lv.surface_to_mesh_m, static_cast<double>(t.s2m));
        }
    }
    // morph targets, fine to coarse
    for (std::size_t li = 0; li < L; ++li) {
        Level& lv = levels[li];
        lv.morph.assign(3 * nv, 0.0);
        const std::vector<std::uint8_t>* next = li + 1 < L ? &levels[li + 1].present : nullptr;
        for (std::uint32_t v = 0; v < nv; ++v) {
            Vec3 p;
            if (!next || (*next)[v] || h.vparent[2 * v] == kNone) {
                p = h.pos(v);
            } else {
                std::uint32_t a = h.vparent[2 * v], b = h.vparent[2 * v + 1];
                p = 0.5 * (Vec3{lv.morph[3 * a], lv.morph[3 * a + 1], lv.morph[3 * a + 2]} +
                           Vec3{lv.morph[3 * b], lv.morph[3 * b + 1], lv.morph[3 * b + 2]});
            }
            lv.morph[3 * v] = p.x;
            lv.morph[3 * v + 1] = p.y;
            lv.morph[3 * v + 2] = p.z;
        }
    }
    // chunks: the nodes at the chunk level, their corners, edges and neighbours
    const std::uint32_t nc = h.chunks;
    std::vector<std::uint32_t> root(nc, kNone);
    for (std::uint32_t i = 0; i < nn; ++i)
        if (h.nodes[i].level == h.min_level && h.nodes[i].chunk != kNone) root[h.nodes[i].chunk] = i;
    chunks.corners.assign(3 * nc, kNone);
    chunks.neighbors.assign(3 * nc, kNone);
    chunks.edge_ids.assign(3 * nc, kNone);
    EdgeOf eo;
    eo.corner.assign(nv, 0);
    eo.cedge.assign(nv, kNone);
    std::unordered_map<std::uint64_t, std::uint32_t> edge_id;
    std::vector<std::array<std::uint32_t, 2>> edge_chunks;
    for (std::uint32_t c = 0; c < nc; ++c) {
        const Node& r = h.nodes[root[c]];
        for (int i = 0; i < 3; ++i) {
            chunks.corners[3 * c + static_cast<std::uint32_t>(i)] = r.v[i];
            eo.corner[r.v[i]] = 1;
            std::uint32_t a = r.v[(i + 1) % 3], b = r.v[(i + 2) % 3];
            auto it = edge_id.find(edge_key(a, b));
            std::uint32_t id;
            if (it == edge_id.end()) {
                id = static_cast<std::uint32_t>(eo.ends.size());
                edge_id.emplace(edge_key(a, b), id);
                eo.ends.push_back({std::min(a, b), std::max(a, b)});
                edge_chunks.push_back({c, kNone});
            } else {
                id = it->second;
                edge_chunks[id][1] = c;
            }
            chunks.edge_ids[3 * c + static_cast<std::uint32_t>(i)] = id;
        }
    }
    for (std::uint32_t c = 0; c < nc; ++c)
        for (std::uint32_t i = 0; i < 3; ++i) {
            auto ec = edge_chunks[chunks.edge_ids[3 * c + i]];
            chunks.neighbors[3 * c + i] = ec[0] == c ? ec[1] : ec[0];
        }
    // which chunk edge each vertex lies on: a midpoint lies on an edge when both parents do
    std::vector<std::vector<std::uint32_t>> corner_edges(nv);
    for (std::uint32_t e = 0; e < eo.ends.size(); ++e)
        for (std::uint32_t v : eo.ends[e]) corner_edges[v].push_back(e);
    for (std::uint32_t v = 0; v < nv; ++v) {
        if (eo.corner[v] || h.vparent[2 * v] == kNone) continue;
        std::uint32_t a = h.vparent[2 * v], b = h.vparent[2 * v + 1];
        const std::vector<std::uint32_t>& cand =
            eo.corner[a] ? corner_edges[a] : std::vector<std::uint32_t>{eo.cedge[a]};
        for (std::uint32_t e : cand)
            if (e != kNone && on_edge(eo, a, e) && on_edge(eo, b, e)) eo.cedge[v] = e;
    }
    // stitched variants per level (all but the coarsest), chunk and edge mask
    for (std::size_t li = 0; li < L; ++li) {
        Level& lv = levels[li];
        lv.stitch_offsets.assign(static_cast<std::size_t>(nc) * 8 + 1, 0);
        lv.interior.assign(nc, 0);
        const std::size_t nt = lv.chunk.size();
        const bool last = li + 1 == L;
        std::vector<std::uint8_t> removed(nv, 0);
        std::size_t t0 = 0;
        for (std::uint32_t c = 0; c < nc; ++c) {
            std::size_t t1 = t0;
            while (t1 < nt && lv.chunk[t1] == c) ++t1;
            auto edge_index = [&](std::uint32_t v) {
                if (last || levels[li + 1].present[v] || eo.corner[v] || eo.cedge[v] == kNone) return -1;
                for (int i = 0; i < 3; ++i)
                    if (eo.cedge[v] == chunks.edge_ids[3 * c + static_cast<std::uint32_t>(i)]) return i;
                return -1;
            };
            // reorder the chunk: interior triangles first, then the border
            std::vector<std::size_t> inner, border;
            for (std::size_t t = t0; t < t1; ++t) {
                bool b = false;
                for (int k = 0; k < 3; ++k)
                    if (edge_index(lv.triangles[3 * t + static_cast<std::size_t>(k)]) >= 0) b = true;
                (b ? border : inner).push_back(t);
            }
            lv.interior[c] = static_cast<std::uint32_t>(inner.size());
            std::vector<std::uint32_t> tri_new;
            std::vector<float> err_new;
            for (const auto* part : {&inner, &border})
                for (std::size_t t : *part) {
                    for (int k = 0; k < 3; ++k) tri_new.push_back(lv.triangles[3 * t + static_cast<std::size_t>(k)]);
                    err_new.push_back(lv.errors[t]);
                }
            std::copy(tri_new.begin(), tri_new.end(), lv.triangles.begin() + static_cast<std::ptrdiff_t>(3 * t0));
            std::copy(err_new.begin(), err_new.end(), lv.errors.begin() + static_cast<std::ptrdiff_t>(t0));
            std::vector<std::uint32_t> btris(lv.triangles.begin() + static_cast<std::ptrdiff_t>(3 * (t0 + inner.size())),
                                             lv.triangles.begin() + static_cast<std::ptrdiff_t>(3 * t1));
            for (int mask = 0; mask < 8; ++mask) {
                lv.stitch_offsets[static_cast<std::size_t>(c) * 8 + static_cast<std::size_t>(mask)] =
                    lv.stitch.size() / 3;
                if (mask == 0 || !stitch || last) continue;
                bool any = false;
                for (std::uint32_t v : btris) {
                    int ei = edge_index(v);
                    removed[v] = (ei >= 0 && ((mask >> ei) & 1)) ? 1 : 0;
                    any = any || removed[v];
                }
                std::size_t before = lv.stitch.size();
                bool ok = !any || stitch_variant(h, btris, removed, lv.stitch);
                if (!ok) {
                    ++lv.stitch_failures;
                    lv.stitch.resize(before);
                }
                if (!any || !ok) lv.stitch.insert(lv.stitch.end(), btris.begin(), btris.end());
                for (std::uint32_t v : btris) removed[v] = 0;
            }
            t0 = t1;
        }
        lv.stitch_offsets[static_cast<std::size_t>(nc) * 8] = lv.stitch.size() / 3;
    }
    return Status::Ok;
}

}  // namespace gm
