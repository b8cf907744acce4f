// shared helpers of the C++ tests: directions and feature rows as docs/terrain.md defines them,
// and mesh checks (closed 2-manifold, Euler characteristic) used by the refinement and level tests.
#pragma once

#include <doctest/doctest.h>

#include <array>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <map>
#include <string>
#include <utility>
#include <vector>

#include "field.hpp"

namespace gmtest {

using gm::Vec3;
using Row = std::array<double, gm::kFeatureColumns>;

constexpr double kPi = 3.14159265358979323846;
inline double rad(double deg) { return deg * kPi / 180.0; }

// docs/terrain.md "Frame and directions": u(lat, lon) = (cos lat sin lon, sin lat, cos lat cos lon)
inline Vec3 dir_deg(double lat_deg, double lon_deg) {
    double p = rad(lat_deg), l = rad(lon_deg);
    return {std::cos(p) * std::sin(l), std::sin(p), std::cos(p) * std::cos(l)};
}

// the point at geodesic distance d (metres, radius R) from c towards the unit tangent t
inline Vec3 along(Vec3 c, Vec3 t, double R, double d) {
    return std::cos(d / R) * c + std::sin(d / R) * t;
}

// blend codes of src/globemill/spec.py (BLEND_CODES), kind codes as gm::Kind
inline Row base_row(gm::Kind kind, Vec3 c, gm::Blend blend, double blend_width) {
    Row r{};
    r[0] = static_cast<double>(static_cast<int>(kind));
    r[1] = static_cast<double>(static_cast<int>(blend));
    r[2] = blend_width;
    r[3] = c.x;
    r[4] = c.y;
    r[5] = c.z;
    return r;
}

// feature rows: column layout of docs/terrain.md as src/globemill/spec.py writes it
inline Row hill(Vec3 c, double amplitude, double sigma, gm::Blend b = gm::Blend::Add, double k = 0) {
    Row r = base_row(gm::Kind::Hill, c, b, k);
    r[9] = amplitude;
    r[10] = sigma;
    return r;
}
inline Row mesa(Vec3 c, double height, double radius, double wall, gm::Blend b = gm::Blend::Add) {
    Row r = base_row(gm::Kind::Mesa, c, b, 0);
    r[9] = height;
    r[10] = radius;
    r[11] = wall;
    return r;
}
inline Row block(Vec3 c, double height, double half_x, double half_y, double corner, double wall,
                 double heading_deg) {
    Row r = base_row(gm::Kind::Block, c, gm::Blend::Add, 0);
    r[9] = height;
    r[10] = half_x;
    r[11] = half_y;
    r[12] = corner;
    r[13] = wall;
    r[14] = rad(heading_deg);
    return r;
}
inline Row crater(Vec3 c, double depth, double radius, double rim_height, double rim_width) {
    Row r = base_row(gm::Kind::Crater, c, gm::Blend::Add, 0);
    r[9] = depth;
    r[10] = radius;
    r[11] = rim_height;
    r[12] = rim_width;
    return r;
}
// profile: 0 round, 1 sharp (PROFILE_CODES)
inline Row ridge(Vec3 c0, Vec3 c1, double height, double half_width, int profile) {
    Row r = base_row(gm::Kind::Ridge, c0, gm::Blend::Add, 0);
    r[6] = c1.x;
    r[7] = c1.y;
    r[8] = c1.z;
    r[9] = height;
    r[10] = half_width;
    r[11] = profile;
    return r;
}
inline Row noise(double amplitude, double frequency, int octaves, double gain, double seed) {
    Row r = base_row(gm::Kind::Noise, Vec3{0, 0, 1}, gm::Blend::Add, 0);
    r[9] = amplitude;
    r[10] = frequency;
    r[11] = octaves;
    r[12] = gain;
    r[13] = seed;
    return r;
}

inline gm::Status init_field(gm::Field& f, double R, const std::vector<Row>& rows, std::string& err) {
    return f.init(R, rows.empty() ? nullptr : rows[0].data(), rows.size(), err);
}

inline void make_field(gm::Field& f, double R, const std::vector<Row>& rows) {
    std::string err;
    gm::Status s = init_field(f, R, rows, err);
    INFO(err);
    REQUIRE(s == gm::Status::Ok);
}

// a small deterministic generator (SplitMix64, Steele, Lea & Flood 2014) so test points do not
// depend on the standard library's distributions, which differ between implementations
struct Rng {
    std::uint64_t state;
    explicit Rng(std::uint64_t seed) : state(seed) {}
    std::uint64_t next() {
        std::uint64_t z = (state += 0x9E3779B97F4A7C15ull);
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
        return z ^ (z >> 31);
    }
    double uniform() { return static_cast<double>(next() >> 11) * 0x1.0p-53; }  // [0, 1)
    double uniform(double lo, double hi) { return lo + (hi - lo) * uniform(); }
    // a direction uniform on the sphere (Archimedes: z uniform in [-1, 1])
    Vec3 direction() {
        double z = uniform(-1, 1), a = uniform(0, 2 * kPi), s = std::sqrt(1 - z * z);
        return {s * std::cos(a), s * std::sin(a), z};
    }
};

// a unit tangent at u (any; for finite differences and offsets)
inline Vec3 some_tangent(Vec3 u) {
    Vec3 a = std::fabs(u.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
    return gm::normalize(a - gm::dot(a, u) * u);
}

inline bool same_bits(double a, double b) { return std::memcmp(&a, &b, sizeof a) == 0; }

template <class T>
bool same_bytes(const std::vector<T>& a, const std::vector<T>& b) {
    return a.size() == b.size() && (a.empty() || std::memcmp(a.data(), b.data(), a.size() * sizeof(T)) == 0);
}

// topology of a triangle list (3 vertex ids each): directed edges, once each
struct Topology {
    std::size_t vertices = 0;            // distinct vertex ids used
    std::size_t edges = 0;               // distinct undirected edges
    std::size_t faces = 0;
    std::size_t repeated_directed = 0;   // directed edges used twice or more (orientation flips)
    std::size_t unmatched = 0;           // directed edges whose reverse is absent (boundary)
    std::size_t overused = 0;            // undirected edges in more than two triangles
    std::size_t degenerate = 0;          // triangles repeating a vertex id
    long euler() const {
        return static_cast<long>(vertices) - static_cast<long>(edges) + static_cast<long>(faces);
    }
    // every edge shared by exactly two triangles with opposite orientation
    bool closed_manifold() const {
        return repeated_directed == 0 && unmatched == 0 && overused == 0 && degenerate == 0;
    }
};

inline Topology topology(const std::uint32_t* tris, std::size_t ntris) {
    Topology t;
    t.faces = ntris;
    std::map<std::pair<std::uint32_t, std::uint32_t>, int> directed;
    std::map<std::pair<std::uint32_t, std::uint32_t>, int> undirected;
    std::map<std::uint32_t, int> used;
    for (std::size_t i = 0; i < ntris; ++i) {
        const std::uint32_t* v = tris + 3 * i;
        if (v[0] == v[1] || v[1] == v[2] || v[2] == v[0]) ++t.degenerate;
        for (int k = 0; k < 3; ++k) {
            std::uint32_t a = v[k], b = v[(k + 1) % 3];
            used[a] = 1;
            ++directed[{a, b}];
            ++undirected[{std::min(a, b), std::max(a, b)}];
        }
    }
    for (const auto& [e, n] : directed) {
        if (n > 1) ++t.repeated_directed;
        if (!directed.count({e.second, e.first})) ++t.unmatched;
    }
    for (const auto& [e, n] : undirected)
        if (n > 2) ++t.overused;
    t.vertices = used.size();
    t.edges = undirected.size();
    return t;
}

inline Topology topology(const std::vector<std::uint32_t>& tris) {
    return topology(tris.data(), tris.size() / 3);
}

}  // namespace gmtest
