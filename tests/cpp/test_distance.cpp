// distances between points, triangles and the true surface (csrc/distance.hpp)
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <vector>
#include <limits>

#include "distance.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Vec3;

namespace {

void check_point(Vec3 got, Vec3 want) {
    CHECK(gm::norm(got - want) <= 1e-12);
}

// the nearest of a dense barycentric grid on the triangle (brute force, common practice)
double grid_distance(Vec3 p, Vec3 a, Vec3 b, Vec3 c, int n) {
    double best = std::numeric_limits<double>::infinity();
    for (int i = 0; i <= n; ++i)
        for (int j = 0; j <= n - i; ++j) {
            double s = static_cast<double>(i) / n, t = static_cast<double>(j) / n;
            best = std::min(best, gm::norm(p - ((1 - s - t) * a + s * b + t * c)));
        }
    return best;
}

}  // namespace

// Ericson, "Real-Time Collision Detection" (2005) section 5.1.5: the closest point lies in one of
// seven Voronoi regions (three vertices, three edges, the face). The unit right triangle
// a = 0, b = x, c = y gives each region's answer by inspection.
TEST_CASE("closest point on a triangle in each Voronoi region") {
    const Vec3 a{0, 0, 0}, b{1, 0, 0}, c{0, 1, 0};
    check_point(gm::closest_on_triangle({0.25, 0.25, 5}, a, b, c), {0.25, 0.25, 0});  // face
    check_point(gm::closest_on_triangle({-1, -1, 2}, a, b, c), a);                   // vertex a
    check_point(gm::closest_on_triangle({2, -1, 0}, a, b, c), b);                    // vertex b
    check_point(gm::closest_on_triangle({-1, 3, -1}, a, b, c), c);                   // vertex c
    check_point(gm::closest_on_triangle({0.5, -1, 3}, a, b, c), {0.5, 0, 0});        // edge ab
    check_point(gm::closest_on_triangle({1, 1, 0}, a, b, c), {0.5, 0.5, 0});         // edge bc
    check_point(gm::closest_on_triangle({-1, 0.5, 0}, a, b, c), {0, 0.5, 0});        // edge ca
}

// for arbitrary triangles and points the answer is a point of the triangle no farther than the
// nearest point of a dense grid on it, and the grid comes within its spacing of the answer
TEST_CASE("closest point on a triangle agrees with a brute-force search") {
    Rng rng(5);
    const int n = 200;
    for (int k = 0; k < 200; ++k) {
        Vec3 a = 3 * rng.direction(), b = 3 * rng.direction(), c = 3 * rng.direction();
        Vec3 p = rng.uniform(0, 6) * rng.direction();
        Vec3 q = gm::closest_on_triangle(p, a, b, c);
        double d = gm::norm(p - q), brute = grid_distance(p, a, b, c, n);
        // q is on the triangle: its plane, inside the edges
        Vec3 nrm = gm::normalize(gm::cross(b - a, c - a));
        CHECK(std::fabs(gm::dot(q - a, nrm)) <= 1e-9);
        CHECK(d <= brute + 1e-12);
        double longest = std::max({gm::norm(b - a), gm::norm(c - b), gm::norm(a - c)});
        CHECK(brute - d <= longest / n);
    }
}

// a ray from the centre along u meets the plane z = 2 at 2u; inside the triangle it hits, outside
// (or parallel) it misses (common practice)
TEST_CASE("ray from the centre meets a triangle where the plane is") {
    const Vec3 a{-1, -1, 2}, b{2, -1, 2}, c{-1, 2, 2};
    Vec3 p;
    CHECK(gm::ray_hits_triangle({0, 0, 1}, a, b, c, p));
    check_point(p, {0, 0, 2});
    Vec3 u = gm::normalize({0.25, 0.1, 1});
    CHECK(gm::ray_hits_triangle(u, a, b, c, p));
    check_point(p, (2 / u.z) * u);
    CHECK_FALSE(gm::ray_hits_triangle(gm::normalize({1, 1, 1}), a, b, c, p));  // hits (2,2,2)
    CHECK_FALSE(gm::ray_hits_triangle({1, 0, 0}, a, b, c, p));                   // parallel
}

// on a bare sphere the distance from p to the surface is | |p| - R | (exact: the nearest
// surface point is radially below or above p)
TEST_CASE("projection onto a bare sphere gives the radial distance") {
    gm::Field f;
    make_field(f, 1000, {});
    Rng rng(3);
    for (int k = 0; k < 100; ++k) {
        Vec3 u = rng.direction();
        double r = rng.uniform(500, 1500);
        CHECK(gm::project_distance(f, r * u, nullptr, 0, 4) == doctest::Approx(std::fabs(r - 1000)).epsilon(1e-12));
    }
}

