// levels of detail, chunks, seams and morph targets, all taken from one bisection hierarchy.
#pragma once

#include <array>
#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "field.hpp"
#include "refine.hpp"

namespace gm {

struct Level {
    double tolerance_m = 0;
    std::vector<std::uint32_t> triangles;  // 3 global vertex ids per triangle, grouped by chunk
    std::vector<std::uint32_t> chunk;      // chunk per triangle (ascending)
    std::vector<float> errors;             // measured deviation per triangle (m)
    std::vector<std::uint8_t> present;     // per global vertex: used by this level
    std::vector<double> morph;             // 3 per global vertex: its position on the next
                                           // coarser level (its own position on the coarsest)
    // per chunk, its triangles come interior first, then its border: the triangles around the
    // boundary vertices that the next coarser level lacks. interior[c] counts the interior ones.
    std::vector<std::uint32_t> interior;
    // stitched borders: for chunk c and edge mask k in 1..7 (bit i: the neighbour across chunk
    // edge i is one level coarser), triangles stitch[off[c*8+k] .. off[c*8+k+1]) (3 ids each)
    // replace the chunk's border; mask 0 (empty range) keeps the border as it is.
    std::vector<std::uint32_t> stitch;
    std::vector<std::uint64_t> stitch_offsets;  // chunks * 8 + 1
    std::uint64_t stitch_failures = 0;          // variants left unstitched (never seen; counted)
    std::uint64_t repaired = 0;
    // after an incremental extraction: per chunk, 1 when its triangles, vertex positions, morph
    // targets and stitched borders are those of the previous extraction (vertex ids mapped)
    std::vector<std::uint8_t> same;
    std::vector<std::uint8_t> failed;  // per chunk: stitched variants left unstitched
    double max_error_m = 0, mesh_to_surface_m = 0, surface_to_mesh_m = 0;
    double seconds = 0;  // wall time of this level's closure, verification, morph targets and seams
};

struct ChunkInfo {
    std::vector<std::uint32_t> corners;    // 3 per chunk: vertex ids; edge i is opposite corner i
    std::vector<std::uint32_t> neighbors;  // 3 per chunk: chunk across edge i
    std::vector<std::uint32_t> edge_ids;   // 3 per chunk: global chunk-edge id of edge i
};

// (stage, done, total) after each level is cut ("levels") and stitched ("seams"), on the calling
// thread
using LevelProgress = std::function<void(const char*, std::uint64_t, std::uint64_t)>;

// extract one level per tolerance (ascending, the first equal to the hierarchy's); coarser levels
// are computed first and nested: every vertex of a coarser level is a vertex of the finer ones
//
// incremental: with `previous` (the hierarchy h was rebuilt from, see RefineOptions::previous) and
// `previous_levels` (extracted from it with the same tolerances and stitch flag), a chunk whose
// triangles, vertex positions and coarser-level vertices map one to one, in the same order, onto
// the previous ones takes its stitched borders from there instead of stitching again (the same
// result: stitching depends on nothing else), and is marked in Level::same.
Status extract_levels(const Field& field, Hierarchy& h, const std::vector<double>& tolerances,
                      int verify_order, int threads, bool stitch, std::vector<Level>& levels,
                      ChunkInfo& chunks, std::string& error, const Hierarchy* previous = nullptr,
                      const std::vector<const Level*>* previous_levels = nullptr,
                      const LevelProgress* progress = nullptr);

}  // namespace gm
