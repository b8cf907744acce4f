// vertex cache statistics: how many vertices a FIFO post-transform cache transforms for a
// triangle list, the figure behind ACMR (average cache miss ratio: transformed vertices per
// triangle; 3 is no reuse, about 0.5 the ideal for large regular meshes).
#pragma once

#include <cstddef>
#include <cstdint>

namespace gm {

// indices: index_count entries, each < vertex_count (the caller checks); cache_size >= 1.
// Simulates a FIFO cache of cache_size entries fed vertex by vertex (a hit leaves the order as it
// is, a miss enters at the back and pushes the oldest out) and returns the number of misses.
std::size_t fifo_misses(const std::uint32_t* indices, std::size_t index_count,
                        std::size_t vertex_count, std::size_t cache_size);

}  // namespace gm
