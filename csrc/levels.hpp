// one level of detail cut from the bisection hierarchy at a tolerance, verified a posteriori.
#pragma once

#include <cstdint>
#include <vector>

#include "field.hpp"
#include "lod.hpp"
#include "refine.hpp"

namespace gm {

// the links of the hierarchy's nodes that cutting a level scans, in arrays of their own: every
// level scans all nodes a few times, and these are a sixth of the nodes' bytes
struct LevelLinks {
    std::vector<std::uint32_t> parent, pair;
    // the tolerance below which a node's critical tolerance splits it: +inf above the chunk level,
    // -inf for a leaf of the hierarchy (nothing to split)
    std::vector<double> split_below;
};
LevelLinks level_links(const Hierarchy& h);

// cuts the level at tolerance lv.tolerance_m. split: per node, 1 when split; in: the next coarser
// level's split set (all zero for the coarsest), out: this level's, so levels nest. Measures
// every leaf (order verify_order, cached on the nodes; 0: none) and splits those beyond the
// tolerance (counted in lv.repaired). Fills lv.triangles grouped by chunk (in node order within a
// chunk), chunk, errors, present and the largest measured deviations.
void cut_level(const Field& field, Hierarchy& h, const LevelLinks& links, int verify_order, int threads,
               std::vector<std::uint8_t>& split, Level& lv);

}  // namespace gm
