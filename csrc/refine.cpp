// adaptive refinement by newest-vertex bisection with conforming closure:
// Mitchell 1989 ("A comparison of adaptive refinement techniques for elliptic problems"),
// Sewell 1972 (the bisection rule), initial refinement edges from a perfect matching of the
// icosahedron's faces (Mitchell 1991, Binev-Dahmen-DeVore 2004) so closure always terminates.
//
// The mesh is a pure function of the spec: triangles are tested level-synchronously (in parallel,
// results stored by index), then split serially in index order, so the output does not depend on
// the thread count. A triangle is tested once; one that passes is frozen and never tested again.
#include "refine.hpp"

#include "measure.hpp"
#include "tight.hpp"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <thread>

namespace gm {
namespace {

constexpr int kMaxLevel = 60;
// probes sample the triangle sparsely: they aim a little inside the tolerance so that the denser
// a posteriori verification still finds the mesh within it
constexpr double kProbeMargin = 0.8;
// the budget survey (estimate_triangles): refinement first runs to kSurveyFactor times the
// tolerance. that is a prefix of the real refinement (the same nodes, each tested once), so in a
// bake it costs nothing. a survey leaf of critical tolerance tau then stands for about
// kSurveyGrowth * tau / tolerance leaves at the tolerance: tau grows with a leaf's area on smooth
// ground (deviation ~ curvature * h^2) and with its size across a wall or crease, whose leaves
// line up along it, so in both cases the leaves below it number about tau / tolerance; the factor
// (closure, grading and the probes' margin) is measured, see docs/meshing.md.
constexpr double kSurveyFactor = 4;
constexpr double kSurveyGrowth = 1.8;
// the survey is stated within this factor of the real count: a bake is refused on the estimate
// only when it exceeds the budget by more; nearer the budget the real count decides
constexpr double kSurveySlack = 1.5;
constexpr double kPi = 3.14159265358979323846;

std::string num_text(double x) {
    char b[32];
    std::snprintf(b, sizeof b, "%g", x);
    return b;
}

std::string with_commas(std::uint64_t n) {
    std::string d = std::to_string(n), out;
    for (std::size_t i = 0; i < d.size(); ++i) {
        if (i > 0 && (d.size() - i) % 3 == 0) out += ',';
        out += d[i];
    }
    return out;
}

struct Probe {
    double b0, b1, b2;
};

// ordered so that a failing triangle tends to fail on an early probe
const Probe kProbes[] = {
    {1.0 / 3, 1.0 / 3, 1.0 / 3},                                // centroid
    {0, 0.5, 0.5}, {0.5, 0.5, 0}, {0.5, 0, 0.5},                // edge midpoints
    {2.0 / 3, 1.0 / 6, 1.0 / 6}, {1.0 / 6, 2.0 / 3, 1.0 / 6}, {1.0 / 6, 1.0 / 6, 2.0 / 3},
};

class Refiner {
public:
    Refiner(const Field& f, const RefineOptions& o, Hierarchy& hh)
        : F(f), opt(o), R(f.radius()), h(hh), dir(hh.dir), rad(hh.rad), tris(hh.nodes), pool(hh.pool) {}

    Status run(RefineStats& stats, std::string& error);

private:
    const Field& F;
    const RefineOptions& opt;
    const double R;
    Hierarchy& h;
    std::vector<Vec3>& dir;
    std::vector<double>& rad;
    std::vector<Node>& tris;
    std::vector<std::uint32_t>& pool;
    std::uint64_t leaves = 0;
    // incremental rebuild: per node, may it take its counterpart's numbers
    std::vector<std::uint8_t> reuse;

