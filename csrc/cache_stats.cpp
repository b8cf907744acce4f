// FIFO post-transform cache simulation (the model behind the ACMR figure of vertex cache
// optimisers; common practice: 16 or 32 entries).
#include "cache_stats.hpp"

#include <vector>

namespace gm {

std::size_t fifo_misses(const std::uint32_t* indices, std::size_t index_count,
                        std::size_t vertex_count, std::size_t cache_size) {
    if (cache_size == 0) return index_count;
    std::vector<std::uint8_t> cached(vertex_count, 0);
    std::vector<std::uint32_t> ring(cache_size);
    std::size_t head = 0, filled = 0, misses = 0;
    for (std::size_t i = 0; i < index_count; ++i) {
        std::uint32_t v = indices[i];
        if (cached[v]) continue;
        ++misses;
        if (filled == cache_size)
            cached[ring[head]] = 0;  // the oldest leaves
        else
            ++filled;
        ring[head] = v;
        cached[v] = 1;
        head = (head + 1) % cache_size;
    }
    return misses;
}

}  // namespace gm
