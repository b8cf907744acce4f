// levels of detail, chunks, stitched seams and morph targets from one hierarchy (csrc/lod.hpp)
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <set>
#include <utility>
#include <vector>

#include "distance.hpp"
#include "lod.hpp"
#include "worlds.hpp"

using namespace gmtest;
using gm::Vec3;

namespace {

struct Baked {
    gm::Field field;
    gm::Hierarchy h;
    std::vector<gm::Level> levels;
    gm::ChunkInfo chunks;
};

void bake(Baked& b, double R, const std::vector<Row>& rows, const std::vector<double>& tolerances,
          int chunk_level) {
    make_field(b.field, R, rows);
    gm::RefineOptions o;
    o.tolerance_m = tolerances[0];
    o.min_level = 2 * chunk_level;  // chunks are the nodes at bisection level 2c
    o.tau_cap = tolerances.back();
    o.threads = 2;
    gm::RefineStats st;
    std::string err;
    gm::Status s = gm::build_hierarchy(b.field, o, b.h, st, err);
    INFO(err);
    REQUIRE(s == gm::Status::Ok);
    s = gm::extract_levels(b.field, b.h, tolerances, 3, 2, true, b.levels, b.chunks, err);
    INFO(err);
    REQUIRE(s == gm::Status::Ok);
    REQUIRE(b.levels.size() == tolerances.size());
}

// a small world with a feature of each smooth kind, levels at 1, 2 and 4 m, 80 chunks
const Baked& small_world() {
    static Baked b;
    static bool done = false;
    if (!done) {
        const double R = 1000;
        const Vec3 c = gm::normalize({0.3, 0.5, 0.8}), t = some_tangent(c), s = gm::cross(c, t);
        bake(b, R,
             {hill(along(c, t, R, 300), 40, 80), mesa(along(c, s, R, 300), 25, 120, 60),
              crater(along(c, -1 * t, R, 300), 20, 100, 8, 40),
              ridge(along(c, s, R, -250), along(c, s, R, -500), 15, 50, 0), block(c, 12, 90, 50, 10, 30, 20)},
             {1, 2, 4}, 1);
        done = true;
    }
    return b;
}

// triangles of chunk c in a level (they are grouped by chunk, ascending)
std::pair<std::size_t, std::size_t> chunk_range(const gm::Level& lv, std::uint32_t c) {
    auto lo = std::lower_bound(lv.chunk.begin(), lv.chunk.end(), c);
    auto hi = std::upper_bound(lv.chunk.begin(), lv.chunk.end(), c);
    return {static_cast<std::size_t>(lo - lv.chunk.begin()), static_cast<std::size_t>(hi - lv.chunk.begin())};
}

void append(std::vector<std::uint32_t>& out, const std::uint32_t* tris, std::size_t n) {
    out.insert(out.end(), tris, tris + 3 * n);
}

// chunk c drawn at a level with edge mask m: interior triangles plus the stitched border
// (mask 0: the chunk's triangles as they are)
std::vector<std::uint32_t> variant(const gm::Level& lv, std::uint32_t c, int m) {
    auto [t0, t1] = chunk_range(lv, c);
    std::vector<std::uint32_t> out;
    if (m == 0) {
        append(out, lv.triangles.data() + 3 * t0, t1 - t0);
        return out;
    }
    append(out, lv.triangles.data() + 3 * t0, lv.interior[c]);
    std::uint64_t s0 = lv.stitch_offsets[8 * c + m], s1 = lv.stitch_offsets[8 * c + m + 1];
    append(out, lv.stitch.data() + 3 * s0, s1 - s0);
    return out;
}

}  // namespace