    Vec3 pos(std::uint32_t v) const { return rad[v] * dir[v]; }
    Cap cap_of(const Node& t) const { return node_cap(h, t); }
    void assign_list(Node& t, const Cap& cap, std::uint32_t parent_off, std::uint32_t parent_cnt);
    double critical_tolerance(const Node& t, float& fine) const;
    // the tolerance the current phase splits to (the survey's, then the finest)
    double split_tol = 0;
    bool wants_split(const Node& t) const {
        return t.level < opt.min_level || t.tau > split_tol || t.tau_fine > opt.tolerance_m;
    }
    Status grow(std::vector<std::uint32_t>& active, RefineStats& stats, std::string& error,
                std::uint64_t leaf_cap, int& round);
    double survey_estimate(std::uint32_t* driver, double* share, double* open_share) const;
    std::uint64_t survey_floor = 0;  // when the survey stopped at its cap: leaves it had due
    std::string budget_message(const std::string& what, std::uint64_t count) const;
    Status verify(RefineStats& stats, std::string& error);
    double midpoint_radius(const Node& t) const;
    void split(std::uint32_t t);
    void bisect_pair(std::uint32_t t, std::uint32_t n);
    void adopt(std::uint32_t id, std::uint32_t old, const Cap& cap);
    void relink(std::uint32_t x, std::uint32_t from, std::uint32_t to) {
        if (x == kNone) return;
        for (auto& e : tris[x].nb)
            if (e == from) e = to;
    }
};

void Refiner::assign_list(Node& t, const Cap& cap, std::uint32_t off, std::uint32_t cnt) {
    const double cc = std::cos(cap.angle), sc = std::sin(cap.angle);
    std::uint32_t start = static_cast<std::uint32_t>(pool.size());
    for (std::uint32_t i = 0; i < cnt; ++i) {
        std::uint32_t f = pool[off + i];
        if (F.touches(f, cap, cc, sc)) pool.push_back(f);
    }
    std::uint32_t n = static_cast<std::uint32_t>(pool.size()) - start;
    if (n == cnt) {
        // same features as the parent: share its list
        pool.resize(start);
        t.list_off = off;
    } else {
        t.list_off = start;
    }
    t.list_cnt = n;
}

// incremental rebuild: record node id's counterpart `old` in the previous hierarchy and, when the
// node lies clear of every changed cap, take the numbers that depend only on the field near it
void Refiner::adopt(std::uint32_t id, std::uint32_t old, const Cap& cap) {
    if (!opt.previous) return;
    h.origin.resize(tris.size(), kNone);
    reuse.resize(tris.size(), 0);
    h.origin[id] = old;
    if (old == kNone) return;
    Node& t = tris[id];
    const Node& o = opt.previous->nodes[old];
    // the field is read inside the node's cap and, by projections onto the ground, up to about
    // its measured deviation beyond it
    float err = std::max({0.0f, o.err, o.tight_m2s, o.tight_s2m});
    for (int k = 0; k < kAltSlots; ++k)
        if (o.alt_order[k]) err = std::max({err, o.alt_m2s[k], o.alt_s2m[k]});
    const double reach = 2 * cap.angle + (opt.changed_margin_m + 2 * err + 2 * o.tau) / R;
    for (const Cap& c : opt.changed) {
        const double a = reach + c.angle;
        if (a >= kPi || dot(cap.c, c.c) >= std::cos(a) - 1e-12) return;
    }
    reuse[id] = 1;
    if (!std::isnan(o.mid_r)) t.mid_r = o.mid_r;
    t.tight_m2s = o.tight_m2s;
    t.tight_s2m = o.tight_s2m;
    if (o.err >= 0) {
        t.err = o.err;
        t.err_order = o.err_order;
        t.m2s = o.m2s;
        t.s2m = o.s2m;
    }
    for (int k = 0; k < kAltSlots; ++k) {
        t.alt_order[k] = o.alt_order[k];
        t.alt_m2s[k] = o.alt_m2s[k];
        t.alt_s2m[k] = o.alt_s2m[k];
    }
}

double Refiner::midpoint_radius(const Node& t) const {
    Vec3 m = normalize(dir[t.v[1]] + dir[t.v[2]]);
    return R + F.eval(m, pool.data() + t.list_off, t.list_cnt, nullptr);
}

// the critical tolerance of one triangle: below it, the triangle must be split. one number per
// triangle serves every level of detail (a level at tolerance e splits exactly the triangles with
// tau > e, plus their closure), so the coarser levels cost no further probing.
double Refiner::critical_tolerance(const Node& t, float& fine) const {
    fine = 0;
    if (t.level >= kMaxLevel) return 0;
    const double m = kProbeMargin;
    const std::uint32_t* list = pool.data() + t.list_off;
    const std::size_t cnt = t.list_cnt;
    Vec3 P0 = pos(t.v[0]), P1 = pos(t.v[1]), P2 = pos(t.v[2]);
    Cap cap = cap_of(t);
    const double size = 2 * R * cap.angle;  // diameter of the footprint on the base sphere
    double tau = 0;
    // seeding. a feature narrower than the triangle can hide between the probes; the probes then
    // look at the ground without it (`rest`), and the most it moves the ground over the
    // triangle's footprint (Field::max_change_over; the distance to the ground moves no more,
    // every blend being 1-Lipschitz in the ground below) is added to what they see: a certified
    // bound, so a feature whose effect fits in a level's tolerance forces no split there. noise octaves narrower than the triangle, and vertical
    // walls crossing it, still set a floor on tau.
    thread_local std::vector<std::uint32_t> rest;
    rest.clear();
    double hidden = 0;  // sum of the narrow features' amplitudes
    for (std::size_t i = 0; i < cnt; ++i) {
        const Feature& f = F.feature(list[i]);
        if (f.kind == Kind::Noise) {
            rest.push_back(list[i]);
            // each octave narrower than the triangle, weighed by its amplitude
            double a = std::fabs(f.prm[0]), lam = 1.0 / f.prm[1];
            int oct = static_cast<int>(f.prm[2]);
            for (int k = 0; k < oct; ++k, a *= f.prm[3], lam *= 0.5)
                if (lam < R * cap.angle) tau = std::max(tau, 2 * a / m);
            continue;
        }
        if (f.scale_m < 0.5 * R * cap.angle)
            hidden += F.max_change_over(list[i], cap);
        else
            rest.push_back(list[i]);
        // a vertical wall crossing the triangle: it must get narrower than two tolerances
        if (f.step) {
            bool crosses;
            if (f.kind == Kind::Mesa) {
                double th = angle(cap.c, f.c);
                crosses = std::fabs(th - f.prm[1] / R) <= cap.angle;
            } else {
                double x = R * std::atan2(dot(cap.c, f.ax), dot(cap.c, f.c));
                double y = R * std::atan2(dot(cap.c, f.ay), dot(cap.c, f.c));
                double hx = f.prm[1], hy = f.prm[2], r = f.prm[3];
                double qx = std::fabs(x) - (hx - r), qy = std::fabs(y) - (hy - r);
                double mx = std::max(qx, 0.0), my = std::max(qy, 0.0);
                double sd = std::sqrt(mx * mx + my * my) + std::min(std::max(qx, qy), 0.0) - r;
                crosses = dot(cap.c, f.c) <= 0 || std::fabs(sd) <= 1.5 * R * cap.angle;
            }
            if (crosses) tau = std::max(tau, std::min(size / 2, 2 * f.amp_m) / m);
        }
    }
    fine = static_cast<float>(std::min(std::max(tau, hidden / m), 8 * size / m));
    const std::uint32_t* seen = rest.data();
    const std::size_t nseen = rest.size();
    // probes on the flat triangle against the surface (without the hidden features), both ways
    const bool walls = opt.mode != OffsetMode::Radial && F.has_steps();
    const double cap_tau = std::max(opt.tau_cap, kSurveyFactor * opt.tolerance_m);
    double probed = 0;  // the largest offset the probes see
    auto probe = [&](Vec3 p) {
        double pn = norm(p);
        Vec3 u = (1.0 / pn) * p;
        double H = F.eval(u, seen, nseen, nullptr);
        double radial = std::fabs(pn - R - H);
        // the radial offset bounds the other two (|grad F| >= 1): only a probe whose radial
        // offset could raise the bound costs a gradient or a projection
        if (radial > probed && (radial + hidden) / m > tau) {
            double off = radial;
            if (opt.mode == OffsetMode::Normal) {
                Vec3 g;
                F.eval(u, seen, nseen, &g);
                off = radial / std::sqrt(1 + dot(g, g) / (pn * pn));
            } else if (opt.mode == OffsetMode::Exact && hidden == 0) {
                // (a projection wanders off the footprint, where the ground without the hidden
                // features is not known: with hidden ones, the radial offset bounds it)
                off = std::min(radial, project_distance(F, p, nullptr, 0, 6));
            }
            // the distance to the nearest wall bounds the distance to the ground with every
            // feature in it, not without the hidden ones
            if (walls && hidden == 0 && off > probed && off / m > tau) off = std::min(off, F.wall_distance(p));
            probed = std::max(probed, off);
        }
        if (opt.mode == OffsetMode::Radial) return;
        // surface -> mesh: the ground point above the probe against this triangle
        Vec3 S = (R + H) * u;
        probed = std::max(probed, norm(S - closest_on_triangle(S, P0, P1, P2)));
    };
    for (const Probe& pr : kProbes) {
        if (std::max(tau, (probed + hidden) / m) > cap_tau) break;  // split at every level
        probe(pr.b0 * P0 + pr.b1 * P1 + pr.b2 * P2);
    }
    // creases (a sharp ridge's crest, tips and foot, a crater's rim) inside the triangle
    for (std::size_t i = 0; i < nseen && std::max(tau, (probed + hidden) / m) <= cap_tau; ++i) {
        if (!F.has_creases(seen[i])) continue;
        Vec3 pts[Field::kMaxCreasePoints];
        int n = F.crease_points(seen[i], cap.c, cap.angle, pts);
        for (int k = 0; k < n; ++k) {
            Vec3 p;
            if (ray_hits_triangle(pts[k], P0, P1, P2, p)) probe(p);
        }
    }
    tau = std::max(tau, (probed + hidden) / m);
    // the size floor: a triangle an eighth of the (probe) tolerance across is never split
    return std::min(tau, 8 * size / m);
}

void Refiner::split(std::uint32_t t) {
    if (tris[t].child != kNone) return;
    // closure: the neighbour across the refinement edge must share it (compatible pair)
    for (;;) {
        std::uint32_t n = tris[t].nb[0];
        if (tris[n].nb[0] == t) break;
        split(n);
    }
    bisect_pair(t, tris[t].nb[0]);
}

void Refiner::bisect_pair(std::uint32_t t, std::uint32_t n) {
    Node T = tris[t], N = tris[n];
    // the new vertex: same bits whichever side computes it (addition commutes exactly)
    std::uint32_t m = static_cast<std::uint32_t>(dir.size());
    dir.push_back(normalize(dir[T.v[1]] + dir[T.v[2]]));
    double r = !std::isnan(T.mid_r) ? T.mid_r : (!std::isnan(N.mid_r) ? N.mid_r : midpoint_radius(T));
    rad.push_back(r);
    h.vparent.push_back(std::min(T.v[1], T.v[2]));
    h.vparent.push_back(std::max(T.v[1], T.v[2]));
    std::uint32_t c0 = static_cast<std::uint32_t>(tris.size()), c1 = c0 + 1, n0 = c0 + 2, n1 = c0 + 3;
    std::uint8_t lv = static_cast<std::uint8_t>(T.level + 1);
    Node C0, C1, N0, N1;
    C0.v[0] = m; C0.v[1] = T.v[2]; C0.v[2] = T.v[0];
    C1.v[0] = m; C1.v[1] = T.v[0]; C1.v[2] = T.v[1];
    N0.v[0] = m; N0.v[1] = N.v[2]; N0.v[2] = N.v[0];
    N1.v[0] = m; N1.v[1] = N.v[0]; N1.v[2] = N.v[1];
    C0.nb[0] = T.nb[1]; C0.nb[1] = c1; C0.nb[2] = n1;
    C1.nb[0] = T.nb[2]; C1.nb[1] = n0; C1.nb[2] = c0;
    N0.nb[0] = N.nb[1]; N0.nb[1] = n1; N0.nb[2] = c1;
    N1.nb[0] = N.nb[2]; N1.nb[1] = c0; N1.nb[2] = n0;
    for (Node* c : {&C0, &C1}) {
        c->level = lv;
        c->parent = t;
    }
    for (Node* c : {&N0, &N1}) {
        c->level = static_cast<std::uint8_t>(N.level + 1);
        c->parent = n;
    }
    // chunks: a node at the chunk level starts a chunk; deeper nodes inherit it
    for (Node* c : {&C0, &C1, &N0, &N1}) {
        const Node& par = (c == &C0 || c == &C1) ? T : N;
        if (c->level == opt.min_level) c->chunk = h.chunks++;
        else c->chunk = par.chunk;
    }
    const Cap caps[4] = {cap_of(C0), cap_of(C1), cap_of(N0), cap_of(N1)};
    assign_list(C0, caps[0], T.list_off, T.list_cnt);
    assign_list(C1, caps[1], T.list_off, T.list_cnt);
    assign_list(N0, caps[2], N.list_off, N.list_cnt);
    assign_list(N1, caps[3], N.list_off, N.list_cnt);
    tris.push_back(C0);
    tris.push_back(C1);
    tris.push_back(N0);
    tris.push_back(N1);
    tris[t].child = c0;
    tris[n].child = n0;
    tris[t].pair = n;
    tris[n].pair = t;
    relink(T.nb[1], t, c0);
    relink(T.nb[2], t, c1);
    relink(N.nb[1], n, n0);
    relink(N.nb[2], n, n1);
    leaves += 2;
    if (opt.previous) {
        const std::vector<Node>& old = opt.previous->nodes;
        std::uint32_t ot = h.origin[t], on = h.origin[n];
        std::uint32_t oc = ot != kNone ? old[ot].child : kNone;
        std::uint32_t onc = on != kNone ? old[on].child : kNone;
        h.vorigin.push_back(oc != kNone ? old[oc].v[0] : kNone);
        adopt(c0, oc, caps[0]);
        adopt(c1, oc != kNone ? oc + 1 : kNone, caps[1]);
        adopt(n0, onc, caps[2]);
        adopt(n1, onc != kNone ? onc + 1 : kNone, caps[3]);
    }
}

bool find_matching(const std::vector<std::array<std::uint32_t, 3>>& adj, std::vector<int>& mate,
                   std::size_t face) {
    while (face < adj.size() && mate[face] >= 0) ++face;
    if (face == adj.size()) return true;
    for (std::uint32_t o : adj[face]) {
        if (mate[o] >= 0) continue;
        mate[face] = static_cast<int>(o);
        mate[o] = static_cast<int>(face);
        if (find_matching(adj, mate, face + 1)) return true;
        mate[face] = mate[o] = -1;
    }
    return false;
}

Status Refiner::run(RefineStats& stats, std::string& error) {
    const double tol = opt.tolerance_m;
    if (!(tol > 0) || !std::isfinite(tol)) {
        error = "tolerance_m must be a finite number > 0";
        return Status::InvalidArgument;
    }
    if (opt.min_level < 0 || opt.min_level > 20) {
        error = "chunk level must be in 0..10";
        return Status::InvalidArgument;
    }
    std::vector<Vec3> iv;
    std::vector<std::uint32_t> faces;
    icosahedron(iv, faces);
    // pair the 20 faces across shared edges: those shared edges are the first refinement edges
    auto edge_key = [](std::uint32_t a, std::uint32_t b) { return std::min(a, b) * 64u + std::max(a, b); };
    std::vector<std::array<std::uint32_t, 3>> adj(20);
    for (std::uint32_t f = 0; f < 20; ++f) {
        for (int e = 0; e < 3; ++e) {
            std::uint32_t a = faces[f * 3 + (e + 1) % 3], b = faces[f * 3 + (e + 2) % 3];
            for (std::uint32_t g = 0; g < 20; ++g) {
                if (g == f) continue;
                for (int k = 0; k < 3; ++k) {
                    std::uint32_t c = faces[g * 3 + (k + 1) % 3], d = faces[g * 3 + (k + 2) % 3];
                    if (edge_key(a, b) == edge_key(c, d)) adj[f][static_cast<std::size_t>(e)] = g;
                }
            }
        }
    }
    std::vector<int> mate(20, -1);
    if (!find_matching(adj, mate, 0)) {
        error = "internal: no matching of icosahedron faces";
        return Status::Internal;
    }
    dir = iv;
    h.radius = R;
    h.vparent.assign(2 * dir.size(), kNone);
    rad.resize(dir.size());
    for (std::size_t i = 0; i < dir.size(); ++i) rad[i] = R + F.eval(dir[i], nullptr);
    std::size_t reserve = static_cast<std::size_t>(std::min<std::uint64_t>(stats.estimate, opt.max_triangles)) * 2 + 64;
    // an incremental rebuild makes about as many nodes and vertices as the hierarchy before it
    if (opt.previous) {
        reserve = std::max(reserve, opt.previous->nodes.size() + opt.previous->nodes.size() / 16 + 64);
        const std::size_t nv = opt.previous->dir.size() + opt.previous->dir.size() / 16 + 64;
        dir.reserve(nv);
        rad.reserve(nv);
        h.vparent.reserve(2 * nv);
    }
    tris.reserve(std::min<std::size_t>(reserve, 1u << 26));
    for (std::uint32_t f = 0; f < 20; ++f) {
        // rotate so that v[0] is opposite the matched edge
        int e = 0;
        for (int k = 0; k < 3; ++k)
            if (adj[f][static_cast<std::size_t>(k)] == static_cast<std::uint32_t>(mate[f])) e = k;
        Node t;
        for (int k = 0; k < 3; ++k) t.v[k] = faces[f * 3 + (e + k) % 3];
        if (opt.min_level == 0) t.chunk = h.chunks++;
        tris.push_back(t);
    }
    for (std::uint32_t f = 0; f < 20; ++f) {
        Node& t = tris[f];
        for (int k = 0; k < 3; ++k) {
            std::uint32_t a = t.v[(k + 1) % 3], b = t.v[(k + 2) % 3];
            t.nb[k] = kNone;
            for (std::uint32_t g = 0; g < 20; ++g) {
                if (g == f) continue;
                const Node& o = tris[g];
                for (int j = 0; j < 3; ++j)
                    if (edge_key(a, b) == edge_key(o.v[(j + 1) % 3], o.v[(j + 2) % 3])) t.nb[k] = g;
            }
        }
    }
    // root candidate lists: every feature filtered by the face's cap
    std::vector<std::uint32_t> all(F.size());
    for (std::size_t i = 0; i < all.size(); ++i) all[i] = static_cast<std::uint32_t>(i);
    pool = all;
    for (auto& t : tris) assign_list(t, cap_of(t), 0, static_cast<std::uint32_t>(all.size()));
    leaves = 20;
    if (opt.previous) {
        if (opt.previous->nodes.size() < 20 || opt.previous->dir.size() < 12) {
            error = "internal: the previous hierarchy is empty";
            return Status::Internal;
        }
        h.vorigin.resize(dir.size());
        for (std::uint32_t i = 0; i < dir.size(); ++i) h.vorigin[i] = i;
        for (std::uint32_t i = 0; i < 20; ++i) adopt(i, i, cap_of(tris[i]));
    }

    auto clock0 = std::chrono::steady_clock::now();
    std::vector<std::uint32_t> active(20);
    for (std::uint32_t i = 0; i < 20; ++i) active[i] = i;
    int round = 0;
    // the survey: refine to kSurveyFactor * tol and estimate the count at tol from its leaves
    split_tol = kSurveyFactor * tol;
    const std::uint64_t survey_cap = opt.survey_only ? opt.survey_cap : opt.max_triangles;
    Status st = grow(active, stats, error, survey_cap, round);
    if (st != Status::Ok) return st;
    // stopped at the cap: the splits due make more leaves than it allows
    const bool capped = !active.empty();
    stats.estimate = std::max<std::uint64_t>({static_cast<std::uint64_t>(survey_estimate(nullptr, nullptr, nullptr)),
                                              20ull << static_cast<unsigned>(opt.min_level), capped ? survey_floor : 0});
    if (opt.survey_only) return Status::Ok;
    if (capped) {
        error = budget_message("tolerance_m=" + num_text(tol) + " needs more than", survey_floor);
        return Status::BudgetExceeded;
    }
    if (static_cast<double>(stats.estimate) > kSurveySlack * static_cast<double>(opt.max_triangles)) {
        error = budget_message("tolerance_m=" + num_text(tol) + " would need about", stats.estimate);
        return Status::BudgetExceeded;
    }
    if (opt.estimated && !opt.estimated(stats.estimate)) {
        error = "the bake was stopped after its estimate of " + with_commas(stats.estimate) + " triangles";
        return Status::Stopped;
    }
    // the real refinement goes on from the survey's leaves
    split_tol = tol;
    for (std::size_t i = 0; i < tris.size(); ++i)
        if (tris[i].child == kNone && wants_split(tris[i])) active.push_back(static_cast<std::uint32_t>(i));
    parallel_for(active.size(), opt.threads, [&](std::size_t b, std::size_t e) {
        for (std::size_t i = b; i < e; ++i) {
            Node& t = tris[active[i]];
            if (std::isnan(t.mid_r)) t.mid_r = midpoint_radius(t);
        }
    });
    std::size_t first_new = tris.size();
    for (std::uint32_t id : active) split(id);
    active.clear();
    for (std::size_t i = first_new; i < tris.size(); ++i)
        if (tris[i].child == kNone) active.push_back(static_cast<std::uint32_t>(i));
    if (leaves > opt.max_triangles) {
        error = budget_message("tolerance_m=" + num_text(tol) + " needs more than", leaves);
        return Status::BudgetExceeded;
    }
    st = grow(active, stats, error, opt.max_triangles, round);
    if (st != Status::Ok) return st;
    if (!active.empty() || leaves > opt.max_triangles) {
        error = budget_message("tolerance_m=" + num_text(tol) + " needs more than", leaves);
        return Status::BudgetExceeded;
    }
    stats.rounds = round;
    auto clock1 = std::chrono::steady_clock::now();
    stats.refine_seconds = std::chrono::duration<double>(clock1 - clock0).count();
    const std::uint64_t verify_from = eval_tally().points;
    if (opt.verify_order > 0) {
        st = verify(stats, error);
        if (st != Status::Ok) return st;
    }
    stats.verify_seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - clock1).count();
    stats.verify_points = eval_tally().points - verify_from;
    int maxl = 0;
    for (const Node& t : tris)
        if (t.child == kNone) maxl = std::max(maxl, static_cast<int>(t.level));
    stats.max_level = maxl;
    return Status::Ok;
}

// level-synchronous refinement from `active` (new, untested leaves) until no leaf wants a split
// at split_tol. stops early, with every leaf tested and `active` not empty, when the splits due
// would take the leaves past leaf_cap.
Status Refiner::grow(std::vector<std::uint32_t>& active, RefineStats& stats, std::string& error,
                     std::uint64_t leaf_cap, int& round) {
    (void)error;
    while (!active.empty()) {
        // test every new triangle in parallel; each writes only its own node
        parallel_for(active.size(), opt.threads, [&](std::size_t b, std::size_t e) {
            for (std::size_t i = b; i < e; ++i) {
                Node& t = tris[active[i]];
                if (!t.tested) {
                    const Node* o = nullptr;
                    if (opt.previous && reuse[active[i]]) {
                        o = &opt.previous->nodes[h.origin[active[i]]];
                        if (!o->tested) o = nullptr;
                    }
                    if (o) {
                        t.tau = o->tau;
                        t.tau_fine = o->tau_fine;
                    } else {
                        t.tau = critical_tolerance(t, t.tau_fine);
                    }
                    t.tested = 1;
                }
                if (wants_split(t) && std::isnan(t.mid_r)) t.mid_r = midpoint_radius(t);
            }
        });
        stats.tested += active.size();
        if (opt.previous)
            for (std::uint32_t id : active)
                if (reuse[id] && opt.previous->nodes[h.origin[id]].tested) ++stats.reused;
        std::uint64_t due = 0;
        for (std::uint32_t id : active) due += wants_split(tris[id]);
        if (leaves + due > leaf_cap) {
            survey_floor = leaves + due;
            return Status::Ok;
        }
        // split serially in index order: the result does not depend on the thread count
        std::size_t first_new = tris.size();
        for (std::uint32_t id : active) {
            if (!wants_split(tris[id])) continue;
            split(id);
            // closure splits beyond the due ones: stop before they run away
            if (leaves > 2 * leaf_cap + 64) {
                survey_floor = leaves;
                return Status::Ok;
            }
        }
        active.clear();
        for (std::size_t i = first_new; i < tris.size(); ++i)
            if (tris[i].child == kNone) active.push_back(static_cast<std::uint32_t>(i));
        ++round;
        if (opt.progress) opt.progress(round, leaves);
    }
    return Status::Ok;
}

// the survey's estimate of the leaves at opt.tolerance_m from the current leaves; with `driver`,
// also the feature whose footprint holds the largest share of it (kNone: no feature) and the
// share on open ground (no feature reaches). a leaf counts for the narrowest feature that reaches
// it: the one that keeps its triangles small.
double Refiner::survey_estimate(std::uint32_t* driver, double* share, double* open_share) const {
    const double g = kSurveyGrowth, tol = opt.tolerance_m;
    double total = 0;
    std::vector<double> by;
    if (driver) by.assign(F.size() + 1, 0.0);
    for (const Node& t : tris) {
        if (t.child != kNone) continue;
        const double n = std::max(1.0, g * t.tau / tol);
        total += n;
        if (!driver) continue;
        std::size_t d = F.size();
        double narrowest = HUGE_VAL;
        for (std::uint32_t i = 0; i < t.list_cnt; ++i) {
            const std::uint32_t f = pool[t.list_off + i];
            if (F.feature(f).scale_m < narrowest) narrowest = F.feature(f).scale_m, d = f;
        }
        by[d] += n;
    }
    if (driver) {
        std::size_t best = F.size();
        for (std::size_t i = 0; i < F.size(); ++i)
            if (best == F.size() || by[i] > by[best]) best = i;
        *driver = best == F.size() ? kNone : static_cast<std::uint32_t>(best);
        *share = total > 0 && best < F.size() ? by[best] / total : 0;
        *open_share = total > 0 ? by[F.size()] / total : 0;
    }
    return total;
}

std::string Refiner::budget_message(const std::string& what, std::uint64_t count) const {
    std::uint32_t d = kNone;
    double share = 0, open = 0;
    survey_estimate(&d, &share, &open);
    auto pct = [](double x) {
        char b[32];
        std::snprintf(b, sizeof b, "%.0f%%", 100 * x);
        return std::string(b);
    };
    std::string who = d == kNone ? std::string("the base sphere drives the triangle count")
                                 : "features[" + std::to_string(d) + "] drives the triangle count (" +
                                       pct(share) + " of the estimate lies near it, " + pct(open) +
                                       " on open ground)";
    return who + ": " + what + " " + with_commas(count) + " triangles, more than max_triangles=" +
           std::to_string(opt.max_triangles) + "; raise tolerance_m or max_triangles";
}

// a posteriori verification: every leaf is measured densely against the true surface (both
// ways, exact projection); a leaf beyond the tolerance is split and its children measured in turn.
// this makes the measured error, not the probes' estimate, the acceptance criterion.
Status Refiner::verify(RefineStats& stats, std::string& error) {
    const double tol = opt.tolerance_m;
    std::vector<std::uint32_t> check;
    for (std::size_t i = 0; i < tris.size(); ++i)
        if (tris[i].child == kNone) check.push_back(static_cast<std::uint32_t>(i));
    std::vector<std::uint8_t> bad;
    // samples a quarter of the shortest noise wavelength that matters apart, at most
    const double spacing = verify_spacing(F, tol);
    // measured in slices so progress can be reported between them (the result does not depend
    // on the slicing: each triangle is measured on its own)
    constexpr std::size_t kSlice = 1u << 15;
    std::uint64_t measured = 0, to_measure = check.size();
    std::vector<std::uint32_t> leaves_now;
    std::vector<float> loose;
    std::vector<std::uint8_t> tight;
    for (;;) {
    while (!check.empty()) {
        bad.assign(check.size(), 0);
        for (std::size_t s0 = 0; s0 < check.size(); s0 += kSlice) {
            const std::size_t s1 = std::min(check.size(), s0 + kSlice);
            parallel_for(s1 - s0, opt.threads, [&](std::size_t b0, std::size_t e0) {
                for (std::size_t i = s0 + b0; i < s0 + e0; ++i) {
                    Node& t = tris[check[i]];
                    const int order =
                        sampling_order(pos(t.v[0]), pos(t.v[1]), pos(t.v[2]), opt.verify_order, spacing);
                    for (int a = 0; a < kAltSlots; ++a) {
                        if (t.err < 0 || t.err_order == order || t.alt_order[a] != order) continue;
                        // measured at this order by a level of the previous bake: the same numbers
                        std::swap(t.err_order, t.alt_order[a]);
                        std::swap(t.m2s, t.alt_m2s[a]);
                        std::swap(t.s2m, t.alt_s2m[a]);
                        t.err = std::max(t.m2s, t.s2m);
                    }
                    if (t.err < 0 || t.err_order != order) {  // (an incremental rebuild may have it already)
                        double m2s, s2m;
                        double w = triangle_deviation(F, pos(t.v[0]), pos(t.v[1]), pos(t.v[2]), order, m2s, s2m);
                        t.err = static_cast<float>(w);
                        t.err_order = static_cast<std::uint8_t>(order);
                        t.m2s = static_cast<float>(m2s);
                        t.s2m = static_cast<float>(s2m);
                    }
                    if (t.err > kVerifyMargin * tol / kWallSlack && !at_floor(h, t, tol) && t.err > verify_limit(F, h, t, tol)) {
                        bad[i] = 1;
                        if (std::isnan(t.mid_r)) t.mid_r = midpoint_radius(t);
                    }
                }
            });
            measured += s1 - s0;
            if (opt.verify_progress) opt.verify_progress(measured, std::max(to_measure, measured));
        }
        std::size_t first_new = tris.size();
        for (std::size_t i = 0; i < check.size(); ++i) {
            if (!bad[i]) continue;
            split(check[i]);
            ++stats.repaired;
            if (leaves > opt.max_triangles) {
                error = budget_message("tolerance_m=" + num_text(tol) + " (after verification) needs more than", leaves);
                return Status::BudgetExceeded;
            }
        }
        check.clear();
        for (std::size_t i = first_new; i < tris.size(); ++i)
            if (tris[i].child == kNone) check.push_back(static_cast<std::uint32_t>(i));
        to_measure += check.size();
    }
    // the leaves that can hold the largest deviation, measured tight: one beyond kTightLimit of
    // the tolerance is split too, and the new leaves verified in turn
    leaves_now.clear();
    loose.clear();
    for (std::size_t i = 0; i < tris.size(); ++i)
        if (tris[i].child == kNone) {
            leaves_now.push_back(static_cast<std::uint32_t>(i));
            loose.push_back(tris[i].err);
        }
    publish_tight(F, h, leaves_now, loose, opt.threads, tight);
    const std::size_t first_new = tris.size();
    for (std::size_t i = 0; i < leaves_now.size(); ++i) {
        const Node& t = tris[leaves_now[i]];
        if (!tight[i] || !(std::max(t.tight_m2s, t.tight_s2m) > kTightLimit * tol) || at_floor(h, t, tol)) continue;
        if (std::isnan(tris[leaves_now[i]].mid_r)) tris[leaves_now[i]].mid_r = midpoint_radius(tris[leaves_now[i]]);
        split(leaves_now[i]);
        ++stats.repaired;
        if (leaves > opt.max_triangles) {
            error = budget_message("tolerance_m=" + num_text(tol) + " (after verification) needs more than", leaves);
            return Status::BudgetExceeded;
        }
    }
    for (std::size_t i = first_new; i < tris.size(); ++i)
        if (tris[i].child == kNone) check.push_back(static_cast<std::uint32_t>(i));
    if (check.empty()) break;
    to_measure += check.size();
    }
    return Status::Ok;
}

}  // namespace

