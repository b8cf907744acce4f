// levels of detail, chunks, seams and morph targets from one bisection hierarchy, stage by stage:
//   levels.cpp       each level's node set (newest-vertex bisection closure, Mitchell 1989),
//                    verified a posteriori, coarse to fine so the levels nest
//   morph.cpp        morph targets: each vertex's position on the next coarser level
//   chunk_edges.cpp  chunk corners, edges and neighbours, and the chunk edge of each vertex
//   seams.cpp        per chunk and edge mask, the stitched border (stitch.cpp: the holes,
//                    ear_clip.cpp: their triangulation, Meisters 1975)
//   seam_reuse.cpp   after an edit, unchanged chunks take their previous stitching
#include "lod.hpp"

#include <chrono>

#include "chunk_edges.hpp"
#include "levels.hpp"
#include "morph.hpp"
#include "seam_reuse.hpp"
#include "seams.hpp"

namespace gm {

namespace {

using Clock = std::chrono::steady_clock;
double since(Clock::time_point t) { return std::chrono::duration<double>(Clock::now() - t).count(); }

}  // namespace

Status extract_levels(const Field& field, Hierarchy& h, const std::vector<double>& tolerances,
                      int verify_order, int threads, bool stitch, std::vector<Level>& levels,
                      ChunkInfo& chunks, std::string& error, const Hierarchy* previous,
                      const std::vector<const Level*>* previous_levels, const LevelProgress* progress) {
    auto report = [&](const char* stage, std::size_t done, std::size_t total) {
        if (progress && *progress) (*progress)(stage, done, total);
    };
    const std::size_t L = tolerances.size();
    if (L == 0) {
        error = "at least one level is needed";
        return Status::InvalidArgument;
    }
    levels.assign(L, Level{});
    // coarse to fine: each level starts from the coarser one's split set, so levels nest
    std::vector<std::uint8_t> split(h.nodes.size(), 0);
    {
        const auto t0 = Clock::now();
        const LevelLinks links = level_links(h);
        levels[L - 1].seconds += since(t0);  // counted with the coarsest level, cut first
        for (std::size_t li = L; li-- > 0;) {
            const auto t = Clock::now();
            levels[li].tolerance_m = tolerances[li];
            cut_level(field, h, links, verify_order, threads, split, levels[li]);
            levels[li].seconds += since(t);
            report("levels", L - li, L);
        }
    }
    for (std::size_t li = 0; li < L; ++li) {
        const auto t = Clock::now();
        morph_targets(h, li + 1 < L ? &levels[li + 1].present : nullptr, levels[li].morph);
        levels[li].seconds += since(t);
    }
    ChunkEdges edges;
    chunk_topology(h, chunks, edges);
    std::vector<std::uint32_t> to_new;
    const bool reuse = map_previous_vertices(h, previous, previous_levels, L, to_new);
    for (std::size_t li = 0; li < L; ++li) {
        const auto t = Clock::now();
        PreviousSeams prev;
        if (reuse) prev = previous_seams(*previous, *previous_levels, li, to_new, h.chunks);
        make_seams(h, edges, chunks, levels[li], li + 1 < L ? &levels[li + 1] : nullptr, threads, stitch,
                   reuse ? &prev : nullptr);
        levels[li].seconds += since(t);
        report("seams", li + 1, L);
    }
    return Status::Ok;
}

}  // namespace gm
