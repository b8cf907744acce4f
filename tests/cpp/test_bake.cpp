// the whole bake (csrc/bake.hpp): settings, determinism, chunk buffers, skirts and colliders
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <functional>
#include <iterator>
#include <map>
#include <set>
#include <string>
#include <vector>

#include "bake.hpp"
#include "results.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Vec3;

namespace {

Vec3 at(const std::vector<double>& p, std::size_t i) { return {p[3 * i], p[3 * i + 1], p[3 * i + 2]}; }

const gm::BakeResult& stitched_world() {
    static gm::BakeResult r;
    static bool done = false;
    if (!done) {
        bake_ok(small_world_rows(), small_settings(2), r);
        done = true;
    }
    return r;
}

const gm::BakeResult& skirted_world() {
    static gm::BakeResult r;
    static bool done = false;
    if (!done) {
        gm::BakeSettings s = small_settings(2);
        s.stitch = false;
        s.collision = false;
        bake_ok(small_world_rows(), s, r);
        done = true;
    }
    return r;
}

}  // namespace

// the design: "same spec -> byte-identical output, whatever the thread count or run"
TEST_CASE("a bake gives the same bytes on one thread and on two") {
    gm::BakeResult one;
    bake_ok(small_world_rows(), small_settings(1), one);
    const gm::BakeResult& two = stitched_world();
    const std::vector<std::string> d = differences(one, two);
    INFO("arrays that differ: " << joined(d));
    CHECK(d.empty());
    CHECK(two.levels.size() == 3);
    CHECK(two.colliders.made);
}