void parallel_for(std::size_t n, int threads, const std::function<void(std::size_t, std::size_t)>& fn,
                  std::size_t block) {
    if (n == 0) return;
    int hw = static_cast<int>(std::max(1u, std::thread::hardware_concurrency()));
    int nt = threads <= 0 ? hw : threads;
    block = std::max<std::size_t>(block, 1);
    std::size_t blocks = (n + block - 1) / block;
    nt = static_cast<int>(std::min<std::size_t>(static_cast<std::size_t>(nt), blocks));
    if (nt <= 1) {
        fn(0, n);
        return;
    }
    std::atomic<std::size_t> next{0};
    auto work = [&]() {
        for (;;) {
            std::size_t b = next.fetch_add(1);
            if (b >= blocks) return;
            fn(b * block, std::min(n, (b + 1) * block));
        }
    };
    // the workers' field evaluations are handed back to the calling thread's tally
    std::atomic<std::uint64_t> points{0}, terms{0};
    auto worker = [&]() {
        const EvalTally before = eval_tally();
        work();
        points += eval_tally().points - before.points;
        terms += eval_tally().terms - before.terms;
    };
    std::vector<std::thread> pool;
    pool.reserve(static_cast<std::size_t>(nt - 1));
    for (int i = 1; i < nt; ++i) pool.emplace_back(worker);
    work();
    for (auto& th : pool) th.join();
    eval_tally().points += points;
    eval_tally().terms += terms;
}

