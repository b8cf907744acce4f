// the collider angle pass. a height field over a mesh of well-shaped directions is not well
// shaped in space where the ground is steep: a triangle straddling a vertical wall of height h
// with a foot edge of length s has an angle of about s / h at the top. the pass removes such
// slivers with the classic local moves of mesh improvement, edge collapse and edge flip (Hoppe,
// DeRose, Duchamp, McDonald & Stuetzle, "Mesh optimization", 1993), taking a move only when it
// raises the smallest angle it touches (the min-angle criterion of Lawson's flips, 1977) and keeps
// the collider within its tolerance of the true surface. each accepted move makes the sorted list
// of all angles lexicographically larger or removes a vertex, so the pass ends.
#include "collider_angles.hpp"

#include <algorithm>
#include <cmath>
#include <functional>
#include <queue>
#include <tuple>
#include <utility>

#include "measure.hpp"
#include "refine.hpp"

namespace gm {

double smallest_angle_deg(Vec3 a, Vec3 b, Vec3 c) {
    const Vec3 p[3] = {a, b, c};
    double best = 180;
    for (int k = 0; k < 3; ++k) {
        const Vec3 u = p[(k + 1) % 3] - p[k], w = p[(k + 2) % 3] - p[k];
        const double ang = std::atan2(norm(cross(u, w)), dot(u, w)) * 57.295779513082320876798154814105;
        best = std::min(best, ang);
    }
    return best;
}

namespace {

// a changed triangle's normal may turn by at most about 75 degrees (no folds)
constexpr double kMinNormalCos = 0.25;
// rounds over the triangles still below the target after the queue empties (a neighbour's move
// can unblock a triangle without changing it)
constexpr int kRounds = 4;

struct Tri {
    std::uint32_t v[3];
};

// one triangle a pending move changes: its new corners, or removed
struct Change {
    std::uint32_t t;
    Tri tri;
    bool dead;
};

// the mesh the pass works on, shared by its workers
struct AngleMesh {
    AngleMesh(const Field& f, const std::vector<double>& P, const std::vector<std::uint32_t>& tris,
              const std::vector<std::uint32_t>& chunk, double target, double tol, int order)
        : f(f), P(P), chunk(chunk), target(target), tol(tol), order(order) {
        const std::size_t T = chunk.size();
        t.resize(T);
        alive.assign(T, 1);
        ang.resize(T);
        dev.assign(T, -1.0);
        m2s.assign(T, 0.0);
        inc.resize(P.size() / 3);
        border.assign(P.size() / 3, 0);
        std::vector<std::uint32_t> owner(P.size() / 3, kNoChunk);
        for (std::size_t i = 0; i < T; ++i) {
            for (int k = 0; k < 3; ++k) {
                const std::uint32_t v = tris[3 * i + static_cast<std::size_t>(k)];
                t[i].v[k] = v;
                inc[v].push_back(static_cast<std::uint32_t>(i));
                if (owner[v] == kNoChunk) owner[v] = chunk[i];
                else if (owner[v] != chunk[i]) border[v] = 1;
            }
            ang[i] = smallest_angle_deg(pos(t[i].v[0]), pos(t[i].v[1]), pos(t[i].v[2]));
        }
    }
    Vec3 pos(std::uint32_t v) const {
        const double* q = &P[3 * static_cast<std::size_t>(v)];
        return {q[0], q[1], q[2]};
    }
    static constexpr std::uint32_t kNoChunk = 0xffffffffu;

    const Field& f;
    const std::vector<double>& P;
    const std::vector<std::uint32_t>& chunk;
    const double target, tol;
    const int order;
    std::vector<Tri> t;
    std::vector<std::uint8_t> alive;
    std::vector<double> ang;
    std::vector<double> dev;  // deviation with the current surroundings (< 0: not yet measured)
    std::vector<double> m2s;  // mesh -> surface part of dev
    std::vector<std::vector<std::uint32_t>> inc;
    std::vector<std::uint8_t> border;  // vertex of triangles of two or more chunks
};

// one worker of the pass. `local`: only moves whose triangles (before and after) have no border
// vertex are taken; a triangle touching a border vertex then never changes, nor does a border
// vertex's triangle list, so workers on different chunks read nothing another one writes and
// each chunk's result depends on that chunk alone, not on the thread count.
class AnglePass {
public:
    AnglePass(AngleMesh& m, bool local)
        : f_(m.f), P_(m.P), chunk_(m.chunk), target_(m.target), tol_(m.tol), order_(m.order), t_(m.t),
          alive_(m.alive), ang_(m.ang), dev_(m.dev), m2s_(m.m2s), inc_(m.inc), border_(m.border), local_(local) {}

