// the terrain field (csrc/field.hpp) against the formulas of docs/terrain.md, evaluated by hand
// at chosen points, plus its analytic gradient against central finite differences and its
// footprint index against evaluating every feature.
#include <doctest/doctest.h>

#include <cmath>
#include <numeric>
#include <string>
#include <vector>

#include "field.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Blend;
using gm::Field;
using gm::Vec3;

namespace {

constexpr double R = 1000;

double height(const Field& f, Vec3 u) { return f.eval(u, nullptr); }

// the point at geodesic distance d east of (0, 0) (+Z, heading +X)
Vec3 east_of_origin(double d) { return along(Vec3{0, 0, 1}, Vec3{1, 0, 0}, R, d); }

}  // namespace

// docs/terrain.md, section "hill": p = A, m = G(d; sigma), G the truncated Gaussian
// (exp(-d^2 / 2 sigma^2) - e^-8) / (1 - e^-8). Expected values worked out by hand:
// G(sigma) = (e^-0.5 - e^-8) / (1 - e^-8) = 0.6063986211597..., G(2 sigma) = 0.1350451232...
TEST_CASE("hill height follows the truncated Gaussian of docs/terrain.md") {
    Field f;
    make_field(f, R, {hill(Vec3{0, 0, 1}, 50, 100)});
    CHECK(height(f, Vec3{0, 0, 1}) == doctest::Approx(50.0).epsilon(1e-12));
    CHECK(height(f, east_of_origin(100)) == doctest::Approx(30.31993105798708).epsilon(1e-10));
    CHECK(height(f, east_of_origin(200)) == doctest::Approx(6.752256160031224).epsilon(1e-10));
    // the footprint ends at d = 4 sigma, where G reaches 0
    CHECK(std::fabs(height(f, east_of_origin(399.999))) < 1e-6);
    CHECK(height(f, east_of_origin(400.001)) == 0.0);
    // a valley is the same with a negative amplitude
    Field v;
    make_field(v, R, {hill(Vec3{0, 0, 1}, -50, 100)});
    CHECK(height(v, east_of_origin(100)) == doctest::Approx(-30.31993105798708).epsilon(1e-10));
}

// docs/terrain.md, section "mesa": p = h, m = F((d - a) / w), F(t) = 1 - 3t^2 + 2t^3.
// F(0.5) = 0.5, F(0.75) = 1 - 1.6875 + 0.84375 = 0.15625.
TEST_CASE("mesa height follows the falloff wall of docs/terrain.md") {
    Field f;
    make_field(f, R, {mesa(Vec3{0, 0, 1}, 20, 100, 50)});
    CHECK(height(f, east_of_origin(50)) == doctest::Approx(20.0).epsilon(1e-12));
    CHECK(height(f, east_of_origin(125)) == doctest::Approx(10.0).epsilon(1e-9));
    CHECK(height(f, east_of_origin(137.5)) == doctest::Approx(3.125).epsilon(1e-9));
    CHECK(height(f, east_of_origin(150.001)) == 0.0);
    // wall of width 0: the step 1 if d <= a else 0
    Field s;
    make_field(s, R, {mesa(Vec3{0, 0, 1}, 20, 100, 0)});
    CHECK(height(s, east_of_origin(99.99)) == 20.0);
    CHECK(height(s, east_of_origin(100.01)) == 0.0);
    CHECK(s.has_steps());
    CHECK_FALSE(f.has_steps());
}

