// stitched seams: the triangles around the removed vertices are taken out and each hole's
// boundary loop is triangulated again by ear clipping (Meisters 1975, csrc/ear_clip.cpp). the
// holes are traced as loops of directed boundary edges; where a boundary touches itself at a
// vertex the walk leaves along the edge that turns first clockwise from the way back, which cuts
// it into simple loops; a clockwise loop (negative shoelace area) encloses kept triangles, which
// join the hole, so every hole is a simple polygon.
#include "stitch.hpp"

#include <algorithm>
#include <cmath>
#include <unordered_map>
#include <utility>

#include "ear_clip.hpp"

namespace gm {

namespace {

using Edge = std::pair<std::uint32_t, std::uint32_t>;
using Loop = std::vector<std::uint32_t>;

class Stitcher {
public:
    Stitcher(const Hierarchy& h, const ChunkEdges& edges, const std::vector<std::uint32_t>& tris,
             const std::vector<std::uint8_t>& removed)
        : h_(h), edges_(edges), tris_(tris), removed_(removed), nt_(tris.size() / 3) {
        for (std::size_t t = 0; t < nt_; ++t)
            for (int k = 0; k < 3; ++k)
                by_edge_[edge_key(tv(t, k), tv(t, (k + 1) % 3))].push_back(static_cast<std::uint32_t>(t));
        // gnomonic coordinates on the tangent plane at the mean direction of the chunk border
        // (outward normal up): great circles, and so chunk edges, stay straight
        for (std::size_t t = 0; t < nt_; ++t) m_ += h.dir[tv(t, 0)];
        m_ = normalize(m_);
        const Vec3 ax = std::fabs(m_.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
        e1_ = normalize(ax - dot(ax, m_) * m_);
        e2_ = cross(m_, e1_);
    }

    // one attempt with the triangles in `hole` taken out (the hole may grow); appends the kept
    // triangles and the holes' triangulations
    bool attempt(std::vector<std::uint8_t>& hole, std::vector<std::uint32_t>& out) const {
        std::vector<Loop> loops;
        if (!simple_loops(hole, loops)) return false;
        for (std::size_t t = 0; t < nt_; ++t)
            if (!hole[t]) out.insert(out.end(), {tv(t, 0), tv(t, 1), tv(t, 2)});
        for (const Loop& walk : loops)
            if (!fill(walk, out)) return false;
        return true;
    }

private:
    std::uint32_t tv(std::size_t t, int k) const { return tris_[3 * t + static_cast<std::size_t>(k)]; }

    void xy(std::uint32_t v, double& x, double& y) const {
        const Vec3 d = h_.dir[v];
        const double s = dot(d, m_);
        x = dot(d, e1_) / s;
        y = dot(d, e2_) / s;
    }

    // directed boundary edges of the holes (an edge whose reverse is not in a hole)
    std::vector<Edge> boundary(const std::vector<std::uint8_t>& hole) const {
        std::vector<Edge> dedges, bnd;
        for (std::size_t t = 0; t < nt_; ++t)
            if (hole[t])
                for (int k = 0; k < 3; ++k) dedges.emplace_back(tv(t, k), tv(t, (k + 1) % 3));
        std::sort(dedges.begin(), dedges.end());
        for (auto [a, b] : dedges)
            if (!std::binary_search(dedges.begin(), dedges.end(), std::make_pair(b, a))) bnd.emplace_back(a, b);
        return bnd;
    }

    // the boundary edge to leave p by, arriving from q: the first clockwise from the way back
    std::size_t next_edge(const std::vector<Edge>& bnd, const std::vector<std::uint8_t>& used, std::uint32_t p,
                          std::uint32_t q) const {
        std::size_t best = bnd.size();
        double best_ang = 1e9, px, py, qx, qy;
        xy(p, px, py);
        xy(q, qx, qy);
        const double back = std::atan2(qy - py, qx - px);
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
        return best;
    }

    // the closed walk of boundary edges from edge s0 (their first vertices)
    bool trace(const std::vector<Edge>& bnd, std::vector<std::uint8_t>& used, std::size_t s0, Loop& walk) const {
        std::size_t cur = s0, guard = 0;
        for (;;) {
            used[cur] = 1;
            walk.push_back(bnd[cur].first);
            const std::uint32_t p = bnd[cur].second, q = bnd[cur].first;
            if (p == bnd[s0].first) return true;
            const std::size_t best = next_edge(bnd, used, p, q);
            if (best == bnd.size() || ++guard > bnd.size()) return false;
            cur = best;
        }
    }

    // a walk that passes a vertex twice is several loops touching there: cut them apart
    static std::vector<Loop> split_touching(const Loop& walk) {
        std::vector<Loop> parts;
        Loop stack;
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
        return parts;
    }

    // twice the signed area (shoelace) of a loop in the plane: negative when clockwise
    double signed_area(const Loop& part) const {
        double area = 0;
        for (std::size_t i = 0; i < part.size(); ++i) {
            double x0, y0, x1, y1;
            xy(part[i], x0, y0);
            xy(part[(i + 1) % part.size()], x1, y1);
            area += x0 * y1 - x1 * y0;
        }
        return area;
    }

    // the kept triangles along a clockwise loop join the hole; true when any did
    bool swallow(const Loop& part, std::vector<std::uint8_t>& hole) const {
        bool grown = false;
        for (std::size_t i = 0; i < part.size(); ++i) {
            auto it = by_edge_.find(edge_key(part[i], part[(i + 1) % part.size()]));
            if (it == by_edge_.end()) continue;
            for (std::uint32_t t : it->second)
                if (!hole[t]) {
                    hole[t] = 1;
                    grown = true;
                }
        }
        return grown;
    }

    // the holes' boundaries as simple counter-clockwise loops, the hole grown until there is no
    // clockwise one (at most 16 times)
    bool simple_loops(std::vector<std::uint8_t>& hole, std::vector<Loop>& loops) const {
        for (int attempt = 0; attempt <= 16; ++attempt) {
            loops.clear();
            const std::vector<Edge> bnd = boundary(hole);
            std::vector<std::uint8_t> used(bnd.size(), 0);
            bool grown = false;
            for (std::size_t s0 = 0; s0 < bnd.size(); ++s0) {
                if (used[s0]) continue;
                Loop walk;
                if (!trace(bnd, used, s0, walk)) return false;
                for (Loop& part : split_touching(walk)) {
                    if (part.size() < 3) continue;
                    if (signed_area(part) < 0) {
                        grown = swallow(part, hole) || grown;
                        continue;
                    }
                    loops.push_back(std::move(part));
                }
            }
            if (!grown) return true;
        }
        return false;
    }

    // the angle of vertex v from the first corner of chunk edge e
    double along_edge(std::uint32_t e, std::uint32_t v) const { return angle(h_.dir[edges_.ends[e][0]], h_.dir[v]); }

    // triangulate one hole loop less its removed vertices (p -> r -> q becomes p -> q)
    bool fill(const Loop& walk, std::vector<std::uint32_t>& out) const {
        Loop loop;
        for (std::uint32_t v : walk)
            if (!removed_[v]) loop.push_back(v);
        if (loop.size() < 3) return false;
        std::vector<double> x(loop.size()), y(loop.size());
        std::vector<OnEdges> on(loop.size());
        for (std::size_t i = 0; i < loop.size(); ++i) {
            const std::uint32_t v = loop[i];
            xy(v, x[i], y[i]);
            if (edges_.corner[v])
                for (std::uint32_t e : edges_.corner_edges[v]) on[i].add(e, along_edge(e, v));
            else if (edges_.cedge[v] != kNone)
                on[i].add(edges_.cedge[v], along_edge(edges_.cedge[v], v));
        }
        return ear_clip(loop, x, y, on, out);
    }

    const Hierarchy& h_;
    const ChunkEdges& edges_;
    const std::vector<std::uint32_t>& tris_;
    const std::vector<std::uint8_t>& removed_;
    const std::size_t nt_;
    std::unordered_map<std::uint64_t, std::vector<std::uint32_t>> by_edge_;
    Vec3 m_{}, e1_{}, e2_{};
};

// directed edges of n triangles, sorted
std::vector<Edge> directed_edges(const std::uint32_t* t, std::size_t n) {
    std::vector<Edge> d;
    for (std::size_t i = 0; i < n; ++i)
        for (std::size_t k = 0; k < 3; ++k) d.emplace_back(t[3 * i + k], t[3 * i + (k + 1) % 3]);
    std::sort(d.begin(), d.end());
    return d;
}

// the directed edges whose reverse is absent (sorted in, sorted out)
std::vector<Edge> open_edges(const std::vector<Edge>& d) {
    std::vector<Edge> o;
    for (auto [a, b] : d)
        if (!std::binary_search(d.begin(), d.end(), std::make_pair(b, a))) o.emplace_back(a, b);
    return o;
}

// a variant is valid when no directed edge repeats and its open edges are the border's own open
// edges (less those at removed vertices) plus edges along chunk edges
bool variant_valid(const ChunkEdges& edges, const std::vector<std::uint32_t>& tris,
                   const std::vector<std::uint8_t>& removed, const std::uint32_t* var, std::size_t nvar) {
    const std::vector<Edge> dv = directed_edges(var, nvar);
    if (std::adjacent_find(dv.begin(), dv.end()) != dv.end()) return false;
    const std::vector<Edge> ov = open_edges(dv);
    const std::vector<Edge> oo = open_edges(directed_edges(tris.data(), tris.size() / 3));
    for (auto [a, b] : oo) {
        if (removed[a] || removed[b]) continue;
        if (!std::binary_search(ov.begin(), ov.end(), std::make_pair(a, b))) return false;
    }
    for (auto [a, b] : ov) {
        if (std::binary_search(oo.begin(), oo.end(), std::make_pair(a, b))) continue;
        if (!edges.share_edge(a, b)) return false;
    }
    return true;
}

}  // namespace

void grow_ring(const std::vector<std::uint32_t>& tris, const std::vector<std::uint8_t>& from, std::size_t nv,
               std::vector<std::uint8_t>& set) {
    const std::size_t nt = tris.size() / 3;
    std::vector<std::uint8_t> touch(nv, 0);
    for (std::size_t t = 0; t < nt; ++t)
        if (from[t])
            for (std::size_t k = 0; k < 3; ++k) touch[tris[3 * t + k]] = 1;
    for (std::size_t t = 0; t < nt; ++t)
        for (std::size_t k = 0; k < 3; ++k)
            if (touch[tris[3 * t + k]]) set[t] = 1;
}

bool stitch_variant(const Hierarchy& h, const ChunkEdges& edges, const std::vector<std::uint32_t>& tris,
                    const std::vector<std::uint8_t>& removed, std::vector<std::uint32_t>& out) {
    const std::size_t nt = tris.size() / 3;
    std::vector<std::uint8_t> hole(nt, 0);
    for (std::size_t t = 0; t < nt; ++t)
        for (std::size_t k = 0; k < 3; ++k)
            if (removed[tris[3 * t + k]]) hole[t] = 1;
    const Stitcher stitcher(h, edges, tris, removed);
    const std::size_t start = out.size();
    // a failed attempt retries with the hole grown by a ring of triangles (a larger hole
    // swallows kept triangles it would otherwise enclose)
    for (int ring = 0; ring < 4; ++ring) {
        std::vector<std::uint8_t> attempt_hole(hole);
        if (stitcher.attempt(attempt_hole, out) &&
            variant_valid(edges, tris, removed, out.data() + start, (out.size() - start) / 3))
            return true;
        out.resize(start);
        grow_ring(tris, attempt_hole, h.dir.size(), hole);
    }
    return false;
}

}  // namespace gm