void icosahedron(std::vector<Vec3>& v, std::vector<std::uint32_t>& f) {
    const double phi = (1 + std::sqrt(5.0)) / 2;
    v = {{-1, phi, 0}, {1, phi, 0}, {-1, -phi, 0}, {1, -phi, 0}, {0, -1, phi}, {0, 1, phi},
         {0, -1, -phi}, {0, 1, -phi}, {phi, 0, -1}, {phi, 0, 1}, {-phi, 0, -1}, {-phi, 0, 1}};
    for (auto& x : v) x = normalize(x);
    f = {0, 11, 5, 0, 5, 1, 0, 1, 7, 0, 7, 10, 0, 10, 11, 1, 5, 9, 5, 11, 4,
         11, 10, 2, 10, 7, 6, 7, 1, 8, 3, 9, 4, 3, 4, 2, 3, 2, 6, 3, 6, 8,
         3, 8, 9, 4, 9, 5, 2, 4, 11, 6, 2, 10, 8, 6, 7, 9, 8, 1};
    // make every face counter-clockwise seen from outside
    for (std::size_t i = 0; i < f.size(); i += 3) {
        Vec3 a = v[f[i]], b = v[f[i + 1]], c = v[f[i + 2]];
        if (dot(cross(b - a, c - a), a + b + c) < 0) std::swap(f[i + 1], f[i + 2]);
    }
}

