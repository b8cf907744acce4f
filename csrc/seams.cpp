// stitched seams per level: a chunk's border is the ring of triangles around its boundary vertices
// that the next coarser level lacks; for each edge mask (bit i: the neighbour across chunk edge i
// is one level coarser) the vertices on those edges leave and the hole is stitched
// (csrc/stitch.cpp). when a variant cannot be stitched inside the border (its holes would enclose
// interior triangles), the border grows by a ring of triangles and every variant is made again.
#include "seams.hpp"

#include <algorithm>

#include "seam_reuse.hpp"
#include "stitch.hpp"

namespace gm {

namespace {

constexpr int kMaxBorderGrowth = 3;

// what every chunk of one level reads
struct LevelSeams {
    const Hierarchy& h;
    const ChunkEdges& edges;
    const ChunkInfo& chunks;
    Level& lv;
    const Level* coarser;
    bool stitch;
    const PreviousSeams* previous;
    std::vector<std::size_t> start;  // chunk_starts of lv

    // the edge (0..2) of chunk c that vertex v lies inside and the coarser level lacks (-1: none)
    int edge_of(std::uint32_t c, std::uint32_t v) const {
        if (!coarser || coarser->present[v] || edges.corner[v] || edges.cedge[v] == kNone) return -1;
        for (std::uint32_t i = 0; i < 3; ++i)
            if (edges.cedge[v] == chunks.edge_ids[3 * c + i]) return static_cast<int>(i);
        return -1;
    }
};

ChunkBorder chunk_border(const LevelSeams& s, std::uint32_t c) {
    ChunkBorder b;
    b.c = c;
    b.t0 = s.start[c];
    b.t1 = s.start[c + 1];
    const auto& tri = s.lv.triangles;
    b.tris.assign(tri.begin() + static_cast<std::ptrdiff_t>(3 * b.t0),
                  tri.begin() + static_cast<std::ptrdiff_t>(3 * b.t1));
    b.err.assign(s.lv.errors.begin() + static_cast<std::ptrdiff_t>(b.t0),
                 s.lv.errors.begin() + static_cast<std::ptrdiff_t>(b.t1));
    b.in_border.assign(b.count(), 0);
    for (std::size_t t = 0; t < b.count(); ++t)
        for (std::size_t k = 0; k < 3; ++k)
            if (s.edge_of(c, b.tris[3 * t + k]) >= 0) b.in_border[t] = 1;
    return b;
}

// the variants of every mask for the current border; returns how many could not be stitched
// (those keep the border as it is). removed: per vertex, all zero before and after
std::uint64_t stitch_masks(const LevelSeams& s, const ChunkBorder& b, std::vector<std::uint8_t>& removed,
                           SeamPiece& pc) {
    pc.stitch.clear();
    std::vector<std::uint32_t> btris;
    for (std::size_t t = 0; t < b.count(); ++t)
        if (b.in_border[t]) btris.insert(btris.end(), {b.tris[3 * t], b.tris[3 * t + 1], b.tris[3 * t + 2]});
    std::uint64_t failures = 0;
    for (int mask = 0; mask < 8; ++mask) {
        pc.off[mask] = pc.stitch.size() / 3;
        if (mask == 0 || !s.stitch || !s.coarser) continue;
        bool any = false;
        for (std::uint32_t v : btris) {
            const int ei = s.edge_of(b.c, v);
            removed[v] = (ei >= 0 && ((mask >> ei) & 1)) ? 1 : 0;
            any = any || removed[v];
        }
        const std::size_t before = pc.stitch.size();
        const bool ok = !any || stitch_variant(s.h, s.edges, btris, removed, pc.stitch);
        if (!ok) {
            ++failures;
            pc.stitch.resize(before);
        }
        if (!any || !ok) pc.stitch.insert(pc.stitch.end(), btris.begin(), btris.end());
        for (std::uint32_t v : btris) removed[v] = 0;
    }
    return failures;
}

// stitch one chunk, growing its border while a variant fails (at most kMaxBorderGrowth rings)
void stitch_chunk(const LevelSeams& s, ChunkBorder& b, std::vector<std::uint8_t>& removed, SeamPiece& pc) {
    for (int grow = 0;; ++grow) {
        const std::uint64_t failures = stitch_masks(s, b, removed, pc);
        if (failures == 0 || grow == kMaxBorderGrowth) {
            pc.failures = failures;
            s.lv.failed[b.c] = static_cast<std::uint8_t>(failures);
            return;
        }
        grow_ring(b.tris, b.in_border, s.h.dir.size(), b.in_border);
    }
}

void seam_chunk(const LevelSeams& s, std::uint32_t c, std::vector<std::uint8_t>& removed,
                std::vector<std::uint32_t>& scratch, SeamPiece& pc) {
    ChunkBorder b = chunk_border(s, c);
    if (s.previous && reuse_stitching(*s.previous, s.h, s.lv, s.coarser, b, scratch, pc)) {
        s.lv.same[c] = 1;
    } else {
        stitch_chunk(s, b, removed, pc);
    }
    write_back(b, s.lv);
}

// the pieces in chunk order into the level's stitch buffer
void gather(const std::vector<SeamPiece>& pieces, Level& lv) {
    const std::size_t nc = pieces.size();
    for (std::size_t c = 0; c < nc; ++c) {
        const SeamPiece& pc = pieces[c];
        const std::uint64_t base = lv.stitch.size() / 3;
        for (std::size_t mask = 0; mask < 8; ++mask) lv.stitch_offsets[c * 8 + mask] = base + pc.off[mask];
        lv.stitch.insert(lv.stitch.end(), pc.stitch.begin(), pc.stitch.end());
        lv.stitch_failures += pc.failures;
    }
    lv.stitch_offsets[nc * 8] = lv.stitch.size() / 3;
}

}  // namespace

std::vector<std::size_t> chunk_starts(const std::vector<std::uint32_t>& chunk, std::uint32_t nc) {
    std::vector<std::size_t> start(static_cast<std::size_t>(nc) + 1, chunk.size());
    for (std::size_t t = chunk.size(); t-- > 0;) start[chunk[t]] = t;
    for (std::size_t c = nc; c-- > 0;) start[c] = std::min(start[c], start[c + 1]);
    return start;
}

void write_back(const ChunkBorder& b, Level& lv) {
    std::size_t w = b.t0, ni = 0;
    for (std::uint8_t pass = 0; pass < 2; ++pass)
        for (std::size_t t = 0; t < b.count(); ++t) {
            if (b.in_border[t] != pass) continue;
            for (std::size_t k = 0; k < 3; ++k) lv.triangles[3 * w + k] = b.tris[3 * t + k];
            lv.errors[w] = b.err[t];
            ++w;
            if (pass == 0) ++ni;
        }
    lv.interior[b.c] = static_cast<std::uint32_t>(ni);
}

void make_seams(const Hierarchy& h, const ChunkEdges& edges, const ChunkInfo& chunks, Level& lv,
                const Level* coarser, int threads, bool stitch, const PreviousSeams* previous) {
    const std::uint32_t nc = h.chunks;
    const std::size_t nv = h.dir.size();
    lv.stitch_offsets.assign(static_cast<std::size_t>(nc) * 8 + 1, 0);
    lv.interior.assign(nc, 0);
    lv.same.assign(nc, 0);
    lv.failed.assign(nc, 0);
    const LevelSeams s{h, edges, chunks, lv, coarser, stitch, previous, chunk_starts(lv.chunk, nc)};
    // every chunk on its own (each writes only its own triangles and piece), then the pieces in
    // chunk order
    std::vector<SeamPiece> pieces(nc);
    parallel_for(
        nc, threads,
        [&](std::size_t cb, std::size_t ce) {
            // scratch per thread: all zero between uses
            thread_local std::vector<std::uint8_t> removed;
            if (removed.size() != nv) removed.assign(nv, 0);
            std::vector<std::uint32_t> scratch;
            for (std::size_t c = cb; c < ce; ++c)
                seam_chunk(s, static_cast<std::uint32_t>(c), removed, scratch, pieces[c]);
        },
        1);
    gather(pieces, lv);
}

}  // namespace gm
