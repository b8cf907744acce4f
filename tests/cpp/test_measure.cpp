// a posteriori deviation of flat triangles from the true surface (csrc/measure.hpp)
#include <doctest/doctest.h>

#include <cmath>
#include <vector>

#include "measure.hpp"
#include "refine.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Vec3;

namespace {

// sagitta of a chord plane at distance r from the axis in a sphere of radius R:
// R - sqrt(R^2 - r^2) (e.g. Wikipedia "Sagitta (geometry)"), written without cancellation
double sagitta(double R, double r) { return r * r / (R + std::sqrt(R * R - r * r)); }

// an equilateral triangle with its corners on the sphere of radius `rr` around direction c, its
// circumcircle of radius r: the corners at angle asin(r / rr) from c, 120 degrees apart
void equilateral(double rr, double r, Vec3 c, Vec3 out[3]) {
    Vec3 t1 = some_tangent(c), t2 = gm::cross(c, t1);
    double s = r / rr, k = std::sqrt(1 - s * s);
    for (int i = 0; i < 3; ++i) {
        double a = 2 * kPi * i / 3;
        out[i] = rr * (k * c + s * (std::cos(a) * t1 + std::sin(a) * t2));
    }
}

}  // namespace

// a flat equilateral triangle inscribed in a sphere lies deepest at its centroid, the centre of
// its circumcircle, where it is one sagitta below the sphere; the sphere point above it is one
// sagitta from the triangle. orders divisible by 3 sample the centroid.
TEST_CASE("a flat triangle deviates from a bare sphere by the sagitta") {
    struct Case {
        double R, r, want;
    };
    // 7.848 cm at 1 km on the Earth's mean radius 6371 km (IUGG); r^2 / 2R = 0.0784806 m is the
    // familiar curvature drop over 1 km
    const Case cases[] = {
        {1000, 10, sagitta(1000, 10)},
        {1000, 100, sagitta(1000, 100)},
        {1000, 600, 200.0},  // 1000 - sqrt(1000^2 - 600^2) = 1000 - 800 (a 3-4-5 triangle)
        {6371000, 1000, 0.07848061577140222},
    };
    for (const Case& k : cases) {
        gm::Field f;
        make_field(f, k.R, {});
        Vec3 V[3];
        equilateral(k.R, k.r, gm::normalize({0.2, -0.4, 0.9}), V);
        for (int order : {3, 6, 9}) {
            double m2s = -1, s2m = -1;
            double w = gm::triangle_deviation(f, V[0], V[1], V[2], order, m2s, s2m);
            INFO("R = " << k.R << ", r = " << k.r << ", order " << order);
            // rounding of |p| near R: a few units in the last place of R
            const double tol = 1e-9 * k.want + 1e-14 * k.R;
            CHECK(std::fabs(m2s - k.want) <= tol);
            CHECK(std::fabs(s2m - k.want) <= tol);
            CHECK(std::fabs(w - k.want) <= tol);
        }
    }
    CHECK(sagitta(6371000, 1000) == doctest::Approx(1000.0 * 1000 / (2 * 6371000)).epsilon(1e-6));
}

// the same triangle lifted onto a plateau 50 m high: the sphere is now R + 50
TEST_CASE("a flat triangle on a plateau deviates by the sagitta of the plateau's sphere") {
    const double R = 1000;
    const Vec3 c = gm::normalize({0.2, -0.4, 0.9});
    gm::Field f;
    make_field(f, R, {mesa(c, 50, 400, 100)});
    Vec3 V[3];
    equilateral(R + 50, 150, c, V);
    double m2s, s2m;
    double w = gm::triangle_deviation(f, V[0], V[1], V[2], 6, m2s, s2m);
    CHECK(w == doctest::Approx(sagitta(R + 50, 150)).epsilon(1e-9));
}

// the sample spacing raises the order: order 1 samples only the corners (which lie on the
// surface: no deviation seen); a spacing of a third of the edge makes it order 3
TEST_CASE("sample spacing raises the grid order") {
    const double R = 1000;
    gm::Field f;
    make_field(f, R, {});
    Vec3 V[3];
    equilateral(R, 300, Vec3{0, 0, 1}, V);
    double m2s, s2m;
    CHECK(gm::triangle_deviation(f, V[0], V[1], V[2], 1, m2s, s2m) == 0.0);
    const double edge = gm::norm(V[1] - V[0]);
    CHECK(gm::triangle_deviation(f, V[0], V[1], V[2], 1, m2s, s2m, edge / 3 * 1.0000001) ==
          doctest::Approx(sagitta(R, 300)).epsilon(1e-9));
}

// the icosahedron inscribed in a sphere of radius R: every face lies R (1 - r_i / r_c) below it,
// with r_i / r_c = ((3 + sqrt 5) sqrt 3 / 12) / (sqrt(10 + 2 sqrt 5) / 4) = 0.79465447229...,
// the ratio of the regular icosahedron's inradius to its circumradius (Coxeter, "Regular
// Polytopes" (1973), table I); the same as the sagitta of the face's circumcircle
TEST_CASE("the icosahedron measured against its circumsphere") {
    const double R = 1000;
    const double ratio = ((3 + std::sqrt(5.0)) * std::sqrt(3.0) / 12) / (std::sqrt(10 + 2 * std::sqrt(5.0)) / 4);
    CHECK(ratio == doctest::Approx(0.7946544722917661).epsilon(1e-15));
    const double edge = R / std::sin(2 * kPi / 5);  // circumradius = edge sin(2 pi / 5)
    CHECK(R * (1 - ratio) == doctest::Approx(sagitta(R, edge / std::sqrt(3.0))).epsilon(1e-12));
    gm::Field f;
    make_field(f, R, {});
    std::vector<Vec3> v;
    std::vector<std::uint32_t> faces;
    gm::icosahedron(v, faces);
    std::vector<double> pos;
    for (Vec3 p : v) pos.insert(pos.end(), {R * p.x, R * p.y, R * p.z});
    std::vector<double> per1(20), per2(20);
    gm::Deviation d1 = gm::measure(f, pos.data(), v.size(), faces.data(), 20, 3, 1, per1.data());
    gm::Deviation d2 = gm::measure(f, pos.data(), v.size(), faces.data(), 20, 3, 2, per2.data());
    CHECK(d1.max_m == doctest::Approx(R * (1 - ratio)).epsilon(1e-12));
    CHECK(d1.mesh_to_surface_m == doctest::Approx(R * (1 - ratio)).epsilon(1e-12));
    CHECK(d1.surface_to_mesh_m == doctest::Approx(R * (1 - ratio)).epsilon(1e-12));
    for (double e : per1) CHECK(e == doctest::Approx(R * (1 - ratio)).epsilon(1e-12));
    // 20 faces, (3 + 1)(3 + 2) / 2 = 10 grid points each, less the 3 corners
    CHECK(d1.samples == 140);
    // the thread count changes nothing
    CHECK(same_bits(d1.max_m, d2.max_m));
    CHECK(same_bytes(per1, per2));
}