// RULES: bad input gets a clear error that names the field and the allowed range
TEST_CASE("check_settings refuses each out-of-range setting with a message naming it") {
    struct Case {
        std::string name;   // what the message must start with
        std::string range;  // and the allowed range it must state
        std::function<void(gm::BakeSettings&)> set;
    };
    const double nan = std::nan("");
    const double inf = HUGE_VAL;
    const std::vector<Case> cases = {
        {"radius_m", "> 0", [](gm::BakeSettings& s) { s.radius_m = 0; }},
        {"radius_m", "> 0", [&](gm::BakeSettings& s) { s.radius_m = nan; }},
        {"radius_m", "> 0", [&](gm::BakeSettings& s) { s.radius_m = inf; }},
        {"tolerance_m", "<= radius_m/10", [](gm::BakeSettings& s) { s.tolerance_m = 0; }},
        {"tolerance_m", "<= radius_m/10", [](gm::BakeSettings& s) { s.tolerance_m = -1; }},
        {"tolerance_m", "<= radius_m/10 = 100", [](gm::BakeSettings& s) { s.tolerance_m = 100.001; }},
        {"tolerance_m", "> 0", [&](gm::BakeSettings& s) { s.tolerance_m = nan; }},
        {"offset", "0 (radial), 1 (normal) or 2 (exact)", [](gm::BakeSettings& s) { s.offset = -1; }},
        {"offset", "0 (radial), 1 (normal) or 2 (exact)", [](gm::BakeSettings& s) { s.offset = 3; }},
        {"threads", "0..1024", [](gm::BakeSettings& s) { s.threads = -1; }},
        {"threads", "0..1024", [](gm::BakeSettings& s) { s.threads = 1025; }},
        {"levels", "1..12", [](gm::BakeSettings& s) { s.levels = 0; }},
        {"levels", "1..12", [](gm::BakeSettings& s) { s.levels = 13; }},
        {"ratio", "> 1 and <= 16", [](gm::BakeSettings& s) { s.ratio = 1; }},
        {"ratio", "> 1 and <= 16", [](gm::BakeSettings& s) { s.ratio = 16.5; }},
        {"ratio", "> 1 and <= 16", [&](gm::BakeSettings& s) { s.ratio = nan; }},
        {"chunk_level", "0..5", [](gm::BakeSettings& s) { s.chunk_level = -1; }},
        {"chunk_level", "0..5", [](gm::BakeSettings& s) { s.chunk_level = 6; }},
        {"max_triangles", ">= 1", [](gm::BakeSettings& s) { s.max_triangles = 0; }},
        // 20 * 4^2 = 320 chunks cannot fit 100 triangles
        {"chunk_level", "320 chunks, more than max_triangles=100",
         [](gm::BakeSettings& s) { s.chunk_level = 2, s.max_triangles = 100; }},
        {"lod.skirt_depth_m", ">= 0", [](gm::BakeSettings& s) { s.skirt_depth_m = -1; }},
        {"lod.skirt_depth_m", ">= 0", [&](gm::BakeSettings& s) { s.skirt_depth_m = nan; }},
        {"collision.tolerance_m", ">= 0", [](gm::BakeSettings& s) { s.collision_tolerance_m = -0.5; }},
        {"collision.tolerance_m", ">= 0", [&](gm::BakeSettings& s) { s.collision_tolerance_m = inf; }},
        {"collision.max_triangles_per_chunk", ">= 1", [](gm::BakeSettings& s) { s.collider_cap = 0; }},
        {"layers", "at most 255", [](gm::BakeSettings& s) { s.layers.resize(gm::kMaxLayers + 1); }},
    };
    std::string err;
    REQUIRE(gm::check_settings(small_settings(2), err) == gm::Status::Ok);
    gm::Field f;
    make_field(f, 1000, small_world_rows());
    for (const Case& c : cases) {
        gm::BakeSettings s = small_settings(2);
        c.set(s);
        err.clear();
        CHECK(gm::check_settings(s, err) == gm::Status::InvalidArgument);
        INFO("expected a message naming " << c.name << " and stating " << c.range << ", got: " << err);
        CHECK(err.rfind(c.name + ":", 0) == 0);
        CHECK(err.find(c.range) != std::string::npos);
        // the bake refuses it the same way, and leaves the result alone
        gm::BakeResult r;
        r.chunk_count = 7;
        std::string berr;
        if (s.radius_m == 1000) {
            CHECK(gm::bake(f, s, r, berr) == gm::Status::InvalidArgument);
            CHECK(berr == err);
            CHECK(r.chunk_count == 7);
        }
    }
    // the ends of the ranges are allowed
    const std::vector<std::function<void(gm::BakeSettings&)>> edges = {
        [](gm::BakeSettings& s) { s.tolerance_m = 100; },
        [](gm::BakeSettings& s) { s.levels = 12; },
        [](gm::BakeSettings& s) { s.ratio = 16; },
        [](gm::BakeSettings& s) { s.threads = 1024; },
        [](gm::BakeSettings& s) { s.chunk_level = 5; },
        [](gm::BakeSettings& s) { s.offset = 2; },
        [](gm::BakeSettings& s) { s.layers.resize(gm::kMaxLayers); },
    };
    for (const auto& set : edges) {
        gm::BakeSettings s = small_settings(2);
        set(s);
        INFO(err);
        CHECK(gm::check_settings(s, err) == gm::Status::Ok);
    }
    // a field of another radius than the settings'
    gm::BakeSettings s = small_settings(2);
    s.radius_m = 2000;
    gm::BakeResult r;
    CHECK(gm::bake(f, s, r, err) == gm::Status::InvalidArgument);
    CHECK(err.rfind("radius_m:", 0) == 0);
}

