// the collider angle pass. a height field over a mesh of well-shaped directions is not well
// shaped in space where the ground is steep: a triangle straddling a vertical wall of height h
// with a foot edge of length s has an angle of about s / h at the top. the pass removes such
// slivers with the classic local moves of mesh improvement, edge collapse and edge flip (Hoppe,
// DeRose, Duchamp, McDonald & Stuetzle, "Mesh optimization", 1993), taking a move only when it
// raises the smallest angle it touches (the min-angle criterion of Lawson's flips, 1977) and keeps
// the collider within its tolerance of the true surface. each accepted move makes the sorted list
// of all angles lexicographically larger or removes a vertex, so the pass ends.
// where no collapse or flip helps (a ribbon spanning a tall vertical wall, its foot edge about the
// tolerance wide, its top a wall's height up), the pass adds a vertex: a Steiner point at the
// sliver's circumcentre when that lies inside it (or, for a cap, inside the triangle beyond its
// longest edge), else at the midpoint of its longest edge (edge split, Hoppe et al. 1993), moved
// onto the nearest wall face or radially onto the ground when not near the surface, then Lawson's
// flips around it (Delaunay refinement: Chew 1989, Ruppert 1995). the insertion is tentative: kept
// only if every triangle it made or changed beats the sliver's angle and all it touches stays
// within the tolerance, else undone. insertions are bounded per chunk (and by the chunk's triangle
// cap), so the pass still ends.
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
// Steiner points each chunk may add per triangle below the target at the start of a pass
constexpr std::uint64_t kInsertsPerSliver = 12;
// ... and may try (a try measures the triangles it touches; most tries on a tall wall fail)
constexpr std::uint64_t kInsertTriesPerSliver = 2;
// a triangle whose longest edge is at most this many tolerances gets no Steiner point (the
// refinement's size floor: on gentle ground a sliver that short is not worth a vertex)
constexpr double kInsertMinEdgeTolerances = 2.0;
// a Steiner point stays where it falls when that is within this share of the tolerance of the
// surface (in the sliver's plane, the flips keep the wall's triangles flat)
constexpr double kKeepShare = 0.5;
// a cap: a triangle whose largest angle is over 120 degrees (its point goes beyond its longest edge)
constexpr double kMaxCapCos = -0.5;
// Lawson's flips after one Steiner point stop after this many (on a long wall they would fan the
// point out along the whole wall)
constexpr int kMaxLawsonFlips = 64;

struct Tri {
    std::uint32_t v[3];
};

// one triangle a pending move changes: its new corners, or removed
struct Change {
    std::uint32_t t;
    Tri tri;
    bool dead;
    bool fresh = false;  // a triangle the move creates
};

// ids a worker may hand out to the vertices and triangles it creates: [next, end)
struct Slots {
    std::uint32_t next_v = 0, end_v = 0, next_t = 0, end_t = 0;
    std::uint64_t tries = 0;  // insertions the worker may still try (each costs measurements)
};