// the sphere is split into 20 * 4^c spherical triangles along a subdivided icosahedron (the
// design); by Euler's formula that subdivision has 30 * 4^c edges and 10 * 4^c + 2 vertices
TEST_CASE("chunk count follows the subdivided icosahedron, 20 * 4^c") {
    for (int c : {0, 1, 2}) {
        Baked b;
        bake(b, 1000, {}, {8}, c);
        const std::size_t n = 20u << (2 * c);
        INFO("chunk level " << c);
        CHECK(b.h.chunks == n);
        REQUIRE(b.chunks.corners.size() == 3 * n);
        std::set<std::uint32_t> corners(b.chunks.corners.begin(), b.chunks.corners.end());
        std::set<std::uint32_t> edges(b.chunks.edge_ids.begin(), b.chunks.edge_ids.end());
        CHECK(corners.size() == 10 * (n / 20) + 2);
        CHECK(edges.size() == 30 * (n / 20));
        // neighbourhood is symmetric and the shared edge has one id on both sides
        for (std::uint32_t k = 0; k < n; ++k) {
            std::set<std::uint32_t> distinct;
            for (int i = 0; i < 3; ++i) {
                std::uint32_t d = b.chunks.neighbors[3 * k + i];
                REQUIRE(d < n);
                distinct.insert(d);
                int back = 0;
                for (int j = 0; j < 3; ++j)
                    if (b.chunks.neighbors[3 * d + j] == k) {
                        ++back;
                        CHECK(b.chunks.edge_ids[3 * d + j] == b.chunks.edge_ids[3 * k + i]);
                    }
                CHECK(back == 1);
            }
            CHECK(distinct.size() == 3);
        }
        // every triangle of the level is in a chunk, and chunks come in ascending order
        CHECK(std::is_sorted(b.levels[0].chunk.begin(), b.levels[0].chunk.end()));
        CHECK(b.levels[0].chunk.back() == n - 1);
    }
}

// docs/lod.md: levels nest (every vertex of a coarser level is a vertex of the finer ones),
// each is a closed conforming surface within its tolerance, and each chunk is a disk
TEST_CASE("levels nest and each is a closed surface within its tolerance") {
    const Baked& b = small_world();
    const std::size_t L = b.levels.size();
    for (std::size_t k = 0; k < L; ++k) {
        const gm::Level& lv = b.levels[k];
        INFO("level " << k);
        CHECK(lv.tolerance_m == 1.0 * (1 << k));
        Topology t = topology(lv.triangles);
        CHECK(t.closed_manifold());
        CHECK(t.euler() == 2);
        CHECK(lv.max_error_m <= lv.tolerance_m);
        for (float e : lv.errors) REQUIRE(e <= lv.tolerance_m);
        CHECK(lv.stitch_failures == 0);
        for (std::uint32_t c = 0; c < b.h.chunks; ++c) {
            Topology tc = topology(variant(lv, c, 0));
            CHECK(tc.euler() == 1);  // a disk
            CHECK(tc.repeated_directed == 0);
        }
        if (k + 1 < L) {
            const gm::Level& coarse = b.levels[k + 1];
            std::size_t missing = 0;
            for (std::size_t v = 0; v < coarse.present.size(); ++v) missing += coarse.present[v] && !lv.present[v];
            CHECK(missing == 0);
            CHECK(coarse.triangles.size() < lv.triangles.size());
        }
    }
}

// docs/lod.md "Seams between levels": chunks at level k next to chunks at level k + 1, each
// level-k chunk drawn with the mask of its coarser neighbours, make one closed surface with no
// crack and no T-junction (every edge in two triangles, opposite ways), whatever the mix; and
// on a masked edge the stitched chunk uses only vertices of the coarser level, the very ids its
// neighbour has there
TEST_CASE("stitched borders meet the coarser neighbour vertex for vertex") {
    const Baked& b = small_world();
    const std::uint32_t nc = b.h.chunks;
    Rng rng(8);
    for (std::size_t k = 0; k + 1 < b.levels.size(); ++k) {
        const gm::Level &fine = b.levels[k], &coarse = b.levels[k + 1];
        // every chunk and mask: a disk whose vertices on masked edges the coarser level has
        for (std::uint32_t c = 0; c < nc; ++c) {
            // vertices of chunk c on each of its edges: those of its unstitched border shared
            // with the neighbour across that edge
            std::vector<std::uint32_t> own = variant(fine, c, 0);
            std::set<std::uint32_t> on_edge[3];
            for (int i = 0; i < 3; ++i) {
                std::vector<std::uint32_t> other = variant(fine, b.chunks.neighbors[3 * c + i], 0);
                std::set<std::uint32_t> theirs(other.begin(), other.end());
                for (std::uint32_t v : own)
                    if (theirs.count(v)) on_edge[i].insert(v);
            }
            for (int m = 1; m < 8; ++m) {
                std::vector<std::uint32_t> tris = variant(fine, c, m);
                Topology t = topology(tris);
                INFO("level " << k << " chunk " << c << " mask " << m);
                CHECK(t.euler() == 1);
                CHECK(t.repeated_directed == 0);
                CHECK(t.degenerate == 0);
                std::size_t foreign = 0;
                for (std::uint32_t v : tris)
                    for (int i = 0; i < 3; ++i)
                        if ((m >> i & 1) && on_edge[i].count(v) && !coarse.present[v]) ++foreign;
                CHECK(foreign == 0);
            }
        }
        // whole spheres mixing the two levels at random
        for (int trial = 0; trial < 6; ++trial) {
            std::vector<std::uint8_t> coarser(nc);
            for (auto& x : coarser) x = static_cast<std::uint8_t>(rng.next() & 1);
            if (trial == 0) std::fill(coarser.begin(), coarser.end(), 0);
            std::vector<std::uint32_t> all;
            for (std::uint32_t c = 0; c < nc; ++c) {
                int mask = 0;
                for (int i = 0; i < 3; ++i)
                    if (coarser[b.chunks.neighbors[3 * c + i]]) mask |= 1 << i;
                std::vector<std::uint32_t> tris = coarser[c] ? variant(coarse, c, 0) : variant(fine, c, mask);
                all.insert(all.end(), tris.begin(), tris.end());
            }
            Topology t = topology(all);
            INFO("level " << k << " trial " << trial);
            CHECK(t.closed_manifold());
            CHECK(t.euler() == 2);
        }
    }
}

