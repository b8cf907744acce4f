// adaptive refinement of the icosahedron down to a tolerance.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "distance.hpp"
#include "field.hpp"

namespace gm {

struct RefineOptions {
    double tolerance_m = 1;
    OffsetMode mode = OffsetMode::Normal;
    std::uint64_t max_triangles = 8000000;
    int threads = 0;  // 0: all hardware threads
    // verify every triangle a posteriori on a barycentric grid of this order and split those
    // found beyond the tolerance (0: no verification)
    int verify_order = 3;
    // called between rounds on the calling thread: (round, leaf triangles so far)
    std::function<void(int, std::uint64_t)> progress;
};

struct RefineStats {
    std::uint64_t estimate = 0;        // triangles predicted before refining
    std::uint64_t tested = 0;          // triangle tests run (each triangle at most once)
    std::uint64_t floor_accepted = 0;  // triangles accepted only because they reached the size floor
    std::uint64_t repaired = 0;        // triangles split because verification found them too far
    int rounds = 0;
    int max_level = 0;
    double refine_seconds = 0;         // probing and splitting
    double verify_seconds = 0;         // a posteriori measurement and repair
    double max_error_m = 0;            // measured: largest two-sided deviation of any triangle
    double mesh_to_surface_m = 0;
    double surface_to_mesh_m = 0;
};

struct Mesh {
    std::vector<double> positions;     // 3 per vertex, metres
    std::vector<double> directions;    // 3 per vertex, unit
    std::vector<std::uint32_t> triangles;  // 3 per triangle, counter-clockwise seen from outside
    std::vector<std::uint8_t> levels;  // bisection level per triangle
    std::vector<float> errors;         // measured deviation per triangle (m), when verified
};

// triangles the tolerance will roughly need (cheap, analytic; used to refuse blown budgets early)
std::uint64_t estimate_triangles(const Field& field, double tolerance_m);

Status refine(const Field& field, const RefineOptions& options, Mesh& out, RefineStats& stats,
              std::string& error);

// the base icosahedron: 12 unit vertices, 20 outward counter-clockwise faces
void icosahedron(std::vector<Vec3>& vertices, std::vector<std::uint32_t>& faces);

// run fn(begin, end) over [0, n) in blocks on up to `threads` threads (0: hardware threads)
void parallel_for(std::size_t n, int threads, const std::function<void(std::size_t, std::size_t)>& fn);

}  // namespace gm
