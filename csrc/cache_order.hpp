// vertex cache order: reorder a triangle list so a GPU's post-transform cache hits as often as
// possible (Tom Forsyth, "Linear-Speed Vertex Cache Optimisation", 2006).
#pragma once

#include <cstddef>
#include <cstdint>

namespace gm {

// the cache the scores model (Forsyth's paper: 32 entries)
constexpr std::size_t kCacheOrderModelSize = 32;

// out: room for 3 * tri_count indices; tris: 3 * tri_count indices, each < vertex_count (the
// caller checks). Writes the same triangles (each with its corners in the same rotation) in
// cache order. Deterministic: ties go to the triangle met first. tris and out must not overlap.
void cache_order(std::uint32_t* out, const std::uint32_t* tris, std::size_t tri_count,
                 std::size_t vertex_count);

}  // namespace gm
