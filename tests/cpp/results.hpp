// shared helpers of the bake and session tests: small worlds, bakes, and an array-by-array
// comparison of two bake results that names every array that differs.
#pragma once

#include <doctest/doctest.h>

#include <string>
#include <utility>
#include <vector>

#include "bake.hpp"
#include "worlds.hpp"

namespace gmtest {

// settings of the small test worlds: 1 km radius, 80 chunks, three levels at 1.5, 3 and 6 m
inline gm::BakeSettings small_settings(int threads) {
    gm::BakeSettings s;
    s.radius_m = 1000;
    s.tolerance_m = 1.5;
    s.levels = 3;
    s.chunk_level = 1;
    s.threads = threads;
    gm::LayerRule steep;  // two layer rules, so layers and colors vary
    steep.slope_deg[0] = 20;
    steep.color[0] = 0.4, steep.color[1] = 0.35, steep.color[2] = 0.3;
    gm::LayerRule high;
    high.altitude_m[0] = 10;
    high.color[0] = 0.9, high.color[1] = 0.9, high.color[2] = 0.95;
    s.layers = {steep, high};
    return s;
}

// a small world: two hills, a mesa and a crater on a 1 km sphere
inline std::vector<Row> small_world_rows() {
    const double R = 1000;
    const Vec3 c = gm::normalize({0.3, 0.5, 0.8}), t = some_tangent(c), s = gm::cross(c, t);
    return {hill(along(c, t, R, 300), 40, 80), mesa(along(c, s, R, 300), 25, 120, 60),
            crater(along(c, -1 * t, R, 300), 20, 100, 8, 40), hill(dir_deg(-40, 100), 30, 120)};
}

inline void bake_ok(const std::vector<Row>& rows, const gm::BakeSettings& s, gm::BakeResult& out) {
    gm::Field f;
    make_field(f, s.radius_m, rows);
    std::string err;
    const gm::Status st = gm::bake(f, s, out, err);
    INFO(err);
    REQUIRE(st == gm::Status::Ok);
}

// the per-vertex arrays a vertex pool (BakeResult) and a chunk mesh both hold, by name, that differ
template <class T>
void vertex_differences(const T& a, const T& b, std::vector<std::string>& d) {
    const std::pair<const char*, bool> arrays[] = {
        {"positions", same_bytes(a.positions, b.positions)}, {"normals", same_bytes(a.normals, b.normals)},
        {"slope_deg", same_bytes(a.slope_deg, b.slope_deg)}, {"altitude_m", same_bytes(a.altitude_m, b.altitude_m)},
        {"layer", same_bytes(a.layer, b.layer)},             {"color", same_bytes(a.color, b.color)},
    };
    for (const auto& [name, same] : arrays)
        if (!same) d.emplace_back(name);
}

// the names of the arrays of one chunk mesh that differ (empty: every array the same, bit for bit)
inline std::vector<std::string> chunk_differences(const gm::ChunkMesh& a, const gm::ChunkMesh& b) {
    std::vector<std::string> d;
    auto cmp = [&](const char* name, bool same) {
        if (!same) d.emplace_back(name);
    };
    vertex_differences(a, b, d);
    cmp("surface_vertices", a.surface_vertices == b.surface_vertices);
    cmp("morph", same_bytes(a.morph, b.morph));
    cmp("triangles", same_bytes(a.triangles, b.triangles));
    cmp("interior", a.interior == b.interior);
    cmp("stitched", same_bytes(a.stitched, b.stitched));
    cmp("stitch_offsets", std::equal(a.stitch_offsets, a.stitch_offsets + 9, b.stitch_offsets));
    cmp("skirt", same_bytes(a.skirt, b.skirt));
    return d;
}

inline bool collider_same(const gm::Collider& a, const gm::Collider& b) {
    return same_bytes(a.positions, b.positions) && same_bytes(a.triangles, b.triangles);
}

// every array and measured number two bakes hold, by name, that differ. Left out: timings, the
// refinement statistics and Level::same (they tell how the result was made, not what it is).
inline std::vector<std::string> differences(const gm::BakeResult& a, const gm::BakeResult& b) {
    std::vector<std::string> d;
    auto cmp = [&](const std::string& name, bool same) {
        if (!same) d.push_back(name);
    };
    vertex_differences(a, b, d);
    cmp("directions", same_bytes(a.directions, b.directions));
    cmp("vertex_parents", same_bytes(a.vertex_parents, b.vertex_parents));
    cmp("chunks.corners", same_bytes(a.chunks.corners, b.chunks.corners));
    cmp("chunks.neighbors", same_bytes(a.chunks.neighbors, b.chunks.neighbors));
    cmp("chunks.edge_ids", same_bytes(a.chunks.edge_ids, b.chunks.edge_ids));
    cmp("chunk_count", a.chunk_count == b.chunk_count);
    cmp("level count", a.levels.size() == b.levels.size());
    for (std::size_t k = 0; k < std::min(a.levels.size(), b.levels.size()); ++k) {
        const gm::LevelResult &x = a.levels[k], &y = b.levels[k];
        const std::string L = "levels[" + std::to_string(k) + "].";
        cmp(L + "triangles", same_bytes(x.mesh.triangles, y.mesh.triangles));
        cmp(L + "chunk", same_bytes(x.mesh.chunk, y.mesh.chunk));
        cmp(L + "errors", same_bytes(x.mesh.errors, y.mesh.errors));
        cmp(L + "present", same_bytes(x.mesh.present, y.mesh.present));
        cmp(L + "morph", same_bytes(x.mesh.morph, y.mesh.morph));
        cmp(L + "interior", same_bytes(x.mesh.interior, y.mesh.interior));
        cmp(L + "stitch", same_bytes(x.mesh.stitch, y.mesh.stitch));
        cmp(L + "stitch_offsets", same_bytes(x.mesh.stitch_offsets, y.mesh.stitch_offsets));
        cmp(L + "failed", same_bytes(x.mesh.failed, y.mesh.failed));
        cmp(L + "stitch_failures", x.mesh.stitch_failures == y.mesh.stitch_failures);
        cmp(L + "max_error_m", same_bits(x.mesh.max_error_m, y.mesh.max_error_m));
        cmp(L + "mesh_to_surface_m", same_bits(x.mesh.mesh_to_surface_m, y.mesh.mesh_to_surface_m));
        cmp(L + "surface_to_mesh_m", same_bits(x.mesh.surface_to_mesh_m, y.mesh.surface_to_mesh_m));
        cmp(L + "vertex_count", x.vertex_count == y.vertex_count);
        cmp(L + "vertex_offsets", same_bytes(x.vertex_offsets, y.vertex_offsets));
        cmp(L + "vertex_ids", same_bytes(x.vertex_ids, y.vertex_ids));
        cmp(L + "chunks", x.chunks.size() == y.chunks.size());
        for (std::size_t c = 0; c < std::min(x.chunks.size(), y.chunks.size()); ++c)
            for (const std::string& n : chunk_differences(*x.chunks[c], *y.chunks[c]))
                d.push_back(L + "chunks[" + std::to_string(c) + "]." + n);
    }
    const gm::ColliderResult &p = a.colliders, &q = b.colliders;
    cmp("colliders.made", p.made == q.made);
    cmp("colliders.tolerance_m", same_bits(p.tolerance_m, q.tolerance_m));
    cmp("colliders.triangles", p.triangles == q.triangles);
    cmp("colliders.max_triangles_per_chunk", p.max_triangles_per_chunk == q.max_triangles_per_chunk);
    cmp("colliders.degenerate_triangles", p.degenerate_triangles == q.degenerate_triangles);
    cmp("colliders.tight_triangles", p.tight_triangles == q.tight_triangles);
    cmp("colliders.max_error_m", same_bits(p.max_error_m, q.max_error_m));
    cmp("colliders.min_angle_deg", same_bits(p.min_angle_deg, q.min_angle_deg));
    cmp("colliders.chunks", p.chunks.size() == q.chunks.size());
    for (std::size_t c = 0; c < std::min(p.chunks.size(), q.chunks.size()); ++c)
        cmp("colliders.chunks[" + std::to_string(c) + "]", collider_same(*p.chunks[c], *q.chunks[c]));
    return d;
}

inline std::string joined(const std::vector<std::string>& names) {
    std::string s;
    for (std::size_t i = 0; i < names.size() && i < 20; ++i) s += (i ? ", " : "") + names[i];
    if (names.size() > 20) s += ", ... (" + std::to_string(names.size()) + " in all)";
    return s;
}

// (level, chunk) pairs whose chunk meshes differ between two bakes of one world's settings
inline std::vector<std::pair<std::uint32_t, std::uint32_t>> differing_chunks(const gm::BakeResult& a,
                                                                              const gm::BakeResult& b) {
    std::vector<std::pair<std::uint32_t, std::uint32_t>> out;
    for (std::size_t k = 0; k < b.levels.size(); ++k)
        for (std::size_t c = 0; c < b.chunk_count; ++c)
            if (!chunk_differences(*a.levels[k].chunks[c], *b.levels[k].chunks[c]).empty())
                out.emplace_back(static_cast<std::uint32_t>(k), static_cast<std::uint32_t>(c));
    return out;
}

}  // namespace gmtest
