// vertex attributes of the true surface: analytic normal, slope, altitude, material layer and its
// color (docs/terrain.md, "Gradient"; docs/spec.md, "layers").
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "field.hpp"

namespace gm {

struct LayerRule;

// per unit direction (3 doubles each): the outward unit normal of the ground, the slope in degrees
// atan(|grad H| / (R + H)) and the altitude H in metres, all from one evaluation of H and its
// analytic gradient. the ground is the zero set of F(p) = |p| - R - H(p/|p|), whose gradient at
// the ground point is u - grad H / (R + H).
void surface_attributes(const Field& field, const double* directions, std::size_t n, int threads,
                        double* normals, double* slope_deg, double* altitude_m);

// the index of the first rule whose closed slope and altitude bands hold each vertex (kNoLayer
// when none does) and that rule's color (kNoLayerGrey when none)
void assign_layers(const std::vector<LayerRule>& rules, const double* slope_deg,
                   const double* altitude_m, std::size_t n, std::uint8_t* layer, double* color);

}  // namespace gm