std::uint64_t estimate_triangles(const Field& field, double tolerance_m, OffsetMode mode, int min_level,
                                 std::uint64_t survey_cap, int threads) {
    RefineOptions o;
    o.tolerance_m = tolerance_m;
    o.mode = mode;
    o.min_level = min_level;
    o.threads = threads;
    o.verify_order = 0;
    o.survey_only = true;
    o.survey_cap = survey_cap;
    Hierarchy h;
    RefineStats st;
    std::string error;
    if (build_hierarchy(field, o, h, st, error) != Status::Ok) return 0;
    return st.estimate;
}

double verify_spacing(const Field& field, double tolerance_m) {
    double lam = field.finest_wavelength(0.25 * tolerance_m);
    return std::isfinite(lam) ? lam / 4 : 0.0;
}

void edit_caps(const Field& before, const Field& after, double tolerance_m, std::vector<Cap>& caps,
               double& margin_m) {
    caps.clear();
    // a safety ring beyond each node's own reach (see adopt): a few tolerances, at least a metre
    margin_m = std::max(1.0, 4.0 * tolerance_m);
    if (verify_spacing(before, tolerance_m) != verify_spacing(after, tolerance_m) ||
        before.has_steps() != after.has_steps()) {
        caps.push_back({Vec3{0, 0, 1}, 4.0});
        return;
    }
    const std::size_t n0 = before.size(), n1 = after.size();
    std::size_t head = 0, tail = 0;
    while (head < std::min(n0, n1) && before.same_feature(head, after, head)) ++head;
    while (tail < std::min(n0, n1) - head && before.same_feature(n0 - 1 - tail, after, n1 - 1 - tail)) ++tail;
    for (std::size_t i = head; i < n0 - tail; ++i) caps.push_back({before.feature(i).cap_c, before.reach_angle(i)});
    for (std::size_t i = head; i < n1 - tail; ++i) caps.push_back({after.feature(i).cap_c, after.reach_angle(i)});
}