    // improves the triangles [b, e) below the target, best first, in rounds until none moves
    AngleStats run(std::uint32_t b, std::uint32_t e) {
        for (int round = 0; round < kRounds; ++round) {
            const std::uint64_t moves = stats_.collapses + stats_.flips;
            for (std::uint32_t t = b; t < e; ++t)
                if (alive_[t] && ang_[t] < target_ && !(local_ && touches_border(t))) queue_.push({ang_[t], t});
            while (!queue_.empty()) {
                const auto [a, t] = queue_.top();
                queue_.pop();
                if (!alive_[t] || a != ang_[t]) continue;  // stale entry
                improve(t);
            }
            if (stats_.collapses + stats_.flips == moves) break;
        }
        return stats_;
    }

private:
    bool touches_border(std::uint32_t t) const {
        return border_[t_[t].v[0]] || border_[t_[t].v[1]] || border_[t_[t].v[2]];
    }
    Vec3 pos(std::uint32_t v) const {
        const double* q = &P_[3 * static_cast<std::size_t>(v)];
        return {q[0], q[1], q[2]};
    }
    double angle_of(const Tri& t) const { return smallest_angle_deg(pos(t.v[0]), pos(t.v[1]), pos(t.v[2])); }
    Vec3 normal_of(const Tri& t) const {
        return normalize(cross(pos(t.v[1]) - pos(t.v[0]), pos(t.v[2]) - pos(t.v[0])));
    }
    bool within(const Tri& t) const {
        double m2s, s2m;
        return triangle_deviation(f_, pos(t.v[0]), pos(t.v[1]), pos(t.v[2]), 2 * order_, m2s, s2m) <= tol_;
    }
    static bool has(const Tri& t, std::uint32_t v) { return t.v[0] == v || t.v[1] == v || t.v[2] == v; }
    bool adjacent(std::uint32_t a, std::uint32_t b) const {
        for (std::uint32_t t : inc_[a])
            if (has(t_[t], b)) return true;
        return false;
    }
    // the two triangles on edge (a, b): `first` runs a -> b; false unless exactly two, one each way
    bool edge_faces(std::uint32_t a, std::uint32_t b, std::uint32_t& first, std::uint32_t& second) const {
        int n = 0, fw = 0;
        for (std::uint32_t t : inc_[a]) {
            if (!has(t_[t], b)) continue;
            if (++n > 2) return false;
            const Tri& x = t_[t];
            const int k = x.v[0] == a ? 0 : x.v[1] == a ? 1 : 2;
            if (x.v[(k + 1) % 3] == b) {
                first = t;
                ++fw;
            } else {
                second = t;
            }
        }
        return n == 2 && fw == 1;
    }
    static std::uint32_t third(const Tri& t, std::uint32_t a, std::uint32_t b) {
        for (std::uint32_t v : t.v)
            if (v != a && v != b) return v;
        return a;
    }
    static void erase(std::vector<std::uint32_t>& list, std::uint32_t t) {
        list.erase(std::find(list.begin(), list.end(), t));
    }
    void changed(std::uint32_t t) {
        ang_[t] = angle_of(t_[t]);
        if (ang_[t] < target_) queue_.push({ang_[t], t});
    }

    // one candidate move: the smallest angle it leaves (negative: not allowed)
    struct Move {
        int kind = 0;  // 0 collapse b into a, 1 flip edge (a, b)
        std::uint32_t a = 0, b = 0;
        double angle = -1;
    };