// docs/terrain.md, section "block": at centre +Z the frame is N = +Y, E = N x c = +X; heading 0
// gives X = E, Y = N. Local coordinates x = R atan2(u.X, u.c): the direction
// normalize(c + tan(x/R) X + tan(y/R) Y) has local coordinates exactly (x, y).
// hx = 200, hy = 100, r = 20, w = 40, h = 30; s = |max(q, 0)| + min(max(qx, qy), 0) - r with
// q = (|x| - 180, |y| - 80):
//   (0, 0):    q = (-180, -80), s = -100        -> m = 1, H = 30
//   (210, 0):  q = (30, -80),  s = 10, t = 0.25 -> F = 0.84375, H = 25.3125
//   corner at 30 m from (180, 80) on the diagonal: |q| = 30, s = 10 -> H = 25.3125
//   (0, 130):  q = (-180, 50), s = 30, t = 0.75 -> F = 0.15625, H = 4.6875
TEST_CASE("block height follows the rounded-rectangle distance of docs/terrain.md") {
    auto local = [](double x, double y, Vec3 X, Vec3 Y) {
        return gm::normalize(Vec3{0, 0, 1} + std::tan(x / R) * X + std::tan(y / R) * Y);
    };
    const Vec3 E{1, 0, 0}, N{0, 1, 0};
    Field f;
    make_field(f, R, {block(Vec3{0, 0, 1}, 30, 200, 100, 20, 40, 0)});
    CHECK(height(f, local(0, 0, E, N)) == doctest::Approx(30.0).epsilon(1e-12));
    CHECK(height(f, local(210, 0, E, N)) == doctest::Approx(25.3125).epsilon(1e-9));
    CHECK(height(f, local(-210, 0, E, N)) == doctest::Approx(25.3125).epsilon(1e-9));
    const double c45 = 30 / std::sqrt(2.0);
    CHECK(height(f, local(180 + c45, 80 + c45, E, N)) == doctest::Approx(25.3125).epsilon(1e-9));
    CHECK(height(f, local(0, -130, E, N)) == doctest::Approx(4.6875).epsilon(1e-9));
    CHECK(height(f, local(0, 140.001, E, N)) == 0.0);
    // heading 90 degrees: X = N, Y = -E, so the long side now runs north
    Field g;
    make_field(g, R, {block(Vec3{0, 0, 1}, 30, 200, 100, 20, 40, 90)});
    CHECK(height(g, local(0, 210, E, N)) == doctest::Approx(25.3125).epsilon(1e-9));
    CHECK(height(g, local(210, 0, E, N)) == 0.0);
    CHECK(height(g, local(130, 0, E, N)) == doctest::Approx(4.6875).epsilon(1e-9));
}

// docs/terrain.md, section "crater": inside p = -D + (D + hr)(d/a)^2, m = 1; outside p = hr,
// m = F((d - a)/wr). D = 30, a = 100, hr = 10, wr = 50:
//   d = 0: -30; d = 50: -30 + 40 * 0.25 = -20; d = 100: 10; d = 125: 10 * F(0.5) = 5.
TEST_CASE("crater height follows the bowl and rim of docs/terrain.md") {
    Field f;
    make_field(f, R, {crater(Vec3{0, 0, 1}, 30, 100, 10, 50)});
    CHECK(height(f, Vec3{0, 0, 1}) == doctest::Approx(-30.0).epsilon(1e-12));
    CHECK(height(f, east_of_origin(50)) == doctest::Approx(-20.0).epsilon(1e-9));
    CHECK(height(f, east_of_origin(100)) == doctest::Approx(10.0).epsilon(1e-9));
    CHECK(height(f, east_of_origin(125)) == doctest::Approx(5.0).epsilon(1e-9));
    CHECK(height(f, east_of_origin(150.001)) == 0.0);
}

// docs/terrain.md, section "ridge": ends (0, 0) and (0, 10 deg) on the equator, pole
// n = normalize(c0 x c1) = +Y. Beside the arc delta = R asin|u.n| = R * latitude; beyond an end
// delta = R theta(u, end). h = 15, b = 40:
//   20 m north of the arc: s = 0.5, round K = (1 - 0.25)^2 = 0.5625 -> 8.4375; sharp K = 0.5 -> 7.5
//   2 deg west of (0, 0): delta = 34.906585 m, s = 0.872665, round 15 (1 - s^2)^2 = 0.852922,
//   sharp 15 (1 - s) = 1.910031
TEST_CASE("ridge height follows the arc distance of docs/terrain.md") {
    const Vec3 c0 = dir_deg(0, 0), c1 = dir_deg(0, 10);
    Field round, sharp;
    make_field(round, R, {ridge(c0, c1, 15, 40, 0)});
    make_field(sharp, R, {ridge(c0, c1, 15, 40, 1)});
    const Vec3 beside = dir_deg(20.0 / R * 180 / kPi, 5);  // latitude of 20 m
    CHECK(height(round, beside) == doctest::Approx(8.4375).epsilon(1e-9));
    CHECK(height(sharp, beside) == doctest::Approx(7.5).epsilon(1e-9));
    CHECK(height(round, dir_deg(0, 5)) == doctest::Approx(15.0).epsilon(1e-12));
    const Vec3 beyond = dir_deg(0, -2);
    CHECK(height(round, beyond) == doctest::Approx(0.85292218201359).epsilon(1e-9));
    CHECK(height(sharp, beyond) == doctest::Approx(1.9100306100425268).epsilon(1e-9));
    CHECK(height(round, dir_deg(0, 12.5)) == 0.0);  // 43.6 m beyond the far end: outside
}

