// per-chunk buffers of one level: each chunk's vertices gathered from the vertex pool (surface
// vertices in ascending pool order, then skirt vertices), its triangles, stitched borders and
// skirt in local indices.
#pragma once

#include <cstdint>
#include <memory>
#include <vector>

#include "bake.hpp"

namespace gm {

// per chunk, the ascending distinct vertex ids of its triangles (a level's triangles come grouped
// by chunk): ids[offsets[c] .. offsets[c+1])
void chunk_vertex_ids(const Level& level, std::uint32_t chunks, std::vector<std::uint64_t>& offsets,
                      std::vector<std::uint32_t>& ids);

// the buffers of chunk c of `level`, its vertex ids given; attributes come from the pool in `pool`
// (positions, normals, slope, altitude, layer, color). skirt_depth_m > 0 hangs a skirt from every
// boundary edge: a quad `depth` metres down, wound as the continuation of the surface across the
// edge; a skirt vertex takes its top vertex's normal and attributes (the ground it hangs from).
// Returns false when a stitched border names a vertex outside the chunk (never seen; an
// internal error).
bool make_chunk(const BakeResult& pool, const Level& level, std::uint32_t c, const std::uint32_t* ids,
                std::size_t nids, double skirt_depth_m, ChunkMesh& out);

}  // namespace gm