// the buffer contract of csrc/bake.hpp (ChunkMesh): surface vertices are the chunk's own
// vertices in ascending pool order with the pool's attributes, skirt vertices follow, and every
// index buffer indexes only the chunk's own vertices
TEST_CASE("each chunk mesh indexes only its own vertices and carries the pool's attributes") {
    for (const gm::BakeResult* r : {&stitched_world(), &skirted_world()}) {
        for (std::size_t k = 0; k < r->levels.size(); ++k) {
            const gm::LevelResult& L = r->levels[k];
            REQUIRE(L.chunks.size() == r->chunk_count);
            for (std::uint32_t c = 0; c < r->chunk_count; ++c) {
                const gm::ChunkMesh& m = *L.chunks[c];
                INFO("level " << k << " chunk " << c << (r->settings.stitch ? " stitched" : " skirted"));
                const std::size_t n = m.vertex_count(), ns = m.surface_vertices;
                REQUIRE(m.positions.size() == 3 * n);
                REQUIRE(m.normals.size() == 3 * n);
                REQUIRE(m.morph.size() == 3 * n);
                REQUIRE(m.color.size() == 3 * n);
                REQUIRE(m.altitude_m.size() == n);
                REQUIRE(m.layer.size() == n);
                REQUIRE(ns == L.vertex_offsets[c + 1] - L.vertex_offsets[c]);
                CHECK(std::all_of(m.triangles.begin(), m.triangles.end(), [&](std::uint32_t i) { return i < ns; }));
                CHECK(std::all_of(m.stitched.begin(), m.stitched.end(), [&](std::uint32_t i) { return i < ns; }));
                CHECK(std::all_of(m.skirt.begin(), m.skirt.end(), [&](std::uint32_t i) { return i < n; }));
                CHECK((m.skirt.empty() == r->settings.stitch));
                CHECK((n == ns) == m.skirt.empty());
                // the surface vertices are exactly those the chunk's triangles use, ascending
                const std::uint32_t* ids = L.vertex_ids.data() + L.vertex_offsets[c];
                CHECK(std::is_sorted(ids, ids + ns));
                std::set<std::uint32_t> used(m.triangles.begin(), m.triangles.end());
                CHECK(used.size() == ns);
                // the level's triangles of this chunk, in local indices
                auto first = std::lower_bound(L.mesh.chunk.begin(), L.mesh.chunk.end(), c) - L.mesh.chunk.begin();
                std::size_t mismatched = 0;
                for (std::size_t i = 0; i < m.triangles.size(); ++i)
                    mismatched += ids[m.triangles[i]] != L.mesh.triangles[3 * static_cast<std::size_t>(first) + i];
                CHECK(mismatched == 0);
                // attributes from the pool, morph targets from the level, bit for bit
                std::size_t wrong = 0;
                for (std::size_t i = 0; i < ns; ++i) {
                    const std::size_t v = ids[i];
                    for (std::size_t q = 0; q < 3; ++q) {
                        wrong += !same_bits(m.positions[3 * i + q], r->positions[3 * v + q]);
                        wrong += !same_bits(m.normals[3 * i + q], r->normals[3 * v + q]);
                        wrong += !same_bits(m.color[3 * i + q], r->color[3 * v + q]);
                        wrong += !same_bits(m.morph[3 * i + q], L.mesh.morph[3 * v + q]);
                    }
                    wrong += !same_bits(m.slope_deg[i], r->slope_deg[v]);
                    wrong += !same_bits(m.altitude_m[i], r->altitude_m[v]);
                    wrong += m.layer[i] != r->layer[v];
                }
                CHECK(wrong == 0);
                // stitched variants: mask 0 empty, offsets ascending up to the buffer's end
                CHECK(m.stitch_offsets[0] == 0);
                CHECK(m.stitch_offsets[1] == 0);
                CHECK(std::is_sorted(m.stitch_offsets, m.stitch_offsets + 9));
                CHECK(m.stitch_offsets[8] == m.stitched.size() / 3);
                CHECK(m.interior <= m.triangles.size() / 3);
            }
        }
    }
}