// docs/terrain.md, section "The surface" (the blend table and the polynomial smooth minimum).
// A mesa of height 20 (or 80) covers the point, then a hill p = 50 with weight m is blended:
// at the hill centre m = 1; at d = sigma m = G(sigma) = 0.6063986211597416.
//   smax_40(20, 50) = -smin_40(-20, -50): h = 0.125, -50 * 0.875 - 20 * 0.125 - 40 * 0.109375
//     = -50.625, so 50.625; smin_40(20, 50): h = 0.875, 6.25 + 17.5 - 4.375 = 19.375
TEST_CASE("blend modes follow the update table of docs/terrain.md") {
    const Vec3 c{0, 0, 1};
    const double m = 0.6063986211597416;
    auto two = [&](double base, Blend b, double k, Vec3 u) {
        Field f;
        make_field(f, R, {mesa(c, base, 300, 0), hill(c, 50, 100, b, k)});
        return height(f, u);
    };
    const Vec3 side = east_of_origin(100);
    CHECK(two(20, Blend::Add, 0, c) == doctest::Approx(70.0).epsilon(1e-12));
    CHECK(two(20, Blend::Max, 0, c) == doctest::Approx(50.0).epsilon(1e-12));
    CHECK(two(20, Blend::Min, 0, c) == doctest::Approx(20.0).epsilon(1e-12));
    CHECK(two(80, Blend::Max, 0, c) == doctest::Approx(80.0).epsilon(1e-12));
    CHECK(two(80, Blend::Min, 0, c) == doctest::Approx(50.0).epsilon(1e-12));
    CHECK(two(80, Blend::Set, 0, c) == doctest::Approx(50.0).epsilon(1e-12));
    CHECK(two(20, Blend::SmoothMax, 40, c) == doctest::Approx(50.625).epsilon(1e-12));
    CHECK(two(20, Blend::SmoothMin, 40, c) == doctest::Approx(19.375).epsilon(1e-12));
    // partial weight: H <- H + m (X - H)
    CHECK(two(20, Blend::Max, 0, side) == doctest::Approx(20 + m * 30).epsilon(1e-10));
    CHECK(two(80, Blend::Set, 0, side) == doctest::Approx(80 - m * 30).epsilon(1e-10));
    CHECK(two(80, Blend::Max, 0, side) == doctest::Approx(80.0).epsilon(1e-12));
    CHECK(two(20, Blend::SmoothMax, 40, side) ==
          doctest::Approx(20 + m * (50.625 - 20)).epsilon(1e-10));
}

