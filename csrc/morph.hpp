// morph targets: every vertex's position on the next coarser level, so an engine can blend
// between levels without popping.
#pragma once

#include <cstdint>
#include <vector>

#include "refine.hpp"

namespace gm {

// morph: 3 per vertex of h. coarser_present: per vertex, 1 when the next coarser level uses it
// (nullptr: this is the coarsest level, every vertex stays where it is).
void morph_targets(const Hierarchy& h, const std::vector<std::uint8_t>* coarser_present, std::vector<double>& morph);

}  // namespace gm