// skirts (Ulrich 2002, "Rendering massive terrains using chunked level of detail control",
// from memory: a strip hung down from a chunk's boundary hides the crack to a neighbour of
// another level). Each chunk with its skirt is closed but for the skirt bottoms: every edge of
// it but those is met once by its reverse, so the level's chunks together have no boundary edge
// but the skirt bottoms; the skirt hangs plan.skirt_depth_m straight down (radially).
TEST_CASE("skirted chunks form a mesh with no boundary edges but the skirt bottoms") {
    const gm::BakeResult& r = skirted_world();
    const double depth = r.plan.skirt_depth_m;
    CHECK(depth == gm::kSkirtDepthFactor * r.plan.tolerances.back());  // 2 x the coarsest (bake.hpp)
    for (std::size_t k = 0; k < r.levels.size(); ++k) {
        const gm::LevelResult& L = r.levels[k];
        std::vector<std::uint32_t> surface;
        std::size_t open = 0, repeated = 0, bottoms = 0, skirt_vertices = 0, off_depth = 0;
        for (std::uint32_t c = 0; c < r.chunk_count; ++c) {
            const gm::ChunkMesh& m = *L.chunks[c];
            const std::uint32_t ns = m.surface_vertices;
            std::map<std::pair<std::uint32_t, std::uint32_t>, int> directed;
            for (const auto* buf : {&m.triangles, &m.skirt})
                for (std::size_t t = 0; t < buf->size(); t += 3)
                    for (std::size_t e = 0; e < 3; ++e) ++directed[{(*buf)[t + e], (*buf)[t + (e + 1) % 3]}];
            for (const auto& [edge, count] : directed) {
                repeated += count > 1;
                if (directed.count({edge.second, edge.first})) continue;
                if (edge.first >= ns && edge.second >= ns)
                    ++bottoms;
                else
                    ++open;
            }
            // the first half of the skirt triangles is (b, a, a's bottom) per boundary edge a -> b
            skirt_vertices += m.vertex_count() - ns;
            for (std::size_t t = 0; t < m.skirt.size() / 2; t += 3) {
                const Vec3 top = at(m.positions, m.skirt[t + 1]), low = at(m.positions, m.skirt[t + 2]);
                const double drop = gm::norm(top) - gm::norm(low);
                const double off_line = gm::norm(gm::cross(gm::normalize(top), gm::normalize(low)));
                off_depth += std::fabs(drop - depth) > 1e-9 * r.settings.radius_m || off_line > 1e-12;
            }
            const std::uint32_t* ids = L.vertex_ids.data() + L.vertex_offsets[c];
            for (std::uint32_t i : m.triangles) surface.push_back(ids[i]);
        }
        INFO("level " << k);
        CHECK(open == 0);
        CHECK(repeated == 0);
        CHECK(bottoms == skirt_vertices);  // the bottom of a closed loop: one edge per vertex
        CHECK(skirt_vertices > 0);
        CHECK(off_depth == 0);
        // the surfaces alone: one closed sphere, chunk edges shared vertex for vertex
        const Topology t = topology(surface);
        CHECK(t.closed_manifold());
        CHECK(t.euler() == 2);
    }
}

// the crack a skirt must hide: where a chunk at level k meets a neighbour at level k + 1, each
// vertex of the finer edge that the coarser one lacks lies above or below the coarser edge's
// segment along its own direction; both chunks' skirts hang plan.skirt_depth_m, so the gap is
// hidden when no such radial gap exceeds the depth (Ulrich 2002, from memory)
TEST_CASE("skirts hang deeper than any crack to a one-level coarser neighbour") {
    const gm::BakeResult& r = skirted_world();
    const double depth = r.plan.skirt_depth_m;
    auto pool = [&](std::uint32_t v) { return at(r.positions, v); };
    // the vertices of chunk c at level k that chunk d has too (their shared chunk edge)
    auto shared = [&](std::size_t k, std::uint32_t c, std::uint32_t d) {
        const gm::LevelResult& L = r.levels[k];
        const std::uint32_t* ids = L.vertex_ids.data();
        std::vector<std::uint32_t> out;
        std::set_intersection(ids + L.vertex_offsets[c], ids + L.vertex_offsets[c + 1], ids + L.vertex_offsets[d],
                              ids + L.vertex_offsets[d + 1], std::back_inserter(out));
        return out;
    };
    double worst = 0;
    std::size_t checked = 0;
    for (std::size_t k = 0; k + 1 < r.levels.size(); ++k)
        for (std::uint32_t c = 0; c < r.chunk_count; ++c)
            for (std::uint32_t i = 0; i < 3; ++i) {
                const std::uint32_t d = r.chunks.neighbors[3 * c + i];
                const Vec3 corner = at(r.directions, r.chunks.corners[3 * c + (i + 1) % 3]);
                auto by_angle = [&](std::vector<std::uint32_t> vs) {
                    std::sort(vs.begin(), vs.end(), [&](std::uint32_t x, std::uint32_t y) {
                        return gm::angle(corner, at(r.directions, x)) < gm::angle(corner, at(r.directions, y));
                    });
                    return vs;
                };
                const std::vector<std::uint32_t> fine = by_angle(shared(k, c, d));
                const std::vector<std::uint32_t> coarse = by_angle(shared(k + 1, d, c));
                REQUIRE(coarse.size() >= 2);
                for (std::uint32_t v : fine) {
                    const Vec3 u = at(r.directions, v);
                    const double t = gm::angle(corner, u);
                    std::size_t j = 1;
                    while (j + 1 < coarse.size() && gm::angle(corner, at(r.directions, coarse[j])) < t) ++j;
                    const Vec3 p0 = pool(coarse[j - 1]), p1 = pool(coarse[j]), n = gm::normalize(gm::cross(p0, p1));
                    // the coarser segment p0 + s (p1 - p0) where the ray along u meets it
                    const double s = -gm::dot(gm::cross(p0, u), n) / gm::dot(gm::cross(p1 - p0, u), n);
                    const double gap = gm::norm(pool(v)) - gm::norm(p0 + s * (p1 - p0));
                    worst = std::max(worst, std::fabs(gap));
                    ++checked;
                }
            }
    INFO("largest radial gap " << worst << " m, skirt depth " << depth << " m, " << checked << " vertices");
    CHECK(checked > 1000);
    CHECK(worst > 0);
    CHECK(worst <= depth);
}