namespace {

// Perlin's improved noise written from docs/terrain.md section "noise" and Perlin's reference
// implementation (Perlin 2002, "Improving Noise"): branches for the corner gradient, nested
// lerps, permutation shuffled by Fisher-Yates with SplitMix64 started at the seed
struct ReferenceNoise {
    int P[512];
    explicit ReferenceNoise(std::uint64_t seed) {
        int perm[256];
        std::iota(perm, perm + 256, 0);
        Rng next(seed);  // SplitMix64 with state = seed
        for (int i = 255; i >= 1; --i) {
            std::uint64_t j = next.next() % static_cast<std::uint64_t>(i + 1);
            std::swap(perm[i], perm[j]);
        }
        for (int i = 0; i < 512; ++i) P[i] = perm[i % 256];
    }
    static double fade(double t) { return t * t * t * (t * (t * 6 - 15) + 10); }
    static double lerp(double t, double a, double b) { return a + t * (b - a); }
    static double grad(int hash, double x, double y, double z) {
        int h = hash & 15;
        double a = h < 8 ? x : y;
        double b = h < 4 ? y : (h == 12 || h == 14 ? x : z);
        return ((h & 1) ? -a : a) + ((h & 2) ? -b : b);
    }
    double operator()(double x, double y, double z) const {
        int X = static_cast<int>(static_cast<long long>(std::floor(x)) & 255);
        int Y = static_cast<int>(static_cast<long long>(std::floor(y)) & 255);
        int Z = static_cast<int>(static_cast<long long>(std::floor(z)) & 255);
        x -= std::floor(x);
        y -= std::floor(y);
        z -= std::floor(z);
        double u = fade(x), v = fade(y), w = fade(z);
        int A = P[X] + Y, AA = P[A] + Z, AB = P[A + 1] + Z;
        int B = P[X + 1] + Y, BA = P[B] + Z, BB = P[B + 1] + Z;
        return lerp(w,
                    lerp(v, lerp(u, grad(P[AA], x, y, z), grad(P[BA], x - 1, y, z)),
                         lerp(u, grad(P[AB], x, y - 1, z), grad(P[BB], x - 1, y - 1, z))),
                    lerp(v, lerp(u, grad(P[AA + 1], x, y, z - 1), grad(P[BA + 1], x - 1, y, z - 1)),
                         lerp(u, grad(P[AB + 1], x, y - 1, z - 1),
                              grad(P[BB + 1], x - 1, y - 1, z - 1))));
    }
    // p = A sum_k g^k P(2^k f R u + k (19.19, 47.11, 73.37))
    double height(Vec3 u, double A, double f, int octaves, double g) const {
        double sum = 0, amp = 1, s = f * R;
        for (int k = 0; k < octaves; ++k, amp *= g, s *= 2)
            sum += amp * (*this)(s * u.x + 19.19 * k, s * u.y + 47.11 * k, s * u.z + 73.37 * k);
        return A * sum;
    }
};

}  // namespace

// SplitMix64 from state 0: first output 0xE220A8397B1DCDAF (the generator's widely quoted first
// value, here from memory; it checks the reference permutation's generator, not the core)
TEST_CASE("noise equals an independent implementation of Perlin's improved noise") {
    Rng sm(0);
    CHECK(sm.next() == 0xE220A8397B1DCDAFull);
    const double A = 6, freq = 0.013;
    const int octaves = 5;
    const double gain = 0.55;
    for (std::uint64_t seed : {0ull, 7ull, 4294967295ull}) {
        Field f;
        make_field(f, R, {noise(A, freq, octaves, gain, static_cast<double>(seed))});
        ReferenceNoise ref(seed);
        Rng rng(seed + 11);
        double largest = 0;
        for (int i = 0; i < 2000; ++i) {
            Vec3 u = rng.direction();
            double want = ref.height(u, A, freq, octaves, gain);
            largest = std::max(largest, std::fabs(want));
            CHECK(std::fabs(height(f, u) - want) <= 1e-9 * A);
        }
        CHECK(largest > 0.5 * A);  // the points see real relief, not the zero set
    }
    // Perlin gradient noise is zero at lattice points: one octave at f R = 4 puts +Z on (0, 0, 4)
    Field z;
    make_field(z, R, {noise(A, 4.0 / R, 1, 0.5, 3)});
    CHECK(std::fabs(height(z, Vec3{0, 0, 1})) < 1e-12);
    CHECK(std::fabs(height(z, Vec3{1, 0, 0})) < 1e-12);
}

namespace {

// central difference of H along the two tangent directions at u (common practice; the error is
// O(h^2), Nocedal & Wright, "Numerical Optimization" (2006) section 8.1)
Vec3 central_difference(const Field& f, Vec3 u, double h) {
    Vec3 e1 = some_tangent(u), e2 = gm::cross(u, e1), g{};
    for (Vec3 e : {e1, e2}) {
        double hp = f.eval(gm::normalize(u + h * e), nullptr);
        double hm = f.eval(gm::normalize(u - h * e), nullptr);
        g += ((hp - hm) / (2 * h)) * e;
    }
    return g;
}

// compares the analytic gradient with the central difference at `n` points at geodesic distance
// from c drawn from [d0, d1] (metres), skipping distances in `avoid` (+-0.5 m: creases)
void check_gradient(const Field& f, Vec3 c, double d0, double d1, int n, std::uint64_t seed,
                    std::vector<double> avoid = {}) {
    Rng rng(seed);
    const double h = 1e-6;  // radians: a millimetre at R = 1 km
    int compared = 0;
    double largest = 0;
    while (compared < n) {
        double d = rng.uniform(d0, d1);
        bool near = false;
        for (double a : avoid) near = near || std::fabs(d - a) < 0.5;
        Vec3 t = some_tangent(c), t2 = gm::cross(c, t);
        double az = rng.uniform(0, 2 * kPi);
        Vec3 u = along(c, std::cos(az) * t + std::sin(az) * t2, R, d);
        if (near) continue;
        Vec3 g;
        f.eval(u, &g);
        Vec3 fd = central_difference(f, u, h);
        INFO("d = " << d << " azimuth = " << az);
        // tangent: the gradient of H(x / |x|) has no radial part
        CHECK(std::fabs(gm::dot(g, u)) <= 1e-9 * (1 + gm::norm(g)));
        CHECK(gm::norm(g - fd) <= 1e-2 + 1e-5 * gm::norm(g));
        largest = std::max(largest, gm::norm(g));
        ++compared;
    }
    CHECK(largest > 1);  // the points saw real slopes (metres per radian)
}

}  // namespace