    // collapse b into a: every triangle of b but the two on edge (a, b) takes a instead
    Move try_collapse(std::uint32_t a, std::uint32_t b) {
        Move m{0, a, b, -1};
        std::uint32_t t1 = 0, t2 = 0;
        if (!edge_faces(a, b, t1, t2)) return m;
        const std::uint32_t c = third(t_[t1], a, b), d = third(t_[t2], a, b);
        // link condition: a and b share no neighbour but c and d
        for (std::uint32_t t : inc_[b])
            for (std::uint32_t x : t_[t].v)
                if (x != a && x != b && x != c && x != d && adjacent(a, x)) return m;
        // folds: every new triangle faces the way the ring around b faced, and no well-shaped
        // triangle turns by more than about 75 degrees (a sliver's normal means little: a short
        // edge fixes it)
        Vec3 ring{};
        for (std::uint32_t t : inc_[b]) ring += cross(pos(t_[t].v[1]) - pos(t_[t].v[0]), pos(t_[t].v[2]) - pos(t_[t].v[0]));
        ring = normalize(ring);
        double before = 180, after = 180;
        for (std::uint32_t t : inc_[b]) {
            before = std::min(before, ang_[t]);
            if (t == t1 || t == t2) continue;
            Tri n = t_[t];
            for (std::uint32_t& v : n.v)
                if (v == b) v = a;
            const Vec3 q = normal_of(n);
            if (dot(q, ring) <= 0 || (ang_[t] >= target_ && dot(q, normal_of(t_[t])) < kMinNormalCos)) return m;
            after = std::min(after, angle_of(n));
        }
        if (after > before) m.angle = after;
        return m;
    }
    void collapse_overlay(const Move& m) {
        ov_.clear();
        for (std::uint32_t t : inc_[m.b]) {
            Tri n = t_[t];
            const bool dead = has(n, m.a);
            for (std::uint32_t& v : n.v)
                if (v == m.b) v = m.a;
            ov_.push_back({t, n, dead});
        }
    }
    void do_collapse(const Move& m) {
        std::uint32_t t1 = 0, t2 = 0;
        edge_faces(m.a, m.b, t1, t2);
        for (std::uint32_t t : {t1, t2}) {
            alive_[t] = 0;
            for (std::uint32_t v : t_[t].v)
                if (v != m.b) erase(inc_[v], t);
        }
        std::vector<std::uint32_t>& moved = scratch_;
        moved.swap(inc_[m.b]);
        inc_[m.b].clear();
        for (std::uint32_t t : moved) {
            if (!alive_[t]) continue;
            for (std::uint32_t& v : t_[t].v)
                if (v == m.b) v = m.a;
            inc_[m.a].push_back(t);
        }
        for (std::uint32_t t : moved)
            if (alive_[t]) changed(t);
        ++stats_.collapses;
    }

    // flip edge (a, b): (a, b, c) + (b, a, d) become (a, d, c) + (d, b, c)
    Move try_flip(std::uint32_t a, std::uint32_t b) {
        Move m{1, a, b, -1};
        std::uint32_t t1 = 0, t2 = 0;
        if (!edge_faces(a, b, t1, t2) || chunk_[t1] != chunk_[t2]) return m;
        const std::uint32_t c = third(t_[t1], a, b), d = third(t_[t2], a, b);
        if (c == d || adjacent(c, d)) return m;
        const Tri n1{{a, d, c}}, n2{{d, b, c}};
        // folds: both new triangles face the way the pair faced and not against each other, and
        // turn by at most about 75 degrees from either old one that is well shaped
        const Vec3 o1 = normal_of(t_[t1]), o2 = normal_of(t_[t2]), q1 = normal_of(n1), q2 = normal_of(n2);
        const Vec3 pair = normalize(cross(pos(b) - pos(a), pos(c) - pos(a)) + cross(pos(a) - pos(b), pos(d) - pos(b)));
        if (dot(q1, pair) <= 0 || dot(q2, pair) <= 0 || dot(q1, q2) <= 0) return m;
        if (ang_[t1] >= target_ && std::min(dot(q1, o1), dot(q2, o1)) < kMinNormalCos) return m;
        if (ang_[t2] >= target_ && std::min(dot(q1, o2), dot(q2, o2)) < kMinNormalCos) return m;
        const double after = std::min(angle_of(n1), angle_of(n2));
        if (after > std::min(ang_[t1], ang_[t2])) m.angle = after;
        return m;
    }
    void flip_overlay(const Move& m) {
        std::uint32_t t1 = 0, t2 = 0;
        edge_faces(m.a, m.b, t1, t2);
        const std::uint32_t c = third(t_[t1], m.a, m.b), d = third(t_[t2], m.a, m.b);
        ov_.clear();
        ov_.push_back({t1, Tri{{m.a, d, c}}, false});
        ov_.push_back({t2, Tri{{d, m.b, c}}, false});
    }

