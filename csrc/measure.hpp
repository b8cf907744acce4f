// a posteriori measurement of how far a mesh is from the true surface, both ways.
#pragma once

#include <cstdint>
#include <vector>

#include "field.hpp"

namespace gm {

struct Deviation {
    double max_m = 0;             // largest of the two directions
    double mesh_to_surface_m = 0;  // largest distance from a mesh point to the surface
    double surface_to_mesh_m = 0;  // largest distance from a surface point to its triangle
    std::uint64_t samples = 0;
};

// the barycentric grid order triangle_deviation samples at: `order`, raised (up to 32) so that
// samples are at most `spacing_m` apart along the edges (0: no such bound)
int sampling_order(Vec3 V0, Vec3 V1, Vec3 V2, int order, double spacing_m);

// largest deviation of one triangle over a barycentric grid of order
// sampling_order(V0, V1, V2, order, spacing_m): a function of the corners and that order alone.
// surface -> mesh is the distance from the ground point above each sample to the triangle, or
// to the nearest of `cover_count` more triangles (3 corners each) when given: the triangles
// around it, which may hold the nearest point (still an upper bound on the distance to the mesh).
// surface_only: surface -> mesh alone (mesh_to_surface is left 0). corners: sample the corners
// too (left out by default: a level's lie on the surface; a collider's are moved by its bias)
double triangle_deviation(const Field& field, Vec3 V0, Vec3 V1, Vec3 V2, int order,
                          double& mesh_to_surface, double& surface_to_mesh, double spacing_m = 0,
                          const Vec3* cover = nullptr, std::size_t cover_count = 0, bool surface_only = false,
                          bool corners = false);

// samples every triangle on a barycentric grid of the given order (order+1)(order+2)/2 points;
// mesh -> surface by projection onto the surface (and vertical walls), surface -> mesh as the
// distance from the ground point above each sample to the triangle. per_triangle (optional,
// size = triangle count) receives each triangle's largest deviation.
Deviation measure(const Field& field, const double* positions, std::size_t nverts,
                  const std::uint32_t* triangles, std::size_t ntris, int order, int threads,
                  double* per_triangle);

// the colliders' published measure: a grid at `spacing_m` (corners sampled, surface -> mesh to
// the nearest of each triangle and every triangle sharing a vertex with it), then the tight search
// (tight_deviation, corners sampled, surface -> mesh by the exact distance to the whole collider,
// TriangleTree) on the triangles that can hold each direction's largest figure, chosen as
// publish_tight chooses a level's leaves: by decreasing covered figure times kGridSlack
// (kWallSlack beside a wall), in batches of kTightBatch, until none left could pass the largest
// searched figure. mesh -> surface is the larger of the grid's and the search's; surface -> mesh
// the search's (the covered grid only bounds it from above), and the faces of vertical walls
// (sampled in columns named by the triangles beside them, the largest searched out on the
// wall). `tight` (optional) receives how many triangles were searched. the same whatever the
// thread count.
Deviation measure_collider(const Field& field, const double* positions, std::size_t nverts,
                           const std::uint32_t* triangles, std::size_t ntris, int order, double spacing_m,
                           int threads, std::uint64_t* tight = nullptr);

}  // namespace gm
