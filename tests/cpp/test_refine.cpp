// the base icosahedron and the bisection hierarchy (csrc/refine.hpp)
#include <doctest/doctest.h>

#include <cmath>
#include <map>
#include <set>
#include <utility>
#include <vector>

#include "measure.hpp"
#include "refine.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Vec3;

// the regular icosahedron {3, 5}: 12 vertices, 30 edges, 20 triangular faces, five at each vertex;
// V - E + F = 2 (Euler's polyhedron formula); all edges of length r_c / sin(2 pi / 5) for
// circumradius r_c (Coxeter, "Regular Polytopes" (1973), table I)
TEST_CASE("icosahedron: counts, Euler's formula, equal edges, outward winding") {
    std::vector<Vec3> v;
    std::vector<std::uint32_t> f;
    gm::icosahedron(v, f);
    REQUIRE(v.size() == 12);
    REQUIRE(f.size() == 60);
    Topology t = topology(f);
    CHECK(t.vertices == 12);
    CHECK(t.edges == 30);
    CHECK(t.faces == 20);
    CHECK(t.euler() == 2);
    CHECK(t.closed_manifold());
    std::map<std::uint32_t, int> degree;
    for (std::uint32_t i : f) ++degree[i];
    for (const auto& [id, n] : degree) CHECK(n == 5);
    for (Vec3 p : v) CHECK(gm::norm(p) == doctest::Approx(1.0).epsilon(1e-15));
    const double edge = 1 / std::sin(2 * kPi / 5);
    for (std::size_t i = 0; i < f.size(); i += 3) {
        Vec3 a = v[f[i]], b = v[f[i + 1]], c = v[f[i + 2]];
        CHECK(gm::norm(b - a) == doctest::Approx(edge).epsilon(1e-14));
        CHECK(gm::norm(c - b) == doctest::Approx(edge).epsilon(1e-14));
        // counter-clockwise seen from outside: the normal points away from the centre
        CHECK(gm::dot(gm::cross(b - a, c - a), a + b + c) > 0);
    }
}

namespace {

struct Built {
    gm::Hierarchy h;
    gm::RefineStats stats;
    gm::Mesh mesh;
};

void build(const gm::Field& f, double tol, int threads, Built& out) {
    gm::RefineOptions o;
    o.tolerance_m = tol;
    o.threads = threads;
    std::string err;
    gm::Status s = gm::build_hierarchy(f, o, out.h, out.stats, err);
    INFO(err);
    REQUIRE(s == gm::Status::Ok);
    gm::leaves_mesh(out.h, out.mesh);
}

// the finest leaves of a hierarchy: a closed, outward, crack-free surface within the tolerance
void check_leaves(const gm::Field& f, const Built& b, double tol) {
    const gm::Hierarchy& h = b.h;
    const gm::Mesh& m = b.mesh;
    const std::size_t nt = m.triangles.size() / 3;
    REQUIRE(nt > 20);
    // a closed 2-manifold of genus 0: every edge in exactly two leaves, opposite ways, and
    // V - E + F = 2 (Euler characteristic of the sphere)
    Topology t = topology(m.triangles);
    CHECK(t.closed_manifold());
    CHECK(t.euler() == 2);
    CHECK(t.vertices == h.dir.size());  // every vertex made is a leaf corner
    // no T-junction: no leaf edge has its bisection vertex in the mesh (the vertex made when
    // that edge was split; vparent holds the edge each vertex bisects)
    std::map<std::pair<std::uint32_t, std::uint32_t>, std::uint32_t> midpoint;
    for (std::uint32_t v = 0; v < h.dir.size(); ++v) {
        std::uint32_t a = h.vparent[2 * v], c = h.vparent[2 * v + 1];
        if (a != gm::kNone) midpoint[{std::min(a, c), std::max(a, c)}] = v;
    }
    std::size_t t_junctions = 0;
    for (std::size_t i = 0; i < nt; ++i)
        for (int k = 0; k < 3; ++k) {
            std::uint32_t a = m.triangles[3 * i + k], c = m.triangles[3 * i + (k + 1) % 3];
            t_junctions += midpoint.count({std::min(a, c), std::max(a, c)});
        }
    CHECK(t_junctions == 0);
    // outward: counter-clockwise seen from outside, vertices on the true surface
    std::size_t inward = 0, floor_leaves = 0, unverified = 0, too_far = 0;
    for (std::size_t i = 0; i < nt; ++i) {
        Vec3 p[3];
        for (int k = 0; k < 3; ++k) p[k] = h.pos(m.triangles[3 * i + k]);
        inward += gm::dot(gm::cross(p[1] - p[0], p[2] - p[0]), p[0] + p[1] + p[2]) <= 0;
    }
    CHECK(inward == 0);
    for (std::size_t v = 0; v < h.dir.size(); ++v)
        CHECK(std::fabs(h.rad[v] - (f.radius() + f.eval(h.dir[v], nullptr))) <= 1e-9 * f.radius());
    // every leaf measured a posteriori and within the tolerance (a leaf at the size floor may
    // stay beyond it: none here, the worlds have no vertical walls)
    for (const gm::Node& n : h.nodes) {
        if (n.child != gm::kNone) continue;
        unverified += n.err < 0;
        floor_leaves += gm::at_floor(h, n, tol);
        too_far += n.err > tol;
    }
    CHECK(unverified == 0);
    CHECK(floor_leaves == 0);
    CHECK(too_far == 0);
    // and measured again on a denser grid, both ways, by the independent measurement
    gm::Deviation d = gm::measure(f, m.positions.data(), h.dir.size(), m.triangles.data(), nt, 6, 2, nullptr);
    INFO("measured " << d.max_m << " m at tolerance " << tol << " m");
    CHECK(d.max_m <= tol);
}

// same input, same bytes out, whatever the thread count (docs/meshing.md; the design's rule)
void check_same(const Built& a, const Built& b) {
    CHECK(same_bytes(a.mesh.positions, b.mesh.positions));
    CHECK(same_bytes(a.mesh.triangles, b.mesh.triangles));
    CHECK(same_bytes(a.mesh.levels, b.mesh.levels));
    CHECK(same_bytes(a.mesh.errors, b.mesh.errors));
    CHECK(same_bytes(a.h.vparent, b.h.vparent));
    REQUIRE(a.h.nodes.size() == b.h.nodes.size());
    std::size_t differ = 0;
    for (std::size_t i = 0; i < a.h.nodes.size(); ++i) {
        const gm::Node &x = a.h.nodes[i], &y = b.h.nodes[i];
        bool same = x.child == y.child && x.parent == y.parent && x.pair == y.pair && x.level == y.level &&
                    x.chunk == y.chunk && same_bits(x.tau, y.tau) && same_bits(x.err, y.err);
        for (int k = 0; k < 3; ++k) same = same && x.v[k] == y.v[k] && x.nb[k] == y.nb[k];
        differ += !same;
    }
    CHECK(differ == 0);
}

}  // namespace

