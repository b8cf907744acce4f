// per-chunk buffers of a level, with skirts.
#include "chunks.hpp"

#include <algorithm>
#include <cmath>

namespace gm {

namespace {

// local index of pool id v in the ascending ids (v must be there)
bool local_of(const std::uint32_t* ids, std::size_t n, std::uint32_t v, std::uint32_t& out) {
    const std::uint32_t* it = std::lower_bound(ids, ids + n, v);
    if (it == ids + n || *it != v) return false;
    out = static_cast<std::uint32_t>(it - ids);
    return true;
}

// first triangle of each chunk (the level's triangles are grouped by ascending chunk)
std::size_t chunk_start(const Level& level, std::uint32_t c) {
    return static_cast<std::size_t>(std::lower_bound(level.chunk.begin(), level.chunk.end(), c) -
                                    level.chunk.begin());
}

void add_skirt(ChunkMesh& m, double depth) {
    const std::size_t T = m.triangles.size() / 3;
    // every directed edge, keyed by its undirected ends; an edge seen once is on the boundary
    struct E {
        std::uint64_t key;
        std::uint32_t a, b, order;
    };
    std::vector<E> edges;
    edges.reserve(3 * T);
    static const int pairs[3][2] = {{0, 1}, {1, 2}, {2, 0}};
    std::uint32_t order = 0;
    for (const auto& pr : pairs)
        for (std::size_t t = 0; t < T; ++t) {
            const std::uint32_t a = m.triangles[3 * t + static_cast<std::size_t>(pr[0])];
            const std::uint32_t b = m.triangles[3 * t + static_cast<std::size_t>(pr[1])];
            const std::uint64_t key = (static_cast<std::uint64_t>(std::min(a, b)) << 32) | std::max(a, b);
            edges.push_back({key, a, b, order++});
        }
    std::vector<E> sorted = edges;
    std::sort(sorted.begin(), sorted.end(), [](const E& x, const E& y) {
        return x.key != y.key ? x.key < y.key : x.order < y.order;
    });
    std::vector<std::uint8_t> boundary(edges.size(), 0);
    for (std::size_t i = 0; i < sorted.size();) {
        std::size_t j = i;
        while (j < sorted.size() && sorted[j].key == sorted[i].key) ++j;
        if (j - i == 1) boundary[sorted[i].order] = 1;
        i = j;
    }
    std::vector<std::uint32_t> ba, bb, verts;
    for (const E& e : edges)
        if (boundary[e.order]) {
            ba.push_back(e.a);
            bb.push_back(e.b);
        }
    if (ba.empty()) return;
    verts = ba;
    verts.insert(verts.end(), bb.begin(), bb.end());
    std::sort(verts.begin(), verts.end());
    verts.erase(std::unique(verts.begin(), verts.end()), verts.end());
    const std::uint32_t n = static_cast<std::uint32_t>(m.vertex_count());
    auto low = [&](std::uint32_t v) {
        return n + static_cast<std::uint32_t>(std::lower_bound(verts.begin(), verts.end(), v) - verts.begin());
    };
    auto lowered = [depth](std::vector<double>& arr, std::uint32_t v) {
        const std::size_t i = 3 * static_cast<std::size_t>(v);
        const double r = std::sqrt(arr[i] * arr[i] + arr[i + 1] * arr[i + 1] + arr[i + 2] * arr[i + 2]);
        const double s = (r - depth) / r;
        arr.insert(arr.end(), {arr[i] * s, arr[i + 1] * s, arr[i + 2] * s});
    };
    for (std::uint32_t v : verts) {
        lowered(m.positions, v);
        lowered(m.morph, v);
        const std::size_t i = 3 * static_cast<std::size_t>(v);
        m.normals.insert(m.normals.end(), {m.normals[i], m.normals[i + 1], m.normals[i + 2]});
        m.color.insert(m.color.end(), {m.color[i], m.color[i + 1], m.color[i + 2]});
        m.slope_deg.push_back(m.slope_deg[v]);
        m.altitude_m.push_back(m.altitude_m[v]);
        m.layer.push_back(m.layer[v]);
    }
    for (std::size_t i = 0; i < ba.size(); ++i) m.skirt.insert(m.skirt.end(), {bb[i], ba[i], low(ba[i])});
    for (std::size_t i = 0; i < ba.size(); ++i) m.skirt.insert(m.skirt.end(), {bb[i], low(ba[i]), low(bb[i])});
}

}  // namespace

void chunk_vertex_ids(const Level& level, std::uint32_t chunks, std::vector<std::uint64_t>& offsets,
                      std::vector<std::uint32_t>& ids) {
    offsets.assign(static_cast<std::size_t>(chunks) + 1, 0);
    ids.clear();
    ids.reserve(level.chunk.size() / 2 + 3 * static_cast<std::size_t>(chunks));
    std::size_t t = 0;
    std::vector<std::uint32_t> run;
    // the chunk that last took each vertex: each chunk sorts its distinct ids only (about a sixth
    // of its corner list)
    std::size_t nv = level.present.size();
    for (std::uint32_t v : level.triangles) nv = std::max<std::size_t>(nv, std::size_t{v} + 1);
    std::vector<std::uint32_t> taken(nv, kNone);
    for (std::uint32_t c = 0; c < chunks; ++c) {
        std::size_t e = t;
        while (e < level.chunk.size() && level.chunk[e] == c) ++e;
        run.clear();
        for (std::size_t i = 3 * t; i < 3 * e; ++i) {
            const std::uint32_t v = level.triangles[i];
            if (taken[v] != c) {
                taken[v] = c;
                run.push_back(v);
            }
        }
        std::sort(run.begin(), run.end());
        ids.insert(ids.end(), run.begin(), run.end());
        offsets[c + 1] = ids.size();
        t = e;
    }
}

bool make_chunk(const BakeResult& pool, const Level& level, std::uint32_t c, const std::uint32_t* ids,
                std::size_t nids, double skirt_depth_m, ChunkMesh& m) {
    m = ChunkMesh{};
    m.surface_vertices = static_cast<std::uint32_t>(nids);
    m.positions.resize(3 * nids);
    m.normals.resize(3 * nids);
    m.morph.resize(3 * nids);
    m.color.resize(3 * nids);
    m.slope_deg.resize(nids);
    m.altitude_m.resize(nids);
    m.layer.resize(nids);
    for (std::size_t i = 0; i < nids; ++i) {
        const std::size_t v = ids[i];
        for (std::size_t k = 0; k < 3; ++k) {
            m.positions[3 * i + k] = pool.positions[3 * v + k];
            m.normals[3 * i + k] = pool.normals[3 * v + k];
            m.morph[3 * i + k] = level.morph[3 * v + k];
            m.color[3 * i + k] = pool.color[3 * v + k];
        }
        m.slope_deg[i] = pool.slope_deg[v];
        m.altitude_m[i] = pool.altitude_m[v];
        m.layer[i] = pool.layer[v];
    }
    const std::size_t t0 = chunk_start(level, c), t1 = chunk_start(level, c + 1);
    m.triangles.resize(3 * (t1 - t0));
    for (std::size_t i = 0; i < m.triangles.size(); ++i)
        if (!local_of(ids, nids, level.triangles[3 * t0 + i], m.triangles[i])) return false;
    m.interior = level.interior.empty() ? 0 : level.interior[c];
    for (std::size_t mask = 0; mask < 8; ++mask) {
        m.stitch_offsets[mask] = m.stitched.size() / 3;
        if (mask == 0 || level.stitch_offsets.empty()) continue;
        const std::uint64_t a = level.stitch_offsets[8 * c + mask], e = level.stitch_offsets[8 * c + mask + 1];
        for (std::uint64_t k = 3 * a; k < 3 * e; ++k) {
            std::uint32_t l;
            if (!local_of(ids, nids, level.stitch[k], l)) return false;
            m.stitched.push_back(l);
        }
    }
    m.stitch_offsets[8] = m.stitched.size() / 3;
    if (skirt_depth_m > 0) add_skirt(m, skirt_depth_m);
    return true;
}

}  // namespace gm
