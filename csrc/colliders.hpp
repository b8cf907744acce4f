// collision meshes: one per chunk, cut from the same hierarchy at the collider tolerance, raised
// until every chunk fits the triangle cap, optionally biased to straddle the true surface, and
// measured two-sided like the render levels.
#pragma once

#include <string>

#include "bake.hpp"

namespace gm {

// fills result.colliders from the hierarchy h (the result's vertex pool and chunks already made)
Status make_colliders(const Field& field, Hierarchy& h, BakeResult& result, std::string& error);

}  // namespace gm