// the gradient of each kind against central differences, at points spread over its footprint
// and away from its creases (crater rim, hill footprint edge where G has a kink)
TEST_CASE("analytic gradient matches central finite differences") {
    const Vec3 c = gm::normalize(Vec3{0.3, 0.5, 0.8});
    Field f;
    SUBCASE("hill") {
        make_field(f, R, {hill(c, 50, 100)});
        check_gradient(f, c, 0, 395, 300, 1);
    }
    SUBCASE("mesa") {
        make_field(f, R, {mesa(c, 20, 100, 50)});
        check_gradient(f, c, 0, 170, 300, 2);
    }
    SUBCASE("block") {
        make_field(f, R, {block(c, 30, 200, 100, 20, 40, 30)});
        check_gradient(f, c, 0, 300, 300, 3);
    }
    SUBCASE("crater") {
        make_field(f, R, {crater(c, 30, 100, 10, 50)});
        check_gradient(f, c, 0, 170, 300, 4, {100});
    }
    SUBCASE("ridge, round profile") {
        // centre c of the arc between two ends 10 degrees apart
        Vec3 t = some_tangent(c);
        make_field(f, R, {ridge(along(c, t, R, -87), along(c, t, R, 87), 15, 40, 0)});
        check_gradient(f, c, 0, 150, 300, 5);
    }
    SUBCASE("noise") {
        make_field(f, R, {noise(5, 0.02, 4, 0.5, 9)});
        check_gradient(f, c, 0, 1500, 300, 6);
    }
    SUBCASE("smooth blends over a hill") {
        make_field(f, R, {hill(c, 50, 100), mesa(c, 30, 120, 60, Blend::Set),
                          hill(c, 25, 150, Blend::SmoothMax, 10), hill(c, 60, 80, Blend::SmoothMin, 15)});
        check_gradient(f, c, 0, 395, 300, 7, {});
    }
    SUBCASE("steps have zero gradient on either side") {
        make_field(f, R, {mesa(c, 20, 100, 0)});
        Vec3 g;
        for (double d : {10.0, 99.0, 101.0, 300.0}) {
            f.eval(along(c, some_tangent(c), R, d), &g);
            CHECK(gm::norm(g) == 0.0);
        }
    }
}

