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
#include <chrono>
#include <unordered_map>

#include "measure.hpp"

namespace gm {
namespace {

std::uint64_t edge_key(std::uint32_t a, std::uint32_t b) {
    return (static_cast<std::uint64_t>(std::min(a, b)) << 32) | std::max(a, b);
}

// add node x and everything conforming bisection needs with it
// (every node taken off the stack, the starting ones too, is appended to `added` when given)
void close_set(const Hierarchy& h, std::vector<std::uint8_t>& in, std::vector<std::uint32_t>& stack,
               std::vector<std::uint32_t>* added = nullptr) {
    while (!stack.empty()) {
        std::uint32_t x = stack.back();
        stack.pop_back();
        if (added) added->push_back(x);
        const Node& n = h.nodes[x];
        for (std::uint32_t y : {n.parent, n.pair}) {
            if (y != kNone && !in[y]) {
                in[y] = 1;
                stack.push_back(y);
            }
        }
    }
}

// where a polygon vertex lies on the chunk boundary: the chunk edges through it and, per edge,
// its angle from the edge's first corner. points on one chunk edge are exactly collinear in
// theory but only nearly so in floating point, so collinearity along chunk edges is decided from
// this, not from coordinates.
struct OnEdges {
    std::uint32_t e[6];
    double t[6];
    int n = 0;
    bool find(std::uint32_t edge, double& at) const {
        for (int i = 0; i < n; ++i)
            if (e[i] == edge) {
                at = t[i];
                return true;
            }
        return false;
    }
};

// ear clipping of a simple counter-clockwise polygon in 2d; appends triangles of vertex ids
bool ear_clip(const std::vector<std::uint32_t>& ids, const std::vector<double>& x,
              const std::vector<double>& y, const std::vector<OnEdges>& on,
              std::vector<std::uint32_t>& out) {
    std::vector<int> v(ids.size());
    for (std::size_t i = 0; i < v.size(); ++i) v[i] = static_cast<int>(i);
    auto cross = [&](int a, int b, int c) {
        return (x[b] - x[a]) * (y[c] - y[a]) - (y[b] - y[a]) * (x[c] - x[a]);
    };
    double scale = 0;
    for (std::size_t i = 0; i < ids.size(); ++i) scale = std::max({scale, std::fabs(x[i] - x[0]), std::fabs(y[i] - y[0])});
    const double eps = 1e-12 * scale * scale;
    // a diagonal a-c along a chunk edge must not pass over another polygon vertex on that edge,
    // and three vertices on one chunk edge never make an ear
    auto blocked = [&](int a, int b, int c) {
        const OnEdges& A = on[static_cast<std::size_t>(a)];
        const OnEdges& C = on[static_cast<std::size_t>(c)];
        for (int i = 0; i < A.n; ++i) {
            double ta = A.t[i], tc, tb;
            if (!C.find(A.e[i], tc)) continue;
            if (on[static_cast<std::size_t>(b)].find(A.e[i], tb)) return true;
            double lo = std::min(ta, tc), hi = std::max(ta, tc);
            for (int p : v) {
                double tp;
                if (p != a && p != c && on[static_cast<std::size_t>(p)].find(A.e[i], tp) && tp > lo && tp < hi)
                    return true;
            }
        }
        return false;
    };
    while (v.size() > 3) {
        // the ear with the best-shaped triangle first: fewer slivers than taking the first ear
        int best = -1;
        double best_q = -1;
        const std::size_t n = v.size();
        for (std::size_t i = 0; i < n; ++i) {
            int a = v[(i + n - 1) % n], b = v[i], c = v[(i + 1) % n];
            double area = cross(a, b, c);
            if (area <= eps || blocked(a, b, c)) continue;
            bool empty = true;
            for (std::size_t j = 0; j < n && empty; ++j) {
                int p = v[j];
                if (p == a || p == b || p == c) continue;
                if (cross(a, b, p) >= -eps && cross(b, c, p) >= -eps && cross(c, a, p) >= -eps) empty = false;
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
        if (best < 0) return false;
        std::size_t i = static_cast<std::size_t>(best);
        int a = v[(i + n - 1) % n], b = v[i], c = v[(i + 1) % n];
        out.insert(out.end(), {ids[static_cast<std::size_t>(a)], ids[static_cast<std::size_t>(b)],
                               ids[static_cast<std::size_t>(c)]});
        v.erase(v.begin() + static_cast<std::ptrdiff_t>(i));
    }
    if (v.size() == 3) {
        if (cross(v[0], v[1], v[2]) <= eps || blocked(v[0], v[1], v[2])) return false;
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
// chunk's boundary edges) taken out. the triangles around them form holes; each hole's boundary
// loop, less the removed vertices, is triangulated again. a hole that encloses kept triangles
// (a clockwise inner loop) takes those in too, so every hole is a simple polygon.
bool stitch_attempt(const Hierarchy& h, const EdgeOf& eo,
                    const std::vector<std::vector<std::uint32_t>>& corner_edges,
                    const std::vector<std::uint32_t>& tris, const std::vector<std::uint8_t>& removed,
                    std::vector<std::uint8_t>& hole, std::vector<std::uint32_t>& out) {
    const std::size_t nt = tris.size() / 3;
    auto tv = [&](std::size_t t, int k) { return tris[3 * t + static_cast<std::size_t>(k)]; };
    std::unordered_map<std::uint64_t, std::vector<std::uint32_t>> by_edge;
    for (std::size_t t = 0; t < nt; ++t)
        for (int k = 0; k < 3; ++k)
            by_edge[edge_key(tv(t, k), tv(t, (k + 1) % 3))].push_back(static_cast<std::uint32_t>(t));
    // gnomonic coordinates on the tangent plane at the mean direction of the chunk border
    // (outward normal up): great circles, and so chunk edges, stay straight
    Vec3 m{};
    for (std::size_t t = 0; t < nt; ++t) m += h.dir[tv(t, 0)];
    m = normalize(m);
    Vec3 ax = std::fabs(m.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
    Vec3 e1 = normalize(ax - dot(ax, m) * m);
    Vec3 e2 = cross(m, e1);
    auto xy = [&](std::uint32_t v, double& x, double& y) {
        Vec3 d = h.dir[v];
        double s = dot(d, m);
        x = dot(d, e1) / s;
        y = dot(d, e2) / s;
    };
    std::vector<std::vector<std::uint32_t>> loops;
    for (int attempt = 0;; ++attempt) {
        if (attempt > 16) return false;
        loops.clear();
        // directed boundary edges of the holes (an edge whose reverse is not in a hole)
        std::vector<std::pair<std::uint32_t, std::uint32_t>> dedges, bnd;
        for (std::size_t t = 0; t < nt; ++t)
            if (hole[t])
                for (int k = 0; k < 3; ++k) dedges.emplace_back(tv(t, k), tv(t, (k + 1) % 3));
        std::sort(dedges.begin(), dedges.end());
        for (auto [a, b] : dedges)
            if (!std::binary_search(dedges.begin(), dedges.end(), std::make_pair(b, a)))
                bnd.emplace_back(a, b);
        // trace loops; where a boundary touches itself at a vertex, leave along the edge that
        // turns first clockwise from the way back, which splits it into simple loops
        std::vector<std::uint8_t> used(bnd.size(), 0);
        bool grown = false;
        for (std::size_t s0 = 0; s0 < bnd.size(); ++s0) {
            if (used[s0]) continue;
            std::vector<std::uint32_t> walk;
            std::size_t cur = s0, guard = 0;
            for (;;) {
                used[cur] = 1;
                walk.push_back(bnd[cur].first);
                std::uint32_t p = bnd[cur].second, q = bnd[cur].first;
                if (p == bnd[s0].first) break;
                std::size_t best = bnd.size();
                double best_ang = 1e9, px, py, qx, qy;
                xy(p, px, py);
                xy(q, qx, qy);
                double back = std::atan2(qy - py, qx - px);
                for (std::size_t k = 0; k < bnd.size(); ++k) {
                    if (used[k] || bnd[k].first != p) continue;
                    double rx, ry;
                    xy(bnd[k].second, rx, ry);
                    double ang = back - std::atan2(ry - py, rx - px);  // clockwise turn
                    while (ang <= 0) ang += 2 * 3.14159265358979323846;
                    if (ang < best_ang) {
                        best_ang = ang;
                        best = k;
                    }
                }
                if (best == bnd.size() || ++guard > bnd.size()) return false;
                cur = best;
            }
            // a walk that passes a vertex twice is several loops touching there: cut them apart
            std::vector<std::vector<std::uint32_t>> parts;
            std::vector<std::uint32_t> stack;
            for (std::uint32_t v : walk) {
                auto it = std::find(stack.begin(), stack.end(), v);
                if (it != stack.end()) {
                    parts.emplace_back(it, stack.end());
                    stack.erase(it + 1, stack.end());
                } else {
                    stack.push_back(v);
                }
            }
            parts.push_back(stack);
            for (auto& part : parts) {
                if (part.size() < 3) continue;
                // signed area (shoelace): a clockwise loop encloses kept triangles
                double area = 0;
                for (std::size_t i = 0; i < part.size(); ++i) {
                    double x0, y0, x1, y1;
                    xy(part[i], x0, y0);
                    xy(part[(i + 1) % part.size()], x1, y1);
                    area += x0 * y1 - x1 * y0;
                }
                if (area < 0) {
                    for (std::size_t i = 0; i < part.size(); ++i) {
                        std::uint32_t a = part[i], b = part[(i + 1) % part.size()];
                        for (std::uint32_t t : by_edge[edge_key(a, b)])
                            if (!hole[t]) {
                                hole[t] = 1;
                                grown = true;
                            }
                    }
                    continue;
                }
                loops.push_back(std::move(part));
            }
        }
        if (!grown) break;
    }
    for (std::size_t t = 0; t < nt; ++t)
        if (!hole[t]) out.insert(out.end(), {tv(t, 0), tv(t, 1), tv(t, 2)});
    for (const auto& walk : loops) {
        // the removed vertices leave the loop: p -> r -> q becomes p -> q
        std::vector<std::uint32_t> loop;
        for (std::uint32_t v : walk)
            if (!removed[v]) loop.push_back(v);
        if (loop.size() < 3) return false;
        std::vector<double> x(loop.size()), y(loop.size());
        std::vector<OnEdges> on(loop.size());
        for (std::size_t i = 0; i < loop.size(); ++i) {
            std::uint32_t v = loop[i];
            xy(v, x[i], y[i]);
            auto add = [&](std::uint32_t e) {
                OnEdges& o = on[i];
                if (o.n == 6) return;
                o.e[o.n] = e;
                o.t[o.n] = angle(h.dir[eo.ends[e][0]], h.dir[v]);
                ++o.n;
            };
            if (eo.corner[v])
                for (std::uint32_t e : corner_edges[v]) add(e);
            else if (eo.cedge[v] != kNone)
                add(eo.cedge[v]);
        }
        if (!ear_clip(loop, x, y, on, out)) return false;
    }
    return true;
}

// do two chunk-boundary vertices lie on one chunk edge?
bool same_chunk_edge(const EdgeOf& eo, const std::vector<std::vector<std::uint32_t>>& corner_edges,
                     std::uint32_t a, std::uint32_t b) {
    const std::vector<std::uint32_t> none;
    const std::vector<std::uint32_t> ea_one{eo.cedge[a]};
    const std::vector<std::uint32_t>& ea = eo.corner[a] ? corner_edges[a] : (eo.cedge[a] == kNone ? none : ea_one);
    for (std::uint32_t e : ea)
        if (e != kNone && on_edge(eo, b, e)) return true;
    return false;
}

// a variant is valid when no directed edge repeats and its open edges are the border's own open
// edges (less those at removed vertices) plus edges along chunk edges
bool variant_valid(const EdgeOf& eo, const std::vector<std::vector<std::uint32_t>>& corner_edges,
                   const std::vector<std::uint32_t>& tris, const std::vector<std::uint8_t>& removed,
                   const std::uint32_t* var, std::size_t nvar) {
    auto directed = [](const std::uint32_t* t, std::size_t n) {
        std::vector<std::pair<std::uint32_t, std::uint32_t>> d;
        for (std::size_t i = 0; i < n; ++i)
            for (int k = 0; k < 3; ++k) d.emplace_back(t[3 * i + static_cast<std::size_t>(k)], t[3 * i + static_cast<std::size_t>((k + 1) % 3)]);
        std::sort(d.begin(), d.end());
        return d;
    };
    auto open = [](const std::vector<std::pair<std::uint32_t, std::uint32_t>>& d) {
        std::vector<std::pair<std::uint32_t, std::uint32_t>> o;
        for (auto [a, b] : d)
            if (!std::binary_search(d.begin(), d.end(), std::make_pair(b, a))) o.emplace_back(a, b);
        return o;
    };
    auto dv = directed(var, nvar);
    if (std::adjacent_find(dv.begin(), dv.end()) != dv.end()) return false;
    auto ov = open(dv);
    auto oo = open(directed(tris.data(), tris.size() / 3));
    for (auto [a, b] : oo) {
        if (removed[a] || removed[b]) continue;
        if (!std::binary_search(ov.begin(), ov.end(), std::make_pair(a, b))) return false;
    }
    for (auto [a, b] : ov) {
        if (std::binary_search(oo.begin(), oo.end(), std::make_pair(a, b))) continue;
        if (!same_chunk_edge(eo, corner_edges, a, b)) return false;
    }
    return true;
}

// one stitched variant, checked; a failed attempt retries with the hole grown by a ring of
// triangles (a larger hole swallows kept triangles it would otherwise enclose)
bool stitch_variant(const Hierarchy& h, const EdgeOf& eo,
                    const std::vector<std::vector<std::uint32_t>>& corner_edges,
                    const std::vector<std::uint32_t>& tris, const std::vector<std::uint8_t>& removed,
                    std::vector<std::uint32_t>& out) {
    const std::size_t nt = tris.size() / 3;
    std::vector<std::uint8_t> hole(nt, 0);
    for (std::size_t t = 0; t < nt; ++t)
        for (int k = 0; k < 3; ++k)
            if (removed[tris[3 * t + static_cast<std::size_t>(k)]]) hole[t] = 1;
    const std::size_t start = out.size();
    for (int ring = 0; ring < 4; ++ring) {
        std::vector<std::uint8_t> attempt_hole(hole);
        if (stitch_attempt(h, eo, corner_edges, tris, removed, attempt_hole, out) &&
            variant_valid(eo, corner_edges, tris, removed, out.data() + start, (out.size() - start) / 3))
            return true;
        out.resize(start);
        // grow: every triangle sharing a vertex with the hole joins it
        std::vector<std::uint8_t> touch(h.dir.size(), 0);
        for (std::size_t t = 0; t < nt; ++t)
            if (attempt_hole[t])
                for (int k = 0; k < 3; ++k) touch[tris[3 * t + static_cast<std::size_t>(k)]] = 1;
        for (std::size_t t = 0; t < nt; ++t)
            for (int k = 0; k < 3; ++k)
                if (touch[tris[3 * t + static_cast<std::size_t>(k)]]) hole[t] = 1;
    }
    return false;
}

}  // namespace

Status extract_levels(const Field& field, Hierarchy& h, const std::vector<double>& tolerances,
                      int verify_order, int threads, bool stitch, std::vector<Level>& levels,
                      ChunkInfo& chunks, std::string& error, const Hierarchy* previous,
                      const std::vector<const Level*>* previous_levels) {
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
    using Clock = std::chrono::steady_clock;
    auto since = [](Clock::time_point t) { return std::chrono::duration<double>(Clock::now() - t).count(); };
    for (std::size_t li = L; li-- > 0;) {
        const auto t_level = Clock::now();
        const double eps = tolerances[li];
        Level& lv = levels[li];
        lv.tolerance_m = eps;
        in = coarser;
        // the closure in one pass from the last node down (a parent comes before its children, so
        // it is reached after them); a pair already passed goes through close_set. 2 marks nodes
        // new to this level (the coarser level's set is closed already).
        for (std::uint32_t i = static_cast<std::uint32_t>(nn); i-- > 0;) {
            const Node& n = h.nodes[i];
            if (!in[i]) {
                if (n.child == kNone || !(n.level < h.min_level || n.tau > eps)) continue;
                in[i] = 2;
            }
            if (in[i] != 2) continue;
            if (n.parent != kNone && !in[n.parent]) in[n.parent] = 2;
            if (n.pair != kNone && !in[n.pair]) {
                in[n.pair] = 2;
                if (n.pair > i) stack.push_back(n.pair);
            }
        }
        close_set(h, in, stack);
        for (std::uint8_t& x : in) x = x ? 1 : 0;
        // verification of this level's leaves (measurements are cached on the nodes): first every
        // leaf, then the new leaves under the nodes each repair adds
        auto leaves_now = [&](std::vector<std::uint32_t>& out) {
            out.clear();
            for (std::uint32_t i = 0; i < nn; ++i) {
                const Node& n = h.nodes[i];
                if (!in[i] && (n.parent == kNone || in[n.parent])) out.push_back(i);
            }
        };
        std::vector<std::uint32_t> leaves, check, added;
        leaves_now(check);
        // the same sampling as the hierarchy's own verification
        const double spacing = verify_spacing(field, h.tolerance);
        while (verify_order > 0 && !check.empty()) {
            parallel_for(check.size(), threads, [&](std::size_t b, std::size_t e) {
                for (std::size_t k = b; k < e; ++k) {
                    Node& t = h.nodes[check[k]];
                    if (t.err >= 0) continue;
                    double m2s, s2m;
                    t.err = static_cast<float>(triangle_deviation(field, h.pos(t.v[0]), h.pos(t.v[1]),
                                                                  h.pos(t.v[2]), verify_order, m2s, s2m,
                                                                  spacing));
                    t.m2s = static_cast<float>(m2s);
                    t.s2m = static_cast<float>(s2m);
                }
            });
            for (std::uint32_t id : check) {
                const Node& t = h.nodes[id];
                if (t.err > kVerifyMargin * eps && t.child != kNone && !at_floor(h, t, eps)) {
                    in[id] = 1;
                    stack.push_back(id);
                    ++lv.repaired;
                }
            }
            added.clear();
            close_set(h, in, stack, &added);
            check.clear();
            for (std::uint32_t x : added) {
                const std::uint32_t c = h.nodes[x].child;
                if (c == kNone) continue;
                if (!in[c]) check.push_back(c);
                if (!in[c + 1]) check.push_back(c + 1);
            }
            std::sort(check.begin(), check.end());
        }
        leaves_now(leaves);
        coarser = in;
        // triangles grouped by chunk, in node order within a chunk (a counting sort)
        std::vector<std::uint32_t> first(static_cast<std::size_t>(h.chunks) + 1, 0), order(leaves.size());
        for (std::uint32_t id : leaves) ++first[h.nodes[id].chunk + 1];
        for (std::size_t c = 0; c < h.chunks; ++c) first[c + 1] += first[c];
        for (std::uint32_t id : leaves) order[first[h.nodes[id].chunk]++] = id;
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
        lv.seconds += since(t_level);
    }
    // morph targets, fine to coarse
    for (std::size_t li = 0; li < L; ++li) {
        const auto t_morph = Clock::now();
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
        lv.seconds += since(t_morph);
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
    // incremental: the previous vertex of every vertex and back
    const bool memo = previous && previous_levels && previous_levels->size() == L &&
                      h.vorigin.size() == nv;
    std::vector<std::uint32_t> to_new;
    if (memo) {
        to_new.assign(previous->dir.size(), kNone);
        for (std::uint32_t v = 0; v < nv; ++v)
            if (h.vorigin[v] != kNone) to_new[h.vorigin[v]] = v;
    }
    // stitched variants per level (all but the coarsest), chunk and edge mask
    for (std::size_t li = 0; li < L; ++li) {
        const auto t_seams = Clock::now();
        Level& lv = levels[li];
        lv.stitch_offsets.assign(static_cast<std::size_t>(nc) * 8 + 1, 0);
        lv.interior.assign(nc, 0);
        lv.same.assign(nc, 0);
        lv.failed.assign(nc, 0);
        const Level* ol = memo ? (*previous_levels)[li] : nullptr;
        std::vector<std::size_t> ostart;
        if (ol) {
            ostart.assign(static_cast<std::size_t>(nc) + 1, ol->chunk.size());
            for (std::size_t t = ol->chunk.size(); t-- > 0;) ostart[ol->chunk[t]] = t;
            for (std::size_t c = nc; c-- > 0;) ostart[c] = std::min(ostart[c], ostart[c + 1]);
        }
        const std::size_t nt = lv.chunk.size();
        const bool last = li + 1 == L;
        std::vector<std::size_t> start(static_cast<std::size_t>(nc) + 1, nt);
        for (std::size_t t = nt; t-- > 0;) start[lv.chunk[t]] = t;
        for (std::size_t c = nc; c-- > 0;) start[c] = std::min(start[c], start[c + 1]);
        // every chunk on its own (in parallel: each writes only its own triangles and piece),
        // then the pieces in chunk order
        struct Piece {
            std::vector<std::uint32_t> stitch;
            std::uint64_t off[8] = {};
            std::uint64_t failures = 0;
        };
        std::vector<Piece> pieces(nc);
        parallel_for(nc, threads, [&](std::size_t cb, std::size_t ce) {
            // scratch per thread: all zero between uses
            thread_local std::vector<std::uint8_t> removed;
            if (removed.size() != nv) removed.assign(nv, 0);
            std::vector<std::uint32_t> verts;
            for (std::uint32_t c = static_cast<std::uint32_t>(cb); c < ce; ++c) {
                Piece& pc = pieces[c];
                const std::size_t t0 = start[c], t1 = start[c + 1];
                auto edge_index = [&](std::uint32_t v) {
                    if (last || levels[li + 1].present[v] || eo.corner[v] || eo.cedge[v] == kNone) return -1;
                    for (int i = 0; i < 3; ++i)
                        if (eo.cedge[v] == chunks.edge_ids[3 * c + static_cast<std::uint32_t>(i)]) return i;
                    return -1;
                };
                // the border: triangles around the boundary vertices the coarser level lacks. if
                // a variant cannot be stitched inside it (its holes would enclose interior
                // triangles), the border grows by a ring of triangles and every variant is made again
                std::vector<std::uint8_t> in_border(t1 - t0, 0);
                for (std::size_t t = t0; t < t1; ++t)
                    for (int k = 0; k < 3; ++k)
                        if (edge_index(lv.triangles[3 * t + static_cast<std::size_t>(k)]) >= 0) in_border[t - t0] = 1;
                std::vector<std::uint32_t> chunk_tris(lv.triangles.begin() + static_cast<std::ptrdiff_t>(3 * t0),
                                                      lv.triangles.begin() + static_cast<std::ptrdiff_t>(3 * t1));
                std::vector<float> chunk_err(lv.errors.begin() + static_cast<std::ptrdiff_t>(t0),
                                             lv.errors.begin() + static_cast<std::ptrdiff_t>(t1));
                // write the chunk back: interior first, then the border
                auto write_back = [&]() {
                    std::size_t w = t0, ni = 0;
                    for (int pass = 0; pass < 2; ++pass)
                        for (std::size_t t = 0; t < t1 - t0; ++t) {
                            if (in_border[t] != pass) continue;
                            for (int k = 0; k < 3; ++k)
                                lv.triangles[3 * w + static_cast<std::size_t>(k)] = chunk_tris[3 * t + static_cast<std::size_t>(k)];
                            lv.errors[w] = chunk_err[t];
                            ++w;
                            if (pass == 0) ++ni;
                        }
                    lv.interior[c] = static_cast<std::uint32_t>(ni);
                };
                // incremental: the same chunk as before takes its previous stitching
                bool same = ol && ol->failed.size() == nc && ol->failed[c] == 0 &&
                            ostart[c + 1] - ostart[c] == t1 - t0;
                if (same) {
                    std::size_t o = ostart[c], ni = 0;
                    for (int pass = 0; pass < 2 && same; ++pass)
                        for (std::size_t t = 0; t < t1 - t0 && same; ++t) {
                            if (in_border[t] != pass) continue;
                            for (int k = 0; k < 3; ++k) {
                                std::uint32_t v = chunk_tris[3 * t + static_cast<std::size_t>(k)];
                                if (h.vorigin[v] != ol->triangles[3 * o + static_cast<std::size_t>(k)]) same = false;
                            }
                            ++o;
                            if (pass == 0) ++ni;
                        }
                    same = same && ni == ol->interior[c];
                }
                if (same) {
                    // vertices: same positions, morph targets and coarser-level membership, and
                    // their ids in the same order (stitching breaks ties by id)
                    verts.assign(chunk_tris.begin(), chunk_tris.end());
                    std::sort(verts.begin(), verts.end());
                    verts.erase(std::unique(verts.begin(), verts.end()), verts.end());
                    const Level* on = last ? nullptr : (*previous_levels)[li + 1];
                    std::uint32_t prev_ov = 0;
                    for (std::size_t i = 0; i < verts.size() && same; ++i) {
                        std::uint32_t v = verts[i], ov = h.vorigin[v];
                        same = ov != kNone && (i == 0 || ov > prev_ov) && h.rad[v] == previous->rad[ov] &&
                               (last || levels[li + 1].present[v] == on->present[ov]);
                        for (int k = 0; k < 3 && same; ++k)
                            same = lv.morph[3 * v + static_cast<std::size_t>(k)] ==
                                   ol->morph[3 * ov + static_cast<std::size_t>(k)];
                        prev_ov = ov;
                    }
                }
                if (same) {
                    for (int mask = 0; mask < 8; ++mask) {
                        const std::size_t ci = static_cast<std::size_t>(c) * 8 + static_cast<std::size_t>(mask);
                        pc.off[mask] = pc.stitch.size() / 3;
                        for (std::uint64_t i = 3 * ol->stitch_offsets[ci]; i < 3 * ol->stitch_offsets[ci + 1]; ++i)
                            pc.stitch.push_back(to_new[ol->stitch[i]]);
                    }
                    write_back();
                    lv.same[c] = 1;
                    continue;
                }
                for (int grow = 0;; ++grow) {
                    pc.stitch.clear();
                    std::vector<std::uint32_t> btris, itris;
                    for (std::size_t t = 0; t < t1 - t0; ++t)
                        (in_border[t] ? btris : itris).insert((in_border[t] ? btris : itris).end(),
                                                              {chunk_tris[3 * t], chunk_tris[3 * t + 1], chunk_tris[3 * t + 2]});
                    std::uint64_t failures = 0;
                    for (int mask = 0; mask < 8; ++mask) {
                        pc.off[mask] = pc.stitch.size() / 3;
                        if (mask == 0 || !stitch || last) continue;
                        bool any = false;
                        for (std::uint32_t v : btris) {
                            int ei = edge_index(v);
                            removed[v] = (ei >= 0 && ((mask >> ei) & 1)) ? 1 : 0;
                            any = any || removed[v];
                        }
                        std::size_t before = pc.stitch.size();
                        bool ok = !any || stitch_variant(h, eo, corner_edges, btris, removed, pc.stitch);
                        if (!ok) {
                            ++failures;
                            pc.stitch.resize(before);
                        }
                        if (!any || !ok) pc.stitch.insert(pc.stitch.end(), btris.begin(), btris.end());
                        for (std::uint32_t v : btris) removed[v] = 0;
                    }
                    if (failures == 0 || grow == 3) {
                        pc.failures = failures;
                        lv.failed[c] = static_cast<std::uint8_t>(failures);
                        write_back();
                        break;
                    }
                    std::vector<std::uint8_t> touch(nv, 0);
                    for (std::size_t t = 0; t < t1 - t0; ++t)
                        if (in_border[t])
                            for (int k = 0; k < 3; ++k) touch[chunk_tris[3 * t + static_cast<std::size_t>(k)]] = 1;
                    for (std::size_t t = 0; t < t1 - t0; ++t)
                        for (int k = 0; k < 3; ++k)
                            if (touch[chunk_tris[3 * t + static_cast<std::size_t>(k)]]) in_border[t] = 1;
                }
            }
        }, 1);
        for (std::uint32_t c = 0; c < nc; ++c) {
            const Piece& pc = pieces[c];
            const std::uint64_t base = lv.stitch.size() / 3;
            for (int mask = 0; mask < 8; ++mask)
                lv.stitch_offsets[static_cast<std::size_t>(c) * 8 + static_cast<std::size_t>(mask)] = base + pc.off[mask];
            lv.stitch.insert(lv.stitch.end(), pc.stitch.begin(), pc.stitch.end());
            lv.stitch_failures += pc.failures;
        }
        lv.stitch_offsets[static_cast<std::size_t>(nc) * 8] = lv.stitch.size() / 3;
        lv.seconds += since(t_seams);
    }
    return Status::Ok;
}

}  // namespace gm
