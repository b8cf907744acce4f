// vertex fetch order: first use in the index buffer (the order a vertex-fetch optimiser such as
// meshoptimizer's optimizeVertexFetch produces; common practice).
#include "fetch_order.hpp"

namespace gm {

std::size_t fetch_order(std::uint32_t* remap, const std::uint32_t* indices, std::size_t index_count,
                        std::size_t vertex_count) {
    constexpr std::uint32_t kUnset = 0xffffffffu;
    for (std::size_t v = 0; v < vertex_count; ++v) remap[v] = kUnset;
    std::uint32_t next = 0;
    for (std::size_t i = 0; i < index_count; ++i)
        if (remap[indices[i]] == kUnset) remap[indices[i]] = next++;
    std::size_t used = next;
    for (std::size_t v = 0; v < vertex_count; ++v)
        if (remap[v] == kUnset) remap[v] = next++;
    return used;
}

}  // namespace gm