// a world of many small features: the footprint index must give, bit for bit, what evaluating
// every feature in order gives (features that do not reach a point change nothing), while
// visiting only a small share of them (common practice for spatial indexes)
TEST_CASE("spatial index returns the same heights as evaluating every feature") {
    std::vector<Row> rows;
    Rng rng(42);
    const double big = 5000;
    for (int i = 0; i < 400; ++i) {
        Vec3 c = rng.direction();
        switch (i % 5) {
            case 0: rows.push_back(hill(c, rng.uniform(-40, 40), rng.uniform(20, 150))); break;
            case 1: rows.push_back(mesa(c, rng.uniform(5, 30), rng.uniform(30, 200), rng.uniform(0, 50), Blend::Max)); break;
            case 2: rows.push_back(crater(c, rng.uniform(5, 20), rng.uniform(40, 150), 5, 30)); break;
            case 3: rows.push_back(block(c, 10, 80, 40, 10, 20, rng.uniform(0, 180))); break;
            default: {
                Vec3 t = some_tangent(c);
                rows.push_back(ridge(along(c, t, big, -200), along(c, t, big, 200), 12, 50, i % 2));
            }
        }
    }
    Field f;
    std::string err;
    REQUIRE(init_field(f, big, rows, err) == gm::Status::Ok);
    std::vector<std::uint32_t> all(rows.size());
    std::iota(all.begin(), all.end(), 0u);
    std::size_t candidates = 0, nonzero = 0;
    const int n = 20000;
    for (int i = 0; i < n; ++i) {
        // half the points near a feature centre, half anywhere
        Vec3 u = rng.direction();
        if (i % 2) {
            const Row& r = rows[rng.next() % rows.size()];
            u = along(gm::normalize(Vec3{r[3], r[4], r[5]}), some_tangent(u), big, rng.uniform(0, 300));
        }
        Vec3 g1, g2;
        double h1 = f.eval(u, &g1);
        double h2 = f.eval(u, all.data(), all.size(), &g2);
        REQUIRE(same_bits(h1, h2));
        REQUIRE(same_bits(g1.x, g2.x));
        REQUIRE(same_bits(g1.y, g2.y));
        REQUIRE(same_bits(g1.z, g2.z));
        const std::uint32_t* list;
        std::size_t count;
        f.candidates(u, list, count);
        candidates += count;
        nonzero += h1 != 0;
    }
    CHECK(nonzero > n / 4);  // most points near a centre do see relief
    // 400 features: a point is checked against far fewer
    CHECK(static_cast<double>(candidates) / n < 40.0);
}

// bad rows are refused with a status and a message naming the feature, field and range
TEST_CASE("bad feature rows are refused with a clear message") {
    struct Case {
        Row row;
        gm::Status status;
        const char* names;
    };
    const Vec3 c{0, 0, 1};
    Row kind = hill(c, 1, 10);
    kind[0] = 9;
    Row nan = hill(c, 1, 10);
    nan[10] = std::nan("");
    Row off_sphere = hill(c, 1, 10);
    off_sphere[5] = 0;  // the zero vector (the core normalises any other centre)
    const Case cases[] = {
        {kind, gm::Status::InvalidArgument, "kind: unknown kind code"},
        {nan, gm::Status::NonFinite, "non-finite value in column 10"},
        {off_sphere, gm::Status::InvalidArgument, "must be a unit vector"},
        {hill(c, 1, 0), gm::Status::InvalidArgument, "sigma_m: must be > 0"},
        {mesa(c, 1, 10, -1), gm::Status::InvalidArgument, "wall_width_m: must be >= 0"},
        {block(c, 1, 10, 5, 6, 1, 0), gm::Status::InvalidArgument, "corner_radius_m: must be <= 5 (allowed: 0 to min(half_x_m, half_y_m))"},
        {block(c, 1, 1100, 5, 0, 1, 0), gm::Status::InvalidArgument, "within 60 degrees"},
        {crater(c, 1, 10, 1, 0), gm::Status::InvalidArgument, "rim_width_m: must be > 0"},
        {ridge(c, gm::normalize(Vec3{0, 0, -1}), 1, 10, 0), gm::Status::InvalidArgument, "arc angle must be in (0, 179] degrees"},
        {noise(1, 0.1, 13, 0.5, 0), gm::Status::InvalidArgument, "octaves: must be <= 12 (allowed: integer 1 to 12)"},
        {noise(1, 0.1, 3, 1.5, 0), gm::Status::InvalidArgument, "gain: must be <= 1 (allowed: > 0 and <= 1)"},
        {noise(1, 0.1, 3, 0.5, -1), gm::Status::InvalidArgument, "seed: must be >= 0 (allowed: integer 0 to 4294967295)"},
        {hill(c, 1, 10, Blend::SmoothMax, 0), gm::Status::InvalidArgument, "blend_width_m: must be > 0"},
    };
    for (const Case& k : cases) {
        Field f;
        std::string err;
        // a good row first: the message must name the bad one, features[1]
        gm::Status s = init_field(f, R, {hill(c, 1, 10), k.row}, err);
        INFO("expected: " << std::string(k.names) << "; got: " << err);
        CHECK(s == k.status);
        CHECK(err.find("features[1]") != std::string::npos);
        CHECK(err.find(k.names) != std::string::npos);
    }
    Field f;
    std::string err;
    CHECK(init_field(f, 0, {}, err) == gm::Status::InvalidArgument);
    CHECK(err.find("radius_m must be a finite number > 0") != std::string::npos);
}