// docs/lod.md "Morph targets": a vertex the next coarser level keeps stays where it is; any
// other vertex morphs to a point on the coarser level's triangles of its chunk
TEST_CASE("morph targets lie on the next coarser level") {
    const Baked& b = small_world();
    const double R = b.field.radius();
    for (std::size_t k = 0; k + 1 < b.levels.size(); ++k) {
        const gm::Level &fine = b.levels[k], &coarse = b.levels[k + 1];
        auto morph = [&](std::uint32_t v) {
            return Vec3{fine.morph[3 * v], fine.morph[3 * v + 1], fine.morph[3 * v + 2]};
        };
        std::size_t kept_moved = 0, checked = 0;
        double worst = 0;
        for (std::uint32_t c = 0; c < b.h.chunks; ++c) {
            std::vector<std::uint32_t> mine = variant(fine, c, 0), theirs = variant(coarse, c, 0);
            std::set<std::uint32_t> verts(mine.begin(), mine.end());
            for (std::uint32_t v : verts) {
                Vec3 p = b.h.pos(v), q = morph(v);
                if (coarse.present[v]) {
                    kept_moved += !(same_bits(p.x, q.x) && same_bits(p.y, q.y) && same_bits(p.z, q.z));
                    continue;
                }
                double best = std::numeric_limits<double>::infinity();
                for (std::size_t t = 0; t < theirs.size(); t += 3) {
                    Vec3 a = b.h.pos(theirs[t]), bb = b.h.pos(theirs[t + 1]), cc = b.h.pos(theirs[t + 2]);
                    best = std::min(best, gm::norm(q - gm::closest_on_triangle(q, a, bb, cc)));
                }
                worst = std::max(worst, best);
                ++checked;
            }
        }
        INFO("level " << k << ": farthest morph target " << worst << " m off the coarser level");
        CHECK(kept_moved == 0);
        CHECK(checked > 100);
        CHECK(worst <= 1e-9 * R);
    }
    // the coarsest level morphs to itself
    const gm::Level& last = b.levels.back();
    std::size_t moved = 0;
    for (std::uint32_t v = 0; v < last.present.size(); ++v) {
        if (!last.present[v]) continue;
        Vec3 p = b.h.pos(v);
        moved += !(same_bits(p.x, last.morph[3 * v]) && same_bits(p.y, last.morph[3 * v + 1]) &&
                   same_bits(p.z, last.morph[3 * v + 2]));
    }
    CHECK(moved == 0);
}

TEST_CASE("level extraction refuses an empty tolerance list") {
    Baked b;
    make_field(b.field, 1000, {});
    gm::RefineOptions o;
    o.tolerance_m = 8;
    gm::RefineStats st;
    std::string err;
    REQUIRE(gm::build_hierarchy(b.field, o, b.h, st, err) == gm::Status::Ok);
    CHECK(gm::extract_levels(b.field, b.h, {}, 3, 1, true, b.levels, b.chunks, err) == gm::Status::InvalidArgument);
    CHECK(err.find("at least one level") != std::string::npos);
}
