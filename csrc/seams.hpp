// stitched seams of one level: per chunk, its border (the triangles around the boundary vertices
// the next coarser level lacks) and, for each edge mask 1..7, a stitched variant of it.
#pragma once

#include <cstdint>
#include <vector>

#include "chunk_edges.hpp"
#include "lod.hpp"
#include "refine.hpp"

namespace gm {

struct PreviousSeams;  // seam_reuse.hpp

// the first triangle of each chunk in a triangle list grouped by ascending chunk, and its end:
// nc + 1 entries (a chunk with no triangle starts where the next one does)
std::vector<std::size_t> chunk_starts(const std::vector<std::uint32_t>& chunk, std::uint32_t nc);

// one chunk's triangles as extracted, with the ones that make its border
struct ChunkBorder {
    std::uint32_t c = 0;
    std::size_t t0 = 0, t1 = 0;           // its triangles in the level
    std::vector<std::uint32_t> tris;      // 3 ids each
    std::vector<float> err;               // 1 each
    std::vector<std::uint8_t> in_border;  // 1 each
    std::size_t count() const { return t1 - t0; }
};

// one chunk's stitched borders: variant k is stitch[3*off[k] .. 3*off[k+1]) (off[8]: the size)
struct SeamPiece {
    std::vector<std::uint32_t> stitch;
    std::uint64_t off[8] = {};
    std::uint64_t failures = 0;
};

// writes the chunk back into the level, interior triangles first, then the border, and sets
// lv.interior[b.c]
void write_back(const ChunkBorder& b, Level& lv);

// fills lv.stitch, stitch_offsets, interior, failed, same and stitch_failures, and reorders each
// chunk's triangles interior first. coarser: the next coarser level (nullptr: lv is the coarsest
// and has no border). stitch false: every variant keeps the border as it is. previous (optional):
// the previous extraction, for incremental reuse. Chunks run in parallel; the result does not
// depend on the thread count.
void make_seams(const Hierarchy& h, const ChunkEdges& edges, const ChunkInfo& chunks, Level& lv,
                const Level* coarser, int threads, bool stitch, const PreviousSeams* previous);

}  // namespace gm