namespace {

// the features whose footprint cap holds u (every one that can change H there), by scanning all
const std::vector<std::uint32_t>& reaching(const Field& f, Vec3 u, std::vector<std::uint32_t>& out) {
    out.clear();
    for (std::size_t i = 0; i < f.size(); ++i) {
        const gm::Feature& ft = f.feature(i);
        if (ft.cap_angle >= kPi || gm::dot(u, ft.cap_c) >= ft.cap_cos) out.push_back(static_cast<std::uint32_t>(i));
    }
    return out;
}

// the index against scanning every feature at u: its list is strictly ascending and holds every
// feature whose cap holds u, and the height and gradient are, bit for bit, those of the scan's
// list and (when `all` is given) of evaluating every feature in order
void check_point(const Field& f, Vec3 u, std::vector<std::uint32_t>& scan, const std::vector<std::uint32_t>* all) {
    const std::uint32_t* list;
    std::size_t count;
    f.candidates(u, list, count);
    for (std::size_t k = 1; k < count; ++k) REQUIRE(list[k - 1] < list[k]);
    reaching(f, u, scan);
    std::size_t k = 0;
    for (std::uint32_t want : scan) {
        while (k < count && list[k] < want) ++k;
        INFO("feature " << want << " reaches the point but is not a candidate; angle "
             << gm::angle(u, f.feature(want).cap_c) << " cap " << f.feature(want).cap_angle
             << " rad");
        REQUIRE((k < count && list[k] == want));
    }
    Vec3 g1, g2;
    double h1 = f.eval(u, &g1);
    double h2 = f.eval(u, scan.data(), scan.size(), &g2);
    REQUIRE(same_bits(h1, h2));
    REQUIRE((same_bits(g1.x, g2.x) && same_bits(g1.y, g2.y) && same_bits(g1.z, g2.z)));
    if (all) {
        double h3 = f.eval(u, all->data(), all->size(), &g2);
        REQUIRE(same_bits(h1, h3));
        REQUIRE((same_bits(g1.x, g2.x) && same_bits(g1.y, g2.y) && same_bits(g1.z, g2.z)));
    }
}

// the point at geodesic distance d from unit c, in a random heading
Vec3 near(Vec3 c, Rng& rng, double radius, double d) {
    Vec3 v = rng.direction();
    return gm::normalize(along(c, gm::normalize(v - gm::dot(v, c) * c), radius, d));
}

// directions on the lines where the index's cells meet: cube edges and corners, the middle lines
// of the faces and dyadic fractions of them, where a query's descent compares equal values
std::vector<Vec3> cell_border_points(Rng& rng) {
    std::vector<Vec3> pts;
    const double fr[] = {-1, -0.5, -0.25, 0, 0.125, 0.25, 0.5, 0.75, 1, 0x1p-10, -0x1p-20};
    for (double a : fr)
        for (double b : fr) {
            double c = rng.uniform(-1, 1);
            for (Vec3 v : {Vec3{1, a, b}, Vec3{-1, a, c}, Vec3{a, 1, b}, Vec3{c, -1, a}, Vec3{a, b, 1}, Vec3{b, c, -1}})
                pts.push_back(gm::normalize(v));
        }
    return pts;
}

}  // namespace

