// incremental reuse of stitched seams: an unchanged chunk takes its previous stitching.
#include "seam_reuse.hpp"

#include <algorithm>

namespace gm {

namespace {

// the chunk's triangles, in its written-back order (interior first, then the border), are the
// previous ones vertex for vertex, with the same interior count
bool same_triangles(const PreviousSeams& p, const Hierarchy& h, const ChunkBorder& b) {
    const Level& ol = *p.level;
    if (ol.failed.size() != p.start.size() - 1 || ol.failed[b.c] != 0 ||
        p.start[b.c + 1] - p.start[b.c] != b.count())
        return false;
    std::size_t o = p.start[b.c], ni = 0;
    for (std::uint8_t pass = 0; pass < 2; ++pass)
        for (std::size_t t = 0; t < b.count(); ++t) {
            if (b.in_border[t] != pass) continue;
            for (std::size_t k = 0; k < 3; ++k)
                if (h.vorigin[b.tris[3 * t + k]] != ol.triangles[3 * o + k]) return false;
            ++o;
            if (pass == 0) ++ni;
        }
    return ni == ol.interior[b.c];
}

// the chunk's vertices have the same positions, morph targets and coarser-level membership as
// their previous counterparts, and their ids come in the same order (stitching breaks ties by id)
bool same_vertices(const PreviousSeams& p, const Hierarchy& h, const Level& lv, const Level* coarser,
                   const ChunkBorder& b, std::vector<std::uint32_t>& verts) {
    verts.assign(b.tris.begin(), b.tris.end());
    std::sort(verts.begin(), verts.end());
    verts.erase(std::unique(verts.begin(), verts.end()), verts.end());
    std::uint32_t prev_ov = 0;
    for (std::size_t i = 0; i < verts.size(); ++i) {
        const std::uint32_t v = verts[i], ov = h.vorigin[v];
        if (ov == kNone || (i > 0 && ov <= prev_ov) || h.rad[v] != p.hierarchy->rad[ov]) return false;
        if (coarser && coarser->present[v] != p.coarser->present[ov]) return false;
        for (std::size_t k = 0; k < 3; ++k)
            if (lv.morph[3 * v + k] != p.level->morph[3 * ov + k]) return false;
        prev_ov = ov;
    }
    return true;
}

}  // namespace

bool map_previous_vertices(const Hierarchy& h, const Hierarchy* previous,
                           const std::vector<const Level*>* previous_levels, std::size_t level_count,
                           std::vector<std::uint32_t>& to_new) {
    to_new.clear();
    if (!previous || !previous_levels || previous_levels->size() != level_count || h.vorigin.size() != h.dir.size())
        return false;
    to_new.assign(previous->dir.size(), kNone);
    for (std::uint32_t v = 0; v < h.dir.size(); ++v)
        if (h.vorigin[v] != kNone) to_new[h.vorigin[v]] = v;
    return true;
}

PreviousSeams previous_seams(const Hierarchy& previous, const std::vector<const Level*>& previous_levels,
                             std::size_t li, const std::vector<std::uint32_t>& to_new, std::uint32_t nc) {
    PreviousSeams p;
    p.hierarchy = &previous;
    p.level = previous_levels[li];
    p.coarser = li + 1 < previous_levels.size() ? previous_levels[li + 1] : nullptr;
    p.to_new = &to_new;
    p.start = chunk_starts(p.level->chunk, nc);
    return p;
}

bool reuse_stitching(const PreviousSeams& p, const Hierarchy& h, const Level& lv, const Level* coarser,
                     const ChunkBorder& b, std::vector<std::uint32_t>& scratch, SeamPiece& out) {
    if (!same_triangles(p, h, b) || !same_vertices(p, h, lv, coarser, b, scratch)) return false;
    const Level& ol = *p.level;
    for (std::size_t mask = 0; mask < 8; ++mask) {
        const std::size_t ci = static_cast<std::size_t>(b.c) * 8 + mask;
        out.off[mask] = out.stitch.size() / 3;
        for (std::uint64_t i = 3 * ol.stitch_offsets[ci]; i < 3 * ol.stitch_offsets[ci + 1]; ++i)
            out.stitch.push_back((*p.to_new)[ol.stitch[i]]);
    }
    return true;
}

}  // namespace gm