Cap node_cap(const Hierarchy& h, const Node& t) {
    Vec3 c = normalize(h.dir[t.v[0]] + h.dir[t.v[1]] + h.dir[t.v[2]]);
    double cmin = std::min({dot(c, h.dir[t.v[0]]), dot(c, h.dir[t.v[1]]), dot(c, h.dir[t.v[2]])});
    return {c, std::acos(std::min(1.0, std::max(-1.0, cmin))) + 1e-12};
}

// the size floor: a triangle whose footprint is an eighth of the tolerance across is accepted.
// only the footprint counts: across a vertical wall the 3d edges stay as tall as the wall.
bool at_floor(const Hierarchy& h, const Node& t, double tol) {
    return t.level >= kMaxLevel || 2 * h.radius * node_cap(h, t).angle < tol / 8;
}

bool near_wall(const Field& field, Vec3 a, Vec3 b, Vec3 c) {
    if (!field.has_steps()) return false;
    const Vec3 m = (1.0 / 3.0) * (a + b + c);
    const double r = std::max({norm(a - m), norm(b - m), norm(c - m)});
    return field.wall_distance(m) <= 1.5 * r;
}

double verify_limit(const Field& field, const Hierarchy& h, const Node& t, double tol) {
    const double limit = kVerifyMargin * tol;
    return near_wall(field, h.pos(t.v[0]), h.pos(t.v[1]), h.pos(t.v[2])) ? limit / kWallSlack : limit;
}

