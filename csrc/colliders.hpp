// collision meshes: one per chunk, cut from the same hierarchy at the collider tolerance, raised
// until every chunk fits the triangle cap, optionally biased to straddle the true surface, and
// measured two-sided like the render levels.
#pragma once

#include <cstdint>
#include <functional>
#include <string>

#include "bake.hpp"

namespace gm {

// the collider stage's steps, in order: the cut at the collider tolerance, the angle pass on
// the ground, the bias, the angle pass after it, the measure (kColliderSteps in all)
constexpr std::uint64_t kColliderSteps = 5;

// fills result.colliders from the hierarchy h (the result's vertex pool and chunks already made);
// `step` (optional) is called on the calling thread with (steps done, kColliderSteps) after each
Status make_colliders(const Field& field, Hierarchy& h, BakeResult& result, std::string& error,
                      const std::function<void(std::uint64_t, std::uint64_t)>& step = nullptr);

}  // namespace gm
