// the tight deviation of one triangle: the largest values of a barycentric grid, each refined by
// a pattern search towards the peak between the samples.
#pragma once

#include "distance.hpp"
#include "field.hpp"

namespace gm {

// the grid the search starts from: this order, raised like sampling_order for the spacing
constexpr int kTightOrder = 8;

// largest deviation of triangle (V0, V1, V2) both ways, searched densely where it peaks: a
// barycentric grid of sampling_order(V0, V1, V2, kTightOrder, spacing_m) with the features'
// crease points, then from its largest values (those within kTightSeedShare of the largest, at
// most two per direction, each confirmed by cap_distance) a compass search on the triangle (Kolda, Lewis & Torczon, "Optimization
// by direct search", SIAM Review 2003) whose step halves until it is a 50th of the value found (a 500th for surface -> mesh to a whole mesh).
// mesh -> surface by the radial bound, the projection and the walls (every value a
// distance to an actual surface point), plus the last step: the distance to a set is
// 1-Lipschitz, so within the last step of the peak found it is at most that much larger.
// every value that would raise the largest is confirmed by cap_distance first.
// surface -> mesh: the ground point above a point against the triangle, searched the same way
// when search_surface (else the grid's largest: beside a vertical wall the ground point above a
// point may be nearer another triangle, and a search would find the wall top against this one).
// corners: sample the corners too (a collider's corners are moved off the ground by its bias).
// mesh (optional): surface -> mesh is the exact distance to this whole mesh (TriangleTree), not
// to the triangle alone.
// a function of the corners, spacing_m, search_surface, corners and mesh alone.
double tight_deviation(const Field& field, Vec3 V0, Vec3 V1, Vec3 V2, double spacing_m, double& mesh_to_surface,
                       double& surface_to_mesh, bool search_surface = true, bool corners = false,
                       const TriangleTree* mesh = nullptr);

}  // namespace gm