// beside a steep hill the nearest surface point is not below p: the projection finds a distance
// well under the radial one, equal to a brute-force search over surface points (common
// practice) and never below it, since every iterate is a surface point
TEST_CASE("projection onto a hill agrees with a brute-force nearest surface point") {
    const double R = 1000;
    gm::Field f;
    const Vec3 c{0, 0, 1};
    make_field(f, R, {hill(c, 60, 60)});
    const Vec3 t{1, 0, 0};
    for (double d : {40.0, 60.0, 90.0}) {
        Vec3 u = along(c, t, R, d);
        const double H = f.eval(u, nullptr);
        Vec3 p = (R + H + 10) * u;  // 10 m above the slope
        double proj = gm::project_distance(f, p, nullptr, 0, 20);
        // brute force: surface points on a grid around u, then a finer grid around the best
        double best = std::numeric_limits<double>::infinity();
        Vec3 at = u;
        double span = 30.0 / R;
        for (int pass = 0; pass < 3; ++pass, span /= 10) {
            Vec3 centre = at;
            Vec3 e1 = gm::normalize(t - gm::dot(t, centre) * centre), e2 = gm::cross(centre, e1);
            for (int i = -50; i <= 50; ++i)
                for (int j = -50; j <= 50; ++j) {
                    Vec3 v = gm::normalize(centre + (span * i / 50) * e1 + (span * j / 50) * e2);
                    double dist = gm::norm(p - (R + f.eval(v, nullptr)) * v);
                    if (dist < best) {
                        best = dist;
                        at = v;
                    }
                }
        }
        INFO("d = " << d << ", projection - brute force = " << proj - best);
        // both are distances to surface points, so both are upper bounds of the true distance:
        // they agree once both have converged
        CHECK(std::fabs(proj - best) <= 1e-6);
        CHECK(proj < 10 * 0.95);  // the slope makes it clearly shorter than the radial 10 m
    }
}

// the tree's nearest triangle against a scan of every triangle by closest_on_triangle (brute
// force, common practice): the same minimum, on a random soup of small triangles around a sphere
// and query points near and far from it; and `upper` caps the answer
TEST_CASE("the triangle tree finds the same nearest distance as a scan of every triangle") {
    std::uint64_t state = 12345;
    auto uniform = [&]() {
        state = state * 6364136223846793005ull + 1442695040888963407ull;
        return static_cast<double>(state >> 11) / 9007199254740992.0;
    };
    auto unit = [&]() {
        for (;;) {
            Vec3 v{2 * uniform() - 1, 2 * uniform() - 1, 2 * uniform() - 1};
            const double n = gm::norm(v);
            if (n > 0.1 && n <= 1) return (1.0 / n) * v;
        }
    };
    const std::size_t n = 2000;
    std::vector<double> P;
    std::vector<std::uint32_t> T;
    for (std::size_t t = 0; t < n; ++t) {
        const Vec3 c = 100.0 * unit();
        for (int k = 0; k < 3; ++k) {
            const Vec3 p = c + 3.0 * unit();
            P.insert(P.end(), {p.x, p.y, p.z});
            T.push_back(static_cast<std::uint32_t>(3 * t + static_cast<std::size_t>(k)));
        }
    }
    const gm::TriangleTree tree(P.data(), T.data(), n);
    auto corner = [&](std::size_t t, int k) {
        const double* q = &P[3 * T[3 * t + static_cast<std::size_t>(k)]];
        return Vec3{q[0], q[1], q[2]};
    };
    for (int i = 0; i < 300; ++i) {
        const Vec3 q = (80.0 + 40.0 * uniform()) * unit();
        double want = std::numeric_limits<double>::infinity();
        for (std::size_t t = 0; t < n; ++t)
            want = std::min(want, gm::norm(q - gm::closest_on_triangle(q, corner(t, 0), corner(t, 1), corner(t, 2))));
        CHECK(tree.distance(q, std::numeric_limits<double>::infinity()) == want);
        CHECK(tree.distance(q, 0.5 * want) == 0.5 * want);
    }
    const gm::TriangleTree empty(P.data(), T.data(), 0);
    CHECK(empty.distance(Vec3{1, 2, 3}, 7.0) == 7.0);
}
