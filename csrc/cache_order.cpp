// vertex cache order: Tom Forsyth, "Linear-Speed Vertex Cache Optimisation" (2006).
// Greedy: emit the triangle whose vertices score best, where a vertex scores by its place in a
// modelled LRU cache (the last triangle's three vertices a fixed 0.75, then a power falloff) plus
// a boost for vertices with few triangles left (so none is stranded). Only triangles touching the
// cache are rescored after each emit; when none is left, the next unemitted triangle in input
// order starts a new run (linear time, deterministic).
#include "cache_order.hpp"

#include <cmath>
#include <vector>

namespace gm {

namespace {

// the paper's constants
constexpr double kDecayPower = 1.5;
constexpr double kLastTriScore = 0.75;
constexpr double kValenceBoostScale = 2.0;
constexpr double kValenceBoostPower = 0.5;
constexpr int kCache = static_cast<int>(kCacheOrderModelSize);

double vertex_score(int cache_pos, std::uint32_t remaining) {
    if (remaining == 0) return -1.0;  // no triangle left to help
    double s = 0.0;
    if (cache_pos >= 0) {
        if (cache_pos < 3)
            s = kLastTriScore;
        else
            s = std::pow(1.0 - double(cache_pos - 3) / double(kCache - 3), kDecayPower);
    }
    return s + kValenceBoostScale * std::pow(double(remaining), -kValenceBoostPower);
}

}  // namespace

void cache_order(std::uint32_t* out, const std::uint32_t* tris, std::size_t tri_count,
                 std::size_t vertex_count) {
    if (tri_count == 0) return;
    // vertex -> triangles (CSR), live triangles kept at the front of each vertex's run
    std::vector<std::uint32_t> start(vertex_count + 1, 0), remaining(vertex_count, 0);
    for (std::size_t i = 0; i < 3 * tri_count; ++i) ++start[tris[i] + 1];
    for (std::size_t v = 0; v < vertex_count; ++v) start[v + 1] += start[v];
    std::vector<std::uint32_t> adj(3 * tri_count);
    for (std::size_t t = 0; t < tri_count; ++t)
        for (int j = 0; j < 3; ++j) {
            std::uint32_t v = tris[3 * t + j];
            adj[start[v] + remaining[v]++] = static_cast<std::uint32_t>(t);
        }
    std::vector<int> cache_pos(vertex_count, -1);
    std::vector<double> vscore(vertex_count);
    for (std::size_t v = 0; v < vertex_count; ++v) vscore[v] = vertex_score(-1, remaining[v]);
    std::vector<std::uint8_t> emitted(tri_count, 0);

    // the modelled LRU cache, with room for the three vertices pushed in front
    std::vector<std::uint32_t> cache, next;
    cache.reserve(kCache + 3);
    next.reserve(kCache + 3);
    std::size_t cursor = 0;  // next triangle in input order not known to be emitted
    std::size_t best = 0;    // the first triangle: the first in input order
    for (std::size_t n = 0; n < tri_count; ++n) {
        const std::uint32_t* t = tris + 3 * best;
        out[3 * n] = t[0];
        out[3 * n + 1] = t[1];
        out[3 * n + 2] = t[2];
        emitted[best] = 1;
        // drop the triangle from its vertices' live runs
        for (int j = 0; j < 3; ++j) {
            std::uint32_t v = t[j];
            std::uint32_t* run = adj.data() + start[v];
            std::uint32_t live = remaining[v];
            for (std::uint32_t k = 0; k < live; ++k)
                if (run[k] == best) {
                    run[k] = run[live - 1];
                    run[live - 1] = static_cast<std::uint32_t>(best);
                    break;
                }
            remaining[v] = live - 1;
        }
        // the triangle's vertices to the front, then the rest of the cache in its order
        next.clear();
        next.insert(next.end(), t, t + 3);
        for (std::uint32_t v : cache)
            if (v != t[0] && v != t[1] && v != t[2]) next.push_back(v);
        cache.swap(next);
        // rescore the cache's vertices; those pushed out of the model drop to no cache place
        for (std::size_t k = 0; k < cache.size(); ++k) {
            std::uint32_t v = cache[k];
            int pos = k < std::size_t(kCache) ? int(k) : -1;
            cache_pos[v] = pos;
            vscore[v] = vertex_score(pos, remaining[v]);
        }
        // rescore the live triangles of those vertices and pick the best
        double best_score = -1.0;
        std::size_t found = tri_count;
        for (std::uint32_t v : cache)
            for (std::uint32_t k = 0; k < remaining[v]; ++k) {
                std::uint32_t tri = adj[start[v] + k];
                const std::uint32_t* c = tris + 3 * tri;
                double s = vscore[c[0]] + vscore[c[1]] + vscore[c[2]];
                if (s > best_score || (s == best_score && tri < found)) {
                    best_score = s;
                    found = tri;
                }
            }
        if (cache.size() > std::size_t(kCache)) cache.resize(kCache);
        if (found == tri_count) {
            while (cursor < tri_count && emitted[cursor]) ++cursor;
            found = cursor;  // tri_count only after the last triangle
        }
        best = found;
    }
}

}  // namespace gm