// the mesh the pass works on, shared by its workers
struct AngleMesh {
    AngleMesh(const Field& f, std::vector<double>& P, const std::vector<std::uint32_t>& tris,
              const std::vector<std::uint32_t>& chunk_in, double target, double tol, int order, std::uint64_t cap)
        : f(f), P(P), chunk(chunk_in), target(target), tol(tol), order(order), cap(cap),
          steiner_from(static_cast<std::uint32_t>(P.size() / 3)) {
        const std::size_t T = chunk.size();
        t.resize(T);
        alive.assign(T, 1);
        tried.assign(T, 0);
        ang.resize(T);
        dev.assign(T, -1.0);
        m2s.assign(T, 0.0);
        inc.resize(P.size() / 3);
        border.assign(P.size() / 3, 0);
        std::uint32_t chunks = 0;
        for (std::uint32_t c : chunk) chunks = std::max(chunks, c + 1);
        count.assign(chunks, 0);
        for (std::uint32_t c : chunk) ++count[c];
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
    // room for `verts` more vertices and `tris` more triangles (never while workers run)
    void grow(std::size_t verts, std::size_t tris) {
        const std::size_t NV = P.size() / 3 + verts, T = t.size() + tris;
        P.resize(3 * NV, 0.0);
        inc.resize(NV);
        border.resize(NV, 0);
        t.resize(T, Tri{{0, 0, 0}});
        alive.resize(T, 0);
        tried.resize(T, 0);
        ang.resize(T, 180.0);
        dev.resize(T, -1.0);
        m2s.resize(T, 0.0);
        chunk.resize(T, 0);
    }
    static constexpr std::uint32_t kNoChunk = 0xffffffffu;

    const Field& f;
    std::vector<double>& P;
    std::vector<std::uint32_t> chunk;
    const double target, tol;
    const int order;
    const std::uint64_t cap;             // triangles per chunk
    std::vector<std::uint64_t> count;  // live triangles per chunk
    const std::uint32_t steiner_from;  // the first id of the vertices the pass adds
    std::vector<Tri> t;
    std::vector<std::uint8_t> alive;
    std::vector<std::uint8_t> tried;  // a Steiner point failed since the triangle last changed
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
    AnglePass(AngleMesh& m, bool local, Slots slots)
        : f_(m.f), P_(m.P), chunk_(m.chunk), target_(m.target), tol_(m.tol), order_(m.order), cap_(m.cap),
          count_(m.count), t_(m.t), alive_(m.alive), tried_(m.tried), ang_(m.ang), dev_(m.dev), m2s_(m.m2s),
          inc_(m.inc),
          border_(m.border), steiner_from_(m.steiner_from), local_(local), slots_(slots) {}

    // improves the triangles [b, e) below the target, and those it creates, best first, in
    // rounds until none moves
    AngleStats run(std::uint32_t b, std::uint32_t e) {
        const std::uint32_t made = slots_.next_t;
        for (int round = 0; round < kRounds; ++round) {
            const std::uint64_t moves = stats_.collapses + stats_.flips + stats_.inserts;
            for (std::uint32_t t = b; t < e; ++t) push_if_below(t);
            for (std::uint32_t t = made; t < slots_.next_t; ++t) push_if_below(t);
            while (!queue_.empty()) {
                const auto [a, t] = queue_.top();
                queue_.pop();
                if (!alive_[t] || a != ang_[t]) continue;  // stale entry
                improve(t);
            }
            if (stats_.collapses + stats_.flips + stats_.inserts == moves) break;
        }
        return stats_;
    }
    const Slots& slots() const { return slots_; }

private:
    // each round gives every triangle another chance at a Steiner point
    void push_if_below(std::uint32_t t) {
        tried_[t] = 0;
        if (alive_[t] && ang_[t] < target_ && !(local_ && touches_border(t))) queue_.push({ang_[t], t});
    }
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
        tried_[t] = 0;
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
        // a Steiner point goes again only if that leaves its ring above the target: a collapse that
        // merely improves would undo the refinement it began, and the two could cycle
        if (after > before && (b < steiner_from_ || after >= target_)) m.angle = after;
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
            --count_[chunk_[t]];
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
            if (!c.dead && has(c.tri, v) && (c.fresh || !has(t_[c.t], v))) out.push_back(c.t);
    }
    // deviation of triangle t (as the pending move leaves it), surface -> mesh covered by the
    // triangles around its corners
    double deviation_after(std::uint32_t t, bool surface_only = false, int factor = 2) {
        const Tri& x = after(t);
        ring_.clear();
        for (std::uint32_t v : x.v) ring_after(v, ring_);
        cover_.clear();
        for (std::uint32_t u : ring_)
            if (u != t)
                for (std::uint32_t v : after(u).v) cover_.push_back(pos(v));
        double s2m;
        last_m2s_ = 0;
        return triangle_deviation(f_, pos(x.v[0]), pos(x.v[1]), pos(x.v[2]), factor * order_, last_m2s_, s2m, 0,
                                  cover_.data(), cover_.size() / 3, surface_only);
    }
    // the triangles whose shape or surroundings the pending move changes stay within the
    // tolerance (or, if unchanged and already beyond it, get no worse); their new deviations
    // wait in pending_
    bool pending_within() {
        verts_.clear();
        for (const Change& c : ov_)
            for (int k = 0; k < 3; ++k) {
                verts_.push_back(c.tri.v[k]);
                if (!c.fresh) verts_.push_back(t_[c.t].v[k]);
            }
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
        for (std::uint32_t t : {t1, t2}) save_tri(t);
        for (std::uint32_t v : {m.a, m.b, c, d}) save_inc(v);
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

    // the pending move's new deviations become the triangles' own
    void keep_pending() {
        for (const auto& [u, d, m2s] : pending_) {
            save_tri(u);
            dev_[u] = d;
            m2s_[u] = m2s;
        }
    }

    // the journal of a tentative insertion: what it changes, saved the first time it changes
    struct SavedTri {
        std::uint32_t t;
        Tri tri;
        std::uint8_t alive, tried;
        double ang, dev, m2s;
        std::uint32_t chunk;
    };
    void save_tri(std::uint32_t t) {
        if (!journal_) return;
        for (const SavedTri& x : saved_tris_)
            if (x.t == t) return;
        saved_tris_.push_back({t, t_[t], alive_[t], tried_[t], ang_[t], dev_[t], m2s_[t], chunk_[t]});
    }
    void save_inc(std::uint32_t v) {
        if (!journal_) return;
        for (const auto& x : saved_inc_)
            if (std::get<0>(x) == v) return;
        saved_inc_.emplace_back(v, inc_pool_.size(), inc_[v].size());
        inc_pool_.insert(inc_pool_.end(), inc_[v].begin(), inc_[v].end());
    }
    static bool same(const Tri& a, const Tri& b) {
        return a.v[0] == b.v[0] && a.v[1] == b.v[1] && a.v[2] == b.v[2];
    }
    void restore() {
        for (const SavedTri& x : saved_tris_) {
            if (!x.alive && alive_[x.t]) --count_[chunk_[x.t]];  // a fresh triangle goes again
            t_[x.t] = x.tri;
            alive_[x.t] = x.alive;
            tried_[x.t] = x.tried;
            ang_[x.t] = x.ang;
            dev_[x.t] = x.dev;
            m2s_[x.t] = x.m2s;
            chunk_[x.t] = x.chunk;
        }
        for (const auto& [v, at, n] : saved_inc_)
            inc_[v].assign(inc_pool_.begin() + static_cast<std::ptrdiff_t>(at),
                           inc_pool_.begin() + static_cast<std::ptrdiff_t>(at + n));
    }

    // p itself if within a share of the tolerance of the surface (ground point above it or
    // nearest wall point), else the nearer of those two
    Vec3 onto_surface(Vec3 p) const {
        const double r = norm(p);
        const Vec3 u = (1.0 / r) * p;
        const double H = f_.eval(u, nullptr);
        const double radial = std::fabs(r - f_.radius() - H);
        Vec3 w = (f_.radius() + H) * u;
        double d = radial;
        if (f_.has_steps()) {
            Vec3 q;
            const double dw = f_.wall_point(p, q);
            if (dw < d) {
                d = dw;
                w = q;
            }
        }
        return d <= kKeepShare * tol_ ? p : w;
    }

    // a Steiner point for sliver t: its circumcentre if inside it (split into three), else the
    // midpoint of its longest edge (that edge split, both its triangles in two); then Lawson's
    // flips around the new vertex. true if the point was added
    bool try_insert(std::uint32_t t) {
        if (tried_[t]) return false;
        if (slots_.next_v >= slots_.end_v || slots_.next_t + 2 > slots_.end_t) return false;
        tried_[t] = 1;  // cleared when t changes (a success changes it)
        const Tri x = t_[t];
        const Vec3 p0 = pos(x.v[0]), p1 = pos(x.v[1]), p2 = pos(x.v[2]);
        const double len[3] = {norm(p1 - p0), norm(p2 - p1), norm(p0 - p2)};  // edge k: v[k] -> v[k+1]
        const int lk = len[0] >= len[1] && len[0] >= len[2] ? 0 : len[1] >= len[2] ? 1 : 2;
        if (len[lk] <= kInsertMinEdgeTolerances * tol_) return false;
        // a cap (an angle near 180 degrees): its longest edge's midpoint would lie next to its
        // middle corner; its circumcentre goes into the triangle beyond that edge, as in Ruppert's
        // refinement, or nowhere
        bool cap = false;
        {
            const Vec3 pk[3] = {p0, p1, p2};
            const Vec3 e1 = pk[(lk + 1) % 3] - pk[(lk + 2) % 3], e2 = pk[lk] - pk[(lk + 2) % 3];
            cap = dot(e1, e2) < kMaxCapCos * norm(e1) * norm(e2);
        }
        // circumcentre: a + (|w|^2 (u x w) x u + |u|^2 w x (u x w)) / (2 |u x w|^2)
        const Vec3 u = p1 - p0, w = p2 - p0, n = cross(u, w);
        const double nn = dot(n, n);
        if (!(nn > 0)) return false;
        const Vec3 cc = p0 + (1.0 / (2 * nn)) * (dot(w, w) * cross(n, u) + dot(u, u) * cross(w, n));
        // barycentric coordinates of cc (in t's plane)
        const double l1 = dot(cross(cc - p0, w), n) / nn, l2 = dot(cross(u, cc - p0), n) / nn, l0 = 1 - l1 - l2;
        constexpr double kInside = 0.05;
        bool inside = l0 > kInside && l1 > kInside && l2 > kInside;
        const std::uint32_t a = x.v[lk], b = x.v[(lk + 1) % 3];
        std::uint32_t host = t;
        if (!inside && cap) {
            std::uint32_t f1 = 0, f2 = 0;
            if (!edge_faces(a, b, f1, f2)) return false;
            host = f1 == t ? f2 : f1;
            const Tri& y = t_[host];
            const Vec3 h0 = pos(y.v[0]), hu = pos(y.v[1]) - h0, hw = pos(y.v[2]) - h0, hn = cross(hu, hw);
            const double hnn = dot(hn, hn);
            if (!(hnn > 0)) return false;
            const double m1 = dot(cross(cc - h0, hw), hn) / hnn, m2 = dot(cross(hu, cc - h0), hn) / hnn;
            inside = m1 > kInside && m2 > kInside && 1 - m1 - m2 > kInside;
            if (!inside) return false;
        }
        if (slots_.tries == 0) return false;
        --slots_.tries;
        const Tri hx = t_[host];
        const std::uint32_t v = slots_.next_v;
        const std::uint32_t s1 = slots_.next_t, s2 = slots_.next_t + 1;
        const Vec3 q = onto_surface(inside ? cc : 0.5 * (pos(a) + pos(b)));
        for (int k = 0; k < 3; ++k) P_[3 * static_cast<std::size_t>(v) + static_cast<std::size_t>(k)] = (&q.x)[k];
        ov_.clear();
        std::uint32_t tt[2] = {t, t};
        if (inside) {
            if (count_[chunk_[host]] + 2 > cap_) return false;
            ov_.push_back({host, Tri{{hx.v[0], hx.v[1], v}}, false});
            ov_.push_back({s1, Tri{{hx.v[1], hx.v[2], v}}, false, true});
            ov_.push_back({s2, Tri{{hx.v[2], hx.v[0], v}}, false, true});
        } else {
            std::uint32_t t1 = 0, t2 = 0;
            if (!edge_faces(a, b, t1, t2)) return false;
            if (count_[chunk_[t1]] + 1 > cap_ || count_[chunk_[t2]] + (chunk_[t1] == chunk_[t2] ? 2 : 1) > cap_)
                return false;
            const std::uint32_t c = third(t_[t1], a, b), d = third(t_[t2], a, b);
            ov_.push_back({t1, Tri{{a, v, c}}, false});
            ov_.push_back({s1, Tri{{v, b, c}}, false, true});
            ov_.push_back({t2, Tri{{b, v, d}}, false});
            ov_.push_back({s2, Tri{{v, a, d}}, false, true});
            tt[0] = t1;
            tt[1] = t2;
        }
        // folds: each new triangle faces the way the one it comes from faced
        for (std::size_t i = 0; i < ov_.size(); ++i) {
            const Tri& from = t_[inside ? host : tt[i / 2]];
            const Tri& nt = ov_[i].tri;
            const Vec3 q2 = cross(pos(nt.v[1]) - pos(nt.v[0]), pos(nt.v[2]) - pos(nt.v[0]));
            if (!(dot(q2, normal_of(from)) > 0) || angle_of(ov_[i].tri) <= 0) return false;
        }
        // apply, tentatively: the point and Lawson's flips around it are kept only if every
        // triangle they made or changed has a larger smallest angle than t had (the moves' own
        // criterion) and the triangles they touch stay within the tolerance, measured once
        const double before = ang_[t];
        const Slots slots_before = slots_;
        const AngleStats stats_before = stats_;
        journal_ = true;
        saved_tris_.clear();
        saved_inc_.clear();
        inc_pool_.clear();
        for (const Change& c : ov_) {
            save_tri(c.t);
            for (int k = 0; k < 3; ++k) {
                save_inc(c.tri.v[k]);
                if (!c.fresh) save_inc(t_[c.t].v[k]);
            }
        }
        ++slots_.next_v;
        slots_.next_t += 2;
        for (std::size_t i = 0; i < ov_.size(); ++i) {
            const Change& c = ov_[i];
            if (c.fresh) {
                chunk_[c.t] = chunk_[inside ? host : tt[(i - 1) / 2]];
                ++count_[chunk_[c.t]];
                alive_[c.t] = 1;
                t_[c.t] = c.tri;
                for (std::uint32_t y : c.tri.v) inc_[y].push_back(c.t);
            } else {
                for (std::uint32_t y : t_[c.t].v)
                    if (!has(c.tri, y)) erase(inc_[y], c.t);
                for (std::uint32_t y : c.tri.v)
                    if (!has(t_[c.t], y)) inc_[y].push_back(c.t);
                t_[c.t] = c.tri;
            }
        }
        link_.clear();
        for (const Change& c : ov_) link_.push_back(c.t);
        ov_.clear();
        for (std::uint32_t y : link_) changed(y);
        ++stats_.inserts;
        // Lawson: flip the edges opposite v while that raises the smaller angle of their pair
        edges_.clear();
        for (std::uint32_t y : link_) {
            const Tri& z = t_[y];
            const int k = z.v[0] == v ? 0 : z.v[1] == v ? 1 : 2;
            edges_.push_back({z.v[(k + 1) % 3], z.v[(k + 2) % 3]});
        }
        int flips = 0;
        while (!edges_.empty() && flips < kMaxLawsonFlips) {
            const auto [e0, e1] = edges_.back();
            edges_.pop_back();
            std::uint32_t f1 = 0, f2 = 0;
            if (!edge_faces(e0, e1, f1, f2)) continue;
            const std::uint32_t o1 = third(t_[f1], e0, e1), o2 = third(t_[f2], e0, e1);
            if (o1 != v && o2 != v) continue;
            const Move m = try_flip(e0, e1);
            if (m.angle < 0) continue;
            do_flip(m);
            ++flips;
            const std::uint32_t far = o1 == v ? o2 : o1;
            edges_.push_back({e0, far});
            edges_.push_back({far, e1});
        }
        journal_ = false;
        const bool ok = insert_within(before, true);
        if (ok) return true;
        restore();
        slots_ = slots_before;
        stats_ = stats_before;
        tried_[t] = 1;
        return false;
    }

    // after a tentative insertion: true if every triangle it made or changed has a smallest
    // angle above `before` and every triangle it touches is within the tolerance (an unchanged
    // triangle whose surroundings changed: no worse than it was); the new deviations are kept
    bool insert_within(double before, bool measure) {
        verts_.clear();
        changed_.clear();
        for (const SavedTri& x : saved_tris_) {
            if (alive_[x.t] && (!x.alive || !same(x.tri, t_[x.t]))) {
                if (ang_[x.t] <= before) return false;
                changed_.push_back(x.t);
                for (std::uint32_t y : t_[x.t].v) verts_.push_back(y);
            }
            if (x.alive)
                for (std::uint32_t y : x.tri.v) verts_.push_back(y);
        }
        std::sort(changed_.begin(), changed_.end());
        std::sort(verts_.begin(), verts_.end());
        verts_.erase(std::unique(verts_.begin(), verts_.end()), verts_.end());
        if (local_)
            for (std::uint32_t y : verts_)
                if (border_[y]) return false;
        if (!measure) return true;
        around_.clear();
        for (std::uint32_t y : verts_) around_.insert(around_.end(), inc_[y].begin(), inc_[y].end());
        std::sort(around_.begin(), around_.end());
        around_.erase(std::unique(around_.begin(), around_.end()), around_.end());
        pending_.clear();
        // a quick look first: the changed triangles on the bake's own grid (a subset of the
        // samples below, so a triangle out there is out)
        for (std::uint32_t u : changed_)
            if (deviation_after(u, false, 1) > tol_) return false;
        for (std::uint32_t u : around_) {
            const bool same_shape = !std::binary_search(changed_.begin(), changed_.end(), u);
            const double limit = same_shape && dev_[u] >= 0 ? std::max(tol_, dev_[u]) : tol_;
            const double d = same_shape ? std::max(m2s_[u], deviation_after(u, true)) : deviation_after(u);
            if (d > limit) return false;
            pending_.push_back({u, d, same_shape ? m2s_[u] : last_m2s_});
        }
        for (const auto& [u, d, m2s] : pending_) {
            dev_[u] = d;
            m2s_[u] = m2s;
        }
        return true;
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
            keep_pending();
            return;
        }
        // no collapse or flip helps: a Steiner point
        try_insert(t);
    }