void tight_of(const Field& field, const Hierarchy& h, Node& t) {
    if (t.tight_m2s >= 0) return;
    const Vec3 a = h.pos(t.v[0]), b = h.pos(t.v[1]), c = h.pos(t.v[2]);
    double m2s, s2m;
    tight_deviation(field, a, b, c, verify_spacing(field, h.tolerance), m2s, s2m, !near_wall(field, a, b, c));
    t.tight_m2s = static_cast<float>(m2s);
    t.tight_s2m = static_cast<float>(s2m);
}

// the published figures. the verification's grid falls short of a triangle's peak where the
// distance has a kink between samples (a wall's top and foot, a crease, a blend changing sides);
// tight_deviation searches it out, on the leaves that can hold the largest: by decreasing loose
// figure times kGridSlack (kWallSlack beside a wall), in batches of kTightBatch (a fixed size:
// which leaves are measured does not depend on the threads), until no leaf left could pass the
// largest tight figure so far.
double publish_tight(const Field& field, Hierarchy& h, const std::vector<std::uint32_t>& leaves,
                     const std::vector<float>& loose, int threads, std::vector<std::uint8_t>& tight) {
    tight.assign(leaves.size(), 0);
    if (leaves.empty()) return 0;
    float most = 0;
    for (float x : loose) most = std::max(most, x);
    // the leaves that could matter at all: the largest tight figure is about the largest loose
    // one or more (less only where a loose figure's projection fell into the wrong basin: then
    // the walk runs again over every leaf)
    std::vector<std::pair<double, std::uint32_t>> pot;
    std::vector<std::uint32_t> batch;
    double best = 0;
    for (double floor_pot : {0.9 * static_cast<double>(most), 0.0}) {
        pot.clear();
        for (std::size_t i = 0; i < leaves.size(); ++i) {
            if (!(loose[i] * kWallSlack > floor_pot)) continue;
            const Node& t = h.nodes[leaves[i]];
            const bool wall = near_wall(field, h.pos(t.v[0]), h.pos(t.v[1]), h.pos(t.v[2]));
            const double p = loose[i] * (wall ? kWallSlack : kGridSlack);
            if (p > floor_pot) pot.push_back({p, static_cast<std::uint32_t>(i)});
        }
        std::sort(pot.begin(), pot.end(),
                  [](const std::pair<double, std::uint32_t>& a, const std::pair<double, std::uint32_t>& b) {
                      return a.first > b.first || (a.first == b.first && a.second < b.second);
                  });
        std::fill(tight.begin(), tight.end(), 0);
        best = 0;
        for (std::size_t next = 0; next < pot.size() && pot[next].first > best;) {
            batch.clear();
            while (next < pot.size() && batch.size() < kTightBatch && pot[next].first > best)
                batch.push_back(pot[next++].second);
            parallel_for(batch.size(), threads, [&](std::size_t b, std::size_t e) {
                for (std::size_t k = b; k < e; ++k) tight_of(field, h, h.nodes[leaves[batch[k]]]);
            }, 1);
            for (std::uint32_t i : batch) {
                const Node& t = h.nodes[leaves[i]];
                tight[i] = 1;
                best = std::max(best, static_cast<double>(std::max(t.tight_m2s, t.tight_s2m)));
            }
        }
        if (best >= floor_pot) break;
    }
    return best;
}