    // the mesh as the pending move (ov_) would leave it
    const Change* change_of(std::uint32_t t) const {
        for (const Change& c : ov_)
            if (c.t == t) return &c;
        return nullptr;
    }
    const Tri& after(std::uint32_t t) const {
        const Change* c = change_of(t);
        return c ? c->tri : t_[t];
    }
    void ring_after(std::uint32_t v, std::vector<std::uint32_t>& out) const {
        for (std::uint32_t t : inc_[v]) {
            const Change* c = change_of(t);
            if (!c || (!c->dead && has(c->tri, v))) out.push_back(t);
        }
        for (const Change& c : ov_)
            if (!c.dead && has(c.tri, v) && !has(t_[c.t], v)) out.push_back(c.t);
    }
    // deviation of triangle t (as the pending move leaves it), surface -> mesh covered by the
    // triangles around its corners
    double deviation_after(std::uint32_t t, bool surface_only = false) {
        const Tri& x = after(t);
        ring_.clear();
        for (std::uint32_t v : x.v) ring_after(v, ring_);
        cover_.clear();
        for (std::uint32_t u : ring_)
            if (u != t)
                for (std::uint32_t v : after(u).v) cover_.push_back(pos(v));
        double s2m;
        last_m2s_ = 0;
        return triangle_deviation(f_, pos(x.v[0]), pos(x.v[1]), pos(x.v[2]), 2 * order_, last_m2s_, s2m, 0, cover_.data(),
                                  cover_.size() / 3, surface_only);
    }
    // the triangles whose shape or surroundings the pending move changes stay within the
    // tolerance (or, if unchanged and already beyond it, get no worse); their new deviations
    // wait in pending_
    bool pending_within() {
        verts_.clear();
        for (const Change& c : ov_)
            for (int k = 0; k < 3; ++k) verts_.insert(verts_.end(), {c.tri.v[k], t_[c.t].v[k]});
        std::sort(verts_.begin(), verts_.end());
        verts_.erase(std::unique(verts_.begin(), verts_.end()), verts_.end());
        if (local_)
            for (std::uint32_t v : verts_)
                if (border_[v]) return false;
        around_.clear();
        for (std::uint32_t v : verts_) ring_after(v, around_);
        std::sort(around_.begin(), around_.end());
        around_.erase(std::unique(around_.begin(), around_.end()), around_.end());
        pending_.clear();
        for (std::uint32_t u : around_) {
            // an unchanged triangle keeps its mesh -> surface part; only its cover changes
            const bool same = change_of(u) == nullptr;
            const double limit = same ? std::max(tol_, deviation_now(u)) : tol_;
            const double d = same ? std::max(m2s_[u], deviation_after(u, true)) : deviation_after(u);
            if (d > limit) return false;
            pending_.push_back({u, d, same ? m2s_[u] : last_m2s_});
        }
        return true;
    }
    double deviation_now(std::uint32_t t) {
        if (dev_[t] < 0) {
            keep_.clear();
            keep_.swap(ov_);
            dev_[t] = deviation_after(t);
            m2s_[t] = last_m2s_;
            keep_.swap(ov_);
        }
        return dev_[t];
    }
    void do_flip(const Move& m) {
        std::uint32_t t1 = 0, t2 = 0;
        edge_faces(m.a, m.b, t1, t2);
        const std::uint32_t c = third(t_[t1], m.a, m.b), d = third(t_[t2], m.a, m.b);
        t_[t1] = Tri{{m.a, d, c}};
        t_[t2] = Tri{{d, m.b, c}};
        erase(inc_[m.b], t1);
        inc_[d].push_back(t1);
        erase(inc_[m.a], t2);
        inc_[c].push_back(t2);
        changed(t1);
        changed(t2);
        ++stats_.flips;
    }