    const Field& f_;
    std::vector<double>& P_;
    std::vector<std::uint32_t>& chunk_;
    const double target_, tol_;
    const int order_;
    const std::uint64_t cap_;
    std::vector<std::uint64_t>& count_;
    std::vector<Tri>& t_;
    std::vector<std::uint8_t>& alive_;
    std::vector<std::uint8_t>& tried_;
    std::vector<double>& ang_;
    std::vector<double>& dev_;
    std::vector<double>& m2s_;
    std::vector<std::vector<std::uint32_t>>& inc_;
    const std::vector<std::uint8_t>& border_;
    const std::uint32_t steiner_from_;
    const bool local_;
    Slots slots_;
    // this worker's scratch
    std::vector<Change> ov_;  // the pending move
    std::vector<std::uint32_t> ring_, verts_, around_;
    std::vector<Vec3> cover_;
    std::vector<std::tuple<std::uint32_t, double, double>> pending_;  // triangle, deviation, mesh -> surface
    std::vector<Change> keep_;
    double last_m2s_ = 0;
    using Entry = std::pair<double, std::uint32_t>;
    std::priority_queue<Entry, std::vector<Entry>, std::greater<Entry>> queue_;
    std::vector<std::uint32_t> scratch_, link_, inc_pool_, changed_;
    bool journal_ = false;
    std::vector<SavedTri> saved_tris_;
    std::vector<std::tuple<std::uint32_t, std::size_t, std::size_t>> saved_inc_;
    std::vector<std::pair<std::uint32_t, std::uint32_t>> edges_;