// 100,000 features of every kind and of sizes from metres to a hemisphere, blends mixed, one noise
// layer over everything: the index must give what scanning all features gives, bit for bit, at
// random points, at points near feature centres, and on the borders of its cells, and stay
// within its stated memory bound
TEST_CASE("spatial index matches evaluating every feature in a world of 100,000 features") {
    const double big = 200000;
    std::vector<Row> rows;
    Rng rng(7);
    for (int i = 0; i < 100000; ++i) {
        Vec3 c = rng.direction();
        double size = std::exp(rng.uniform(std::log(20.0), std::log(5000.0)));  // metres
        if (i % 997 == 0) size = rng.uniform(30000, 150000);                       // a few wide ones
        const double amp = rng.uniform(-0.5, 0.5);
        const Blend blends[] = {Blend::Add, Blend::Max, Blend::Min, Blend::SmoothMax};
        const Blend b = blends[(i / 5) % 4];
        switch (i % 5) {
            case 0: rows.push_back(hill(c, amp, size, b, b == Blend::SmoothMax ? 0.1 : 0)); break;
            case 1: rows.push_back(mesa(c, amp, size, i % 2 ? 0 : 0.3 * size, b == Blend::SmoothMax ? Blend::Max : b)); break;
            case 2: rows.push_back(crater(c, std::fabs(amp), size, 0.2, 0.5 * size)); break;
            case 3: rows.push_back(block(c, amp, size, 0.6 * size, 0.1 * size, 0.2 * size, rng.uniform(0, 180))); break;
            default: {
                Vec3 t = some_tangent(c);
                rows.push_back(ridge(along(c, t, big, -2 * size), along(c, t, big, 2 * size), amp, 0.3 * size, i % 2));
            }
        }
        if (i == 50000) rows.push_back(noise(0.2, 1.0 / 3000, 2, 0.5, 9));
    }
    Field f;
    make_field(f, big, rows);
    const Field::IndexStats st = f.index_stats();
    CHECK(st.bytes <= Field::index_bound_bytes(f.size()));
    CHECK(st.depth <= Field::kIndexMaxDepth);
    std::vector<std::uint32_t> all(f.size()), scan;
    std::iota(all.begin(), all.end(), 0u);
    std::size_t candidates = 0, reached = 0;
    const int n = 4000;
    for (int i = 0; i < n; ++i) {
        Vec3 u = rng.direction();
        if (i % 2) {
            const Row& r = rows[rng.next() % rows.size()];
            u = near(gm::normalize(Vec3{r[3], r[4], r[5]}), rng, big, rng.uniform(0, 2000));
        }
        // every feature at every 50th point: 80 x 100,000 evaluations
        check_point(f, u, scan, i % 50 == 0 ? &all : nullptr);
        const std::uint32_t* list;
        std::size_t count;
        f.candidates(u, list, count);
        candidates += count;
        reached += scan.size();
    }
    std::size_t k = 0;
    for (Vec3 u : cell_border_points(rng)) check_point(f, u, scan, ++k % 8 == 0 ? &all : nullptr);
    // a point is checked against the features that reach it and a few more, not against the
    // world: at most three times as many candidates as reaching features, on average
    INFO("candidates " << candidates << ", reaching " << reached);
    CHECK(static_cast<double>(candidates) < 3.0 * static_cast<double>(reached));
}

// 10,000 hills on one spot, the middle of a cube face (the common corner of the four cells of
// the first split, the worst place): the index stays within its memory bound, queries away from
// the spot see none of them, and queries at the spot give what scanning every feature gives
TEST_CASE("spatial index of 10,000 features on one spot stays small and exact") {
    const double big = 200000;
    for (Vec3 spot : {Vec3{0, 0, 1}, gm::normalize(Vec3{0.3, 0.4, 0.866})}) {
        std::vector<Row> rows;
        Rng rng(11);
        for (int i = 0; i < 10000; ++i) {
            Vec3 c = gm::normalize(spot + 1e-4 * Vec3{rng.uniform(-1, 1), rng.uniform(-1, 1), rng.uniform(-1, 1)});
            rows.push_back(hill(c, rng.uniform(-1, 1), rng.uniform(100, 300), i % 3 ? Blend::Add : Blend::Max));
        }
        Field f;
        make_field(f, big, rows);
        const Field::IndexStats st = f.index_stats();
        CHECK(st.bytes <= Field::index_bound_bytes(f.size()));
        CHECK(st.longest == rows.size());  // the spot itself: every hill reaches it
        std::vector<std::uint32_t> all(f.size()), scan;
        std::iota(all.begin(), all.end(), 0u);
        for (int i = 0; i < 300; ++i) {
            Vec3 u = near(spot, rng, big, rng.uniform(0, 1500));
            check_point(f, u, scan, i % 3 == 0 ? &all : nullptr);
        }
        // footprints reach at most 4 x 300 m + 0.02 km from the spot; 2 degrees is 7 km
        for (int i = 0; i < 2000; ++i) {
            Vec3 u = rng.direction();
            if (gm::angle(u, spot) < rad(2)) continue;
            const std::uint32_t* list;
            std::size_t count;
            f.candidates(u, list, count);
            REQUIRE(count == 0);
        }
    }
}
