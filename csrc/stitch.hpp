// one stitched variant of a chunk border: the border with some of its chunk-edge vertices taken
// out and the holes they leave re-triangulated, so the chunk meets a coarser neighbour with no
// crack and no T-junction.
#pragma once

#include <cstdint>
#include <vector>

#include "chunk_edges.hpp"
#include "refine.hpp"

namespace gm {

// appends to out the variant of the border triangles `tris` (3 ids each) without the vertices
// marked in `removed` (per vertex id; all on the chunk's edges). The triangles around the removed
// vertices form holes; each hole's boundary loop, less the removed vertices, is triangulated
// again, keeping every other edge. A variant is kept only when it is valid: no directed edge
// twice, and its open edges are the border's own (less those at removed vertices) plus edges
// along chunk edges. Returns false (out as it was) when no valid variant was found, the hole
// grown by up to three rings of triangles.
bool stitch_variant(const Hierarchy& h, const ChunkEdges& edges, const std::vector<std::uint32_t>& tris,
                    const std::vector<std::uint8_t>& removed, std::vector<std::uint32_t>& out);

// every triangle of `tris` sharing a vertex with a triangle marked in `from` gets marked in `set`
// (nv: the vertex count; from and set may be the same vector)
void grow_ring(const std::vector<std::uint32_t>& tris, const std::vector<std::uint8_t>& from, std::size_t nv,
               std::vector<std::uint8_t>& set);

}  // namespace gm