// the design: colliders have "a triangle cap per chunk"; the tolerance is raised until every
// chunk fits (bake.hpp), and the reported smallest angle and degenerate count are those of the
// triangles handed out (recomputed here by the law of cosines, not the core's atan2)
TEST_CASE("colliders respect the per-chunk cap and report their smallest angle truly") {
    const gm::ColliderResult& free = stitched_world().colliders;
    REQUIRE(free.made);
    CHECK(free.tolerance_m == free.requested_tolerance_m);
    gm::BakeSettings s = small_settings(2);
    s.collider_cap = free.max_triangles_per_chunk / 2;
    REQUIRE(s.collider_cap > 4);
    gm::BakeResult r;
    bake_ok(small_world_rows(), s, r);
    const gm::ColliderResult& col = r.colliders;
    CHECK(col.tolerance_m > col.requested_tolerance_m);
    CHECK(col.requested_tolerance_m == free.requested_tolerance_m);
    REQUIRE(col.chunks.size() == r.chunk_count);
    std::uint64_t most = 0, total = 0, degenerate = 0;
    double smallest = 180;
    const double R = r.settings.radius_m;
    for (const auto& chunk : col.chunks) {
        const std::size_t T = chunk->triangles.size() / 3;
        most = std::max<std::uint64_t>(most, T);
        total += T;
        for (std::size_t t = 0; t < T; ++t) {
            Vec3 p[3];
            for (std::size_t q = 0; q < 3; ++q) {
                REQUIRE(chunk->triangles[3 * t + q] < chunk->positions.size() / 3);
                p[q] = at(chunk->positions, chunk->triangles[3 * t + q]);
            }
            const double a = gm::norm(p[1] - p[2]), b = gm::norm(p[2] - p[0]), c = gm::norm(p[0] - p[1]);
            for (const auto& [x, y, z] : {std::array<double, 3>{a, b, c}, {b, c, a}, {c, a, b}})
                smallest = std::min(smallest, std::acos((y * y + z * z - x * x) / (2 * y * z)) * 180 / kPi);
            degenerate += gm::norm(gm::cross(p[1] - p[0], p[2] - p[0])) <= 1e-12 * R * R;
        }
    }
    CHECK(most <= s.collider_cap);
    CHECK(most == col.max_triangles_per_chunk);
    CHECK(total == col.triangles);
    CHECK(degenerate == col.degenerate_triangles);
    CHECK(degenerate == 0);
    CHECK(col.min_angle_deg == doctest::Approx(smallest).epsilon(1e-9));
    CHECK(col.max_error_m <= col.tolerance_m);
}
