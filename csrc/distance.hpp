// distances between mesh points and the true surface, shared by the mesher and the a posteriori
// measurement.
#pragma once

#include <cstdint>

#include "field.hpp"

namespace gm {

enum class OffsetMode : int { Radial = 0, Normal = 1, Exact = 2 };

// closest point on triangle (a, b, c) to p: Ericson, "Real-Time Collision Detection" (2005) 5.1.5
Vec3 closest_on_triangle(Vec3 p, Vec3 a, Vec3 b, Vec3 c);

// where the ray from the centre along unit direction u meets triangle (a, b, c); false when it
// misses the triangle (barycentric slack eps)
bool ray_hits_triangle(Vec3 u, Vec3 a, Vec3 b, Vec3 c, Vec3& p, double eps = 1e-9);

// distance from p to the surface by Gauss-Newton projection onto S(u) = (R + H(u)) u, started at
// p's direction; every iterate is a surface point, so the result is an upper bound that is tight
// once converged. list/count restrict the features (nullptr: use the spatial index).
double project_distance(const Field& field, Vec3 p, const std::uint32_t* list, std::size_t count,
                        int iterations);

}  // namespace gm
