// vertex fetch order: number vertices in the order the index buffer first uses them, so the
// vertex fetches of a draw walk memory forwards (common practice after a vertex cache order).
#pragma once

#include <cstddef>
#include <cstdint>

namespace gm {

// remap: room for vertex_count entries; receives remap[old] = new. indices: index_count
// entries, each < vertex_count (the caller checks). Vertices get new numbers in the order of
// their first use in `indices`; vertices never used follow in their old order. Returns the number
// of vertices `indices` uses.
std::size_t fetch_order(std::uint32_t* remap, const std::uint32_t* indices, std::size_t index_count,
                        std::size_t vertex_count);

}  // namespace gm