TEST_CASE("hierarchy of a bare sphere: closed, conforming, within tolerance, thread-independent") {
    const double R = 1000, tol = 2;
    gm::Field f;
    make_field(f, R, {});
    Built one, two;
    build(f, tol, 1, one);
    build(f, tol, 2, two);
    check_leaves(f, one, tol);
    check_same(one, two);
    // not needlessly fine: the worst leaf uses a good part of the tolerance (common practice)
    float worst = 0;
    for (float e : one.mesh.errors) worst = std::max(worst, e);
    CHECK(worst > 0.25 * tol);
    for (double r : one.h.rad) CHECK(r == R);
}

TEST_CASE("hierarchy of a small world: closed, conforming, within tolerance, thread-independent") {
    const double R = 1000, tol = 1;
    const Vec3 c = gm::normalize({0.3, 0.5, 0.8}), t = some_tangent(c), s = gm::cross(c, t);
    gm::Field f;
    make_field(f, R, {
        hill(along(c, t, R, 300), 40, 80),
        mesa(along(c, s, R, 300), 25, 120, 60),
        crater(along(c, -1 * t, R, 300), 20, 100, 8, 40),
        ridge(along(c, s, R, -250), along(c, s, R, -500), 15, 50, 0),
        block(c, 12, 90, 50, 10, 30, 20),
        noise(0.5, 0.004, 3, 0.5, 17),
    });
    Built one, two;
    build(f, tol, 1, one);
    build(f, tol, 2, two);
    check_leaves(f, one, tol);
    check_same(one, two);
}

TEST_CASE("refinement refuses bad options with a clear message") {
    gm::Field f;
    make_field(f, 1000, {});
    gm::Hierarchy h;
    gm::RefineStats st;
    std::string err;
    gm::RefineOptions o;
    o.tolerance_m = 0;
    CHECK(gm::build_hierarchy(f, o, h, st, err) == gm::Status::InvalidArgument);
    CHECK(err.find("tolerance_m must be a finite number > 0") != std::string::npos);
    o.tolerance_m = 0.001;
    o.max_triangles = 10000;
    err.clear();
    CHECK(gm::build_hierarchy(f, o, h, st, err) == gm::Status::BudgetExceeded);
    CHECK(err.find("max_triangles=10000") != std::string::npos);
}
