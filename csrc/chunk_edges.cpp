// chunk topology: corners, edges and neighbours of the chunks, and the chunk edge of each vertex.
#include "chunk_edges.hpp"

#include <unordered_map>

namespace gm {

namespace {

// per chunk, its node at the chunk level
std::vector<std::uint32_t> chunk_roots(const Hierarchy& h) {
    std::vector<std::uint32_t> root(h.chunks, kNone);
    for (std::uint32_t i = 0; i < h.nodes.size(); ++i)
        if (h.nodes[i].level == h.min_level && h.nodes[i].chunk != kNone) root[h.nodes[i].chunk] = i;
    return root;
}

// corners and edge ids of every chunk; edge_chunks receives the (one or two) chunks of each edge
void number_edges(const Hierarchy& h, ChunkInfo& chunks, ChunkEdges& edges,
                  std::vector<std::array<std::uint32_t, 2>>& edge_chunks) {
    const std::vector<std::uint32_t> root = chunk_roots(h);
    std::unordered_map<std::uint64_t, std::uint32_t> edge_id;
    for (std::uint32_t c = 0; c < h.chunks; ++c) {
        const Node& r = h.nodes[root[c]];
        for (std::uint32_t i = 0; i < 3; ++i) {
            chunks.corners[3 * c + i] = r.v[i];
            edges.corner[r.v[i]] = 1;
            const std::uint32_t a = r.v[(i + 1) % 3], b = r.v[(i + 2) % 3];
            auto it = edge_id.find(edge_key(a, b));
            std::uint32_t id;
            if (it == edge_id.end()) {
                id = static_cast<std::uint32_t>(edges.ends.size());
                edge_id.emplace(edge_key(a, b), id);
                edges.ends.push_back({std::min(a, b), std::max(a, b)});
                edge_chunks.push_back({c, kNone});
            } else {
                id = it->second;
                edge_chunks[id][1] = c;
            }
            chunks.edge_ids[3 * c + i] = id;
        }
    }
}

// the chunk edge of every other vertex: a midpoint lies on an edge when both its parents do
// (vertices come after their parents, so one pass in id order suffices)
void place_vertices(const Hierarchy& h, ChunkEdges& edges) {
    const std::size_t nv = h.dir.size();
    edges.corner_edges.assign(nv, {});
    for (std::uint32_t e = 0; e < edges.ends.size(); ++e)
        for (std::uint32_t v : edges.ends[e]) edges.corner_edges[v].push_back(e);
    auto try_edge = [&](std::uint32_t v, std::uint32_t a, std::uint32_t b, std::uint32_t e) {
        if (e != kNone && edges.on(a, e) && edges.on(b, e)) edges.cedge[v] = e;
    };
    for (std::uint32_t v = 0; v < nv; ++v) {
        if (edges.corner[v] || h.vparent[2 * v] == kNone) continue;
        const std::uint32_t a = h.vparent[2 * v], b = h.vparent[2 * v + 1];
        if (edges.corner[a])
            for (std::uint32_t e : edges.corner_edges[a]) try_edge(v, a, b, e);
        else
            try_edge(v, a, b, edges.cedge[a]);
    }
}

}  // namespace

bool ChunkEdges::share_edge(std::uint32_t a, std::uint32_t b) const {
    if (!corner[a]) return cedge[a] != kNone && on(b, cedge[a]);
    for (std::uint32_t e : corner_edges[a])
        if (on(b, e)) return true;
    return false;
}

void chunk_topology(const Hierarchy& h, ChunkInfo& chunks, ChunkEdges& edges) {
    const std::uint32_t nc = h.chunks;
    chunks.corners.assign(3 * nc, kNone);
    chunks.neighbors.assign(3 * nc, kNone);
    chunks.edge_ids.assign(3 * nc, kNone);
    edges = ChunkEdges{};
    edges.corner.assign(h.dir.size(), 0);
    edges.cedge.assign(h.dir.size(), kNone);
    std::vector<std::array<std::uint32_t, 2>> edge_chunks;
    number_edges(h, chunks, edges, edge_chunks);
    for (std::uint32_t c = 0; c < nc; ++c)
        for (std::uint32_t i = 0; i < 3; ++i) {
            const auto ec = edge_chunks[chunks.edge_ids[3 * c + i]];
            chunks.neighbors[3 * c + i] = ec[0] == c ? ec[1] : ec[0];
        }
    place_vertices(h, edges);
}

}  // namespace gm