    AngleStats stats_;
};

}  // namespace

AngleStats raise_min_angle(const Field& field, std::vector<double>& P, std::vector<std::uint32_t>& tris,
                           std::vector<std::uint32_t>& chunk, double target_deg, double tolerance_m,
                           int measure_order, int threads, std::uint64_t cap) {
    if (target_deg <= 0 || chunk.empty()) return AngleStats{};
    const std::size_t NV0 = P.size() / 3;
    AngleMesh m(field, P, tris, chunk, target_deg, tolerance_m, measure_order, cap);
    const std::uint32_t T = static_cast<std::uint32_t>(chunk.size());
    // chunk c's triangles are [start[c], start[c + 1])
    std::vector<std::uint32_t> start{0};
    for (std::uint32_t t = 1; t < T; ++t)
        if (chunk[t] != chunk[t - 1]) start.push_back(t);
    start.push_back(T);
    const std::size_t runs = start.size() - 1;
    // each run's own ids for the vertices and triangles it adds, from its slivers alone
    std::vector<Slots> slots(runs);
    {
        std::size_t nv = P.size() / 3, nt = T, add = 0;
        for (std::size_t c = 0; c < runs; ++c) {
            std::uint64_t below = 0;
            for (std::uint32_t t = start[c]; t < start[c + 1]; ++t) below += m.ang[t] < target_deg;
            const std::size_t k = static_cast<std::size_t>(kInsertsPerSliver * below);
            slots[c] = {static_cast<std::uint32_t>(nv + add), static_cast<std::uint32_t>(nv + add + k),
                        static_cast<std::uint32_t>(nt + 2 * add), static_cast<std::uint32_t>(nt + 2 * add + 2 * k),
                        kInsertTriesPerSliver * below};
            add += k;
        }
        m.grow(add, 2 * add);
    }
    // first each chunk inside its border, chunks in parallel; then the whole mesh in one pass
    std::vector<AngleStats> part(runs);
    parallel_for(
        runs, threads,
        [&](std::size_t b, std::size_t e) {
            for (std::size_t c = b; c < e; ++c) {
                AnglePass pass(m, true, slots[c]);
                part[c] = pass.run(start[c], start[c + 1]);
                slots[c] = pass.slots();
            }
        },
        1);
    std::uint64_t below = 0;
    for (std::size_t t = 0; t < m.t.size(); ++t) below += m.alive[t] && m.ang[t] < target_deg;
    const std::size_t k = static_cast<std::size_t>(kInsertsPerSliver * below);
    const Slots whole{static_cast<std::uint32_t>(P.size() / 3), static_cast<std::uint32_t>(P.size() / 3 + k),
                      static_cast<std::uint32_t>(m.t.size()), static_cast<std::uint32_t>(m.t.size() + 2 * k),
                      kInsertTriesPerSliver * below};
    m.grow(k, 2 * k);
    AngleStats stats = AnglePass(m, false, whole).run(0, static_cast<std::uint32_t>(m.t.size()));
    for (const AngleStats& p : part) {
        stats.collapses += p.collapses;
        stats.flips += p.flips;
        stats.inserts += p.inserts;
    }
    stats.stuck = 0;
    for (std::size_t t = 0; t < m.t.size(); ++t)
        if (m.alive[t] && m.ang[t] < target_deg) ++stats.stuck;
    // the added vertices that are still used, in id order, after the given ones
    const std::size_t NV = P.size() / 3;
    std::vector<std::uint32_t> id(NV, 0);
    for (std::size_t v = 0; v < NV0; ++v) id[v] = static_cast<std::uint32_t>(v);
    {
        std::vector<std::uint8_t> used(NV, 0);
        for (std::size_t t = 0; t < m.t.size(); ++t)
            if (m.alive[t])
                for (std::uint32_t v : m.t[t].v) used[v] = 1;
        std::size_t n = NV0;
        for (std::size_t v = NV0; v < NV; ++v) {
            if (!used[v]) continue;
            id[v] = static_cast<std::uint32_t>(n);
            for (std::size_t j = 0; j < 3; ++j) P[3 * n + j] = P[3 * v + j];
            ++n;
        }
        P.resize(3 * n);
    }
    // write back, grouped by chunk, each chunk's triangles in id order
    std::vector<std::uint32_t> order;
    order.reserve(m.t.size());
    for (std::size_t t = 0; t < m.t.size(); ++t)
        if (m.alive[t]) order.push_back(static_cast<std::uint32_t>(t));
    std::stable_sort(order.begin(), order.end(),
                     [&](std::uint32_t a, std::uint32_t b) { return m.chunk[a] < m.chunk[b]; });
    tris.resize(3 * order.size());
    chunk.resize(order.size());
    for (std::size_t n = 0; n < order.size(); ++n) {
        const std::uint32_t t = order[n];
        for (int j = 0; j < 3; ++j) tris[3 * n + static_cast<std::size_t>(j)] = id[m.t[t].v[j]];
        chunk[n] = m.chunk[t];
    }
    return stats;
}

}  // namespace gm