    // the best allowed move among the collapses and flips of t's edges
    void improve(std::uint32_t t) {
        Move cand[9];
        int n = 0;
        const Tri x = t_[t];
        for (int k = 0; k < 3; ++k) {
            const std::uint32_t a = x.v[k], b = x.v[(k + 1) % 3];
            cand[n++] = try_collapse(a, b);
            cand[n++] = try_collapse(b, a);
            cand[n++] = try_flip(a, b);
        }
        // best angle first; ties in candidate order
        int order[9];
        for (int i = 0; i < 9; ++i) order[i] = i;
        std::stable_sort(order, order + 9, [&](int i, int j) { return cand[i].angle > cand[j].angle; });
        for (int i : order) {
            const Move& m = cand[i];
            if (m.angle < 0) break;
            if (m.kind == 0)
                collapse_overlay(m);
            else
                flip_overlay(m);
            if (!pending_within()) continue;
            if (m.kind == 0)
                do_collapse(m);
            else
                do_flip(m);
            for (const auto& [u, d, m2s] : pending_) {
                dev_[u] = d;
                m2s_[u] = m2s;
            }
            return;
        }
    }

    const Field& f_;
    const std::vector<double>& P_;
    const std::vector<std::uint32_t>& chunk_;
    const double target_, tol_;
    const int order_;
    std::vector<Tri>& t_;
    std::vector<std::uint8_t>& alive_;
    std::vector<double>& ang_;
    std::vector<double>& dev_;
    std::vector<double>& m2s_;
    std::vector<std::vector<std::uint32_t>>& inc_;
    const std::vector<std::uint8_t>& border_;
    const bool local_;
    // this worker's scratch
    std::vector<Change> ov_;  // the pending move
    std::vector<std::uint32_t> ring_, verts_, around_;
    std::vector<Vec3> cover_;
    std::vector<std::tuple<std::uint32_t, double, double>> pending_;  // triangle, deviation, mesh -> surface
    std::vector<Change> keep_;
    double last_m2s_ = 0;
    using Entry = std::pair<double, std::uint32_t>;
    std::priority_queue<Entry, std::vector<Entry>, std::greater<Entry>> queue_;
    std::vector<std::uint32_t> scratch_;

    AngleStats stats_;
};

}  // namespace

AngleStats raise_min_angle(const Field& field, const std::vector<double>& P, std::vector<std::uint32_t>& tris,
                           std::vector<std::uint32_t>& chunk, double target_deg, double tolerance_m,
                           int measure_order, int threads) {
    if (target_deg <= 0 || chunk.empty()) return AngleStats{};
    AngleMesh m(field, P, tris, chunk, target_deg, tolerance_m, measure_order);
    const std::uint32_t T = static_cast<std::uint32_t>(chunk.size());
    // chunk c's triangles are [start[c], start[c + 1])
    std::vector<std::uint32_t> start{0};
    for (std::uint32_t t = 1; t < T; ++t)
        if (chunk[t] != chunk[t - 1]) start.push_back(t);
    start.push_back(T);
    const std::size_t runs = start.size() - 1;
    // first each chunk inside its border, chunks in parallel; then the whole mesh in one pass
    std::vector<AngleStats> part(runs);
    parallel_for(
        runs, threads,
        [&](std::size_t b, std::size_t e) {
            for (std::size_t c = b; c < e; ++c) part[c] = AnglePass(m, true).run(start[c], start[c + 1]);
        },
        1);
    AngleStats stats = AnglePass(m, false).run(0, T);
    for (const AngleStats& p : part) {
        stats.collapses += p.collapses;
        stats.flips += p.flips;
    }
    stats.stuck = 0;
    for (std::uint32_t t = 0; t < T; ++t)
        if (m.alive[t] && m.ang[t] < target_deg) ++stats.stuck;
    // write back, keeping the order (so chunks stay grouped)
    std::size_t n = 0;
    for (std::uint32_t t = 0; t < T; ++t) {
        if (!m.alive[t]) continue;
        for (int k = 0; k < 3; ++k) tris[3 * n + static_cast<std::size_t>(k)] = m.t[t].v[k];
        chunk[n++] = chunk[t];
    }
    tris.resize(3 * n);
    chunk.resize(n);
    return stats;
}

}  // namespace gm
