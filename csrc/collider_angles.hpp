// the collider angle pass: raises the smallest triangle angle of a closed collider mesh by
// edge collapses and edge flips, each checked against the true surface.
#pragma once

#include <cstdint>
#include <vector>

#include "field.hpp"
#include "vec.hpp"

namespace gm {

// smallest interior angle of triangle (a, b, c) in degrees (0 for a collinear one)
double smallest_angle_deg(Vec3 a, Vec3 b, Vec3 c);

struct AngleStats {
    std::uint64_t collapses = 0, flips = 0, inserts = 0;  // inserts: Steiner points added
    std::uint64_t stuck = 0;  // triangles below the target that no allowed move improves
};

// raises every triangle angle below `target_deg` as far as the moves allow. positions P (3 per
// vertex) never move, but Steiner points may be added after them; `tris` (3 per triangle,
// counter-clockwise from outside) and `chunk` (one per triangle) are rewritten in place, triangles
// grouped by chunk (each chunk's kept triangles first in their order, then the ones it gained).
// a collapse or flip is taken only when it raises the smallest angle of the triangles it changes,
// keeps each changed triangle's normal within 75 degrees of where it was, keeps the mesh a closed
// 2-manifold (link condition) and leaves every new triangle within `tolerance_m` of the surface,
// measured as `measure` does on a grid of twice `measure_order` (a superset of its samples, so the
// bake's own measurement of a new triangle never exceeds it). where none helps a triangle, a
// Steiner point (its circumcentre, in it or in the triangle beyond its longest edge, or that edge's
// midpoint; moved onto the nearest wall face or the ground when not near the surface) goes in with
// Lawson's flips around it, kept only if every triangle it makes or changes has a larger smallest
// angle than the sliver had, under the same tolerance check, within `cap` triangles per chunk.
// first every chunk inside its border (moves that touch no vertex shared with another chunk),
// chunks in parallel on `threads` workers; then the whole mesh in one sequential pass. each pass
// takes moves in (angle, triangle) order and hands out new ids from ranges fixed before it runs:
// the same input gives the same mesh, whatever the thread count.
AngleStats raise_min_angle(const Field& field, std::vector<double>& P, std::vector<std::uint32_t>& tris,
                           std::vector<std::uint32_t>& chunk, double target_deg, double tolerance_m,
                           int measure_order, int threads, std::uint64_t cap);

}  // namespace gm
