// distances between mesh points and the true surface, shared by the mesher and the a posteriori
// measurement.
#pragma once

#include <cstdint>
#include <vector>

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

// distance from p to the surface by a safeguarded Gauss-Newton method on the direction (a trust
// region, Nocedal & Wright, "Numerical Optimization", ch. 4 and 10), from p's own direction: a
// step is taken only when the ground point comes closer, else the trust radius halves, so steep
// flanks, sharp crests and steps only shrink the step. every iterate is a ground point, so the
// result is an upper bound of the true distance (a local minimum, not always the global one).
// `start`: the direction to start from instead.
double project_safeguarded(const Field& field, Vec3 p, double trust_m, int iterations, double xtol_m,
                           const Vec3* start = nullptr);

// the nearest ground point to p lies within `upper` of it, so its direction lies in the cap of
// angular radius asin(upper / |p|) around p/|p|: a grid x grid gnomonic grid of directions
// over that cap, then the safeguarded projection from the best node (trust radius two grid
// steps). min(upper, the distance found): an upper bound of the true distance that a local
// projection's wrong basin (a wall beside a point that projects onto the ground) does not fool.
double cap_distance(const Field& field, Vec3 p, double upper, int grid);

// the exact distance from a point to a whole triangle mesh: a bounding volume hierarchy of
// axis-aligned boxes (median splits on the longest axis of the centroids), searched nearest box
// first with branch and bound, each candidate by closest_on_triangle. the minimum is exact and
// does not depend on the order of the search. the positions are copied.
class TriangleTree {
public:
    TriangleTree(const double* positions, const std::uint32_t* triangles, std::size_t ntris);
    // min(upper, the distance from p to the nearest triangle)
    double distance(Vec3 p, double upper) const;

private:
    struct Box {
        Vec3 lo, hi;
        std::uint32_t first = 0, count = 0;  // a leaf: triangles order[first .. first + count)
        std::uint32_t left = 0;              // an inner node: children left, left + 1
    };
    std::vector<Vec3> corners_;  // 3 per triangle, in `order`
    std::vector<Box> boxes_;
    void build(std::vector<std::uint32_t>& order, const std::vector<Vec3>& centroid, std::uint32_t slot,
               std::uint32_t first, std::uint32_t count);
};

}  // namespace gm
