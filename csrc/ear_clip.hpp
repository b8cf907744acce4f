// ear clipping of a simple polygon (Meisters 1975, "Polygons have ears"), taking the best-shaped
// ear first, with chunk edges kept straight: used to re-triangulate the holes of stitched seams.
#pragma once

#include <cstdint>
#include <vector>

namespace gm {

// where a polygon vertex lies on the chunk boundary: the chunk edges through it (up to six) and,
// per edge, its angle from the edge's first corner. points on one chunk edge are exactly
// collinear in theory but only nearly so in floating point, so collinearity along chunk edges is
// decided from this, not from coordinates.
struct OnEdges {
    std::uint32_t e[6];
    double t[6];
    int n = 0;
    void add(std::uint32_t edge, double at) {
        if (n == 6) return;
        e[n] = edge;
        t[n] = at;
        ++n;
    }
    bool find(std::uint32_t edge, double& at) const {
        for (int i = 0; i < n; ++i)
            if (e[i] == edge) {
                at = t[i];
                return true;
            }
        return false;
    }
};

// triangulates the simple counter-clockwise polygon ids (2d coordinates x, y, chunk-edge places
// on; all of the polygon's size) and appends its ids.size() - 2 triangles (3 ids each) to out.
// no ear has three vertices on one chunk edge or a diagonal along a chunk edge that passes another
// polygon vertex. Returns false when no ear is left (out then holds a partial triangulation).
bool ear_clip(const std::vector<std::uint32_t>& ids, const std::vector<double>& x, const std::vector<double>& y,
              const std::vector<OnEdges>& on, std::vector<std::uint32_t>& out);

}  // namespace gm
