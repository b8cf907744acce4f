// chunk topology: the chunks are the hierarchy's nodes at the chunk level (bisection level 2c), so
// their edges are edges of every level. this names each chunk's corners, edges and neighbours,
// and, per vertex, the chunk edge it lies on.
#pragma once

#include <algorithm>
#include <array>
#include <cstdint>
#include <vector>

#include "lod.hpp"
#include "refine.hpp"

namespace gm {

// an undirected edge as one key: the smaller id in the high half
inline std::uint64_t edge_key(std::uint32_t a, std::uint32_t b) {
    return (static_cast<std::uint64_t>(std::min(a, b)) << 32) | std::max(a, b);
}

// where the vertices lie on the chunk boundary
struct ChunkEdges {
    std::vector<std::uint8_t> corner;                     // per vertex: 1 at a chunk corner
    std::vector<std::uint32_t> cedge;                     // per vertex: chunk edge it lies on
                                                          // (kNone: inside a chunk or a corner)
    std::vector<std::array<std::uint32_t, 2>> ends;       // per chunk edge: its corners, ascending
    std::vector<std::vector<std::uint32_t>> corner_edges;  // per vertex: chunk edges ending there

    // does vertex v lie on chunk edge e (at a corner of it or inside it)?
    bool on(std::uint32_t v, std::uint32_t e) const {
        if (corner[v]) return ends[e][0] == v || ends[e][1] == v;
        return cedge[v] == e;
    }
    // do two boundary vertices lie on one chunk edge?
    bool share_edge(std::uint32_t a, std::uint32_t b) const;
};

// fills chunks (corners, neighbours, edge ids; edge i of a chunk is opposite its corner i) and
// edges. chunk edges are numbered in the order the chunks first name them.
void chunk_topology(const Hierarchy& h, ChunkInfo& chunks, ChunkEdges& edges);

}  // namespace gm
