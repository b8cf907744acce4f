// incremental extraction: a chunk whose triangles, vertex positions, morph targets and
// coarser-level vertices map one to one, in the same order, onto the previous extraction's takes
// its stitched borders from there instead of stitching again. this is the same result:
// stitching reads nothing else (and breaks ties by vertex id, whose order is checked too).
#pragma once

#include <cstdint>
#include <vector>

#include "lod.hpp"
#include "refine.hpp"
#include "seams.hpp"

namespace gm {

// one level of the previous extraction
struct PreviousSeams {
    const Hierarchy* hierarchy = nullptr;            // the hierarchy it was extracted from
    const Level* level = nullptr;                    // the level
    const Level* coarser = nullptr;                  // the next coarser one (nullptr: coarsest)
    const std::vector<std::uint32_t>* to_new = nullptr;  // previous vertex id -> current
    std::vector<std::size_t> start;                  // chunk_starts of level
};

// to_new: per vertex of `previous`, its id in h (kNone: gone). False when an incremental
// extraction does not apply: no previous extraction, another level count, or h not rebuilt from
// previous.
bool map_previous_vertices(const Hierarchy& h, const Hierarchy* previous,
                           const std::vector<const Level*>* previous_levels, std::size_t level_count,
                           std::vector<std::uint32_t>& to_new);

// level li of the previous extraction
PreviousSeams previous_seams(const Hierarchy& previous, const std::vector<const Level*>& previous_levels,
                             std::size_t li, const std::vector<std::uint32_t>& to_new, std::uint32_t nc);

// when chunk b.c of lv (coarser: the next coarser level) is the previous one, fills out with the
// previous stitched borders in current vertex ids and returns true. scratch: any vector.
bool reuse_stitching(const PreviousSeams& p, const Hierarchy& h, const Level& lv, const Level* coarser,
                     const ChunkBorder& b, std::vector<std::uint32_t>& scratch, SeamPiece& out);

}  // namespace gm