Status build_hierarchy(const Field& field, const RefineOptions& options, Hierarchy& h,
                       RefineStats& stats, std::string& error) {
    h = Hierarchy{};
    h.min_level = options.min_level;
    h.tolerance = options.tolerance_m;
    Refiner r(field, options, h);
    return r.run(stats, error);
}

void leaves_mesh(const Hierarchy& h, Mesh& out) {
    const std::size_t nv = h.dir.size();
    out.directions.resize(nv * 3);
    out.positions.resize(nv * 3);
    for (std::size_t i = 0; i < nv; ++i) {
        Vec3 p = h.rad[i] * h.dir[i];
        out.directions[3 * i] = h.dir[i].x;
        out.directions[3 * i + 1] = h.dir[i].y;
        out.directions[3 * i + 2] = h.dir[i].z;
        out.positions[3 * i] = p.x;
        out.positions[3 * i + 1] = p.y;
        out.positions[3 * i + 2] = p.z;
    }
    out.triangles.clear();
    out.levels.clear();
    out.errors.clear();
    for (const Node& t : h.nodes) {
        if (t.child != kNone) continue;
        out.triangles.insert(out.triangles.end(), {t.v[0], t.v[1], t.v[2]});
        out.levels.push_back(t.level);
        out.errors.push_back(t.err);
    }
}

Status refine(const Field& field, const RefineOptions& options, Mesh& out, RefineStats& stats,
              std::string& error) {
    Hierarchy h;
    Status s = build_hierarchy(field, options, h, stats, error);
    if (s != Status::Ok) return s;
    leaves_mesh(h, out);
    return Status::Ok;
}

}  // namespace gm
