// adaptive refinement of the icosahedron: a bisection hierarchy that holds every level of detail.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "distance.hpp"
#include "field.hpp"

namespace gm {

constexpr std::uint32_t kNone = 0xFFFFFFFFu;
// verification repairs triangles measured beyond this share of their tolerance: samples are
// dense but the deviation can still peak between them
constexpr double kVerifyMargin = 0.9;
// beside a vertical wall the distance from the mesh to the ground has a kink at the wall's top
// and foot, which a triangle can cross between samples anywhere: its peak lies between them and
// the grid falls short of it by up to about a third (tight/grid at most 1.51 over the triangles
// of examples/pebblemoor.toml at 1 m, 2 m and 4 m measured by tight_deviation, docs/meshing.md).
// a triangle near a wall (near_wall) must measure within the margin divided by this
constexpr double kWallSlack = 1.6;
// a leaf of a level whose tight figure (tight_deviation) is beyond this share of the level's
// tolerance is split as well: the tight figure is what the report publishes
constexpr double kTightLimit = 0.97;
// tight / grid over the triangles of examples/pebblemoor.toml at 1, 2 and 4 m away from walls:
// 1.2 at the 99.9th percentile, 1.24 at most (docs/meshing.md). a leaf whose loose figure times
// this is below the largest tight figure so far is not measured tight (the cost: about 1,800
// leaves of the demo's 819,000 at 0.5 m); a rare leaf beyond the percentile can be missed
constexpr double kGridSlack = 1.2;
// leaves measured tight together (a fixed size: which are measured does not depend on threads)
constexpr std::size_t kTightBatch = 64;

struct Hierarchy;

struct RefineOptions {
    double tolerance_m = 1;  // the finest tolerance the hierarchy must reach
    OffsetMode mode = OffsetMode::Normal;
    std::uint64_t max_triangles = 8000000;
    int threads = 0;    // 0: all hardware threads
    int min_level = 0;  // every triangle above this bisection level is split (chunks: 2c)
    // the coarsest tolerance any level will ask for: critical tolerances above it need not be
    // known exactly, so a triangle's probing stops once it passes (0: the tolerance itself)
    double tau_cap = 0;
    // verify every leaf a posteriori on a barycentric grid of this order and split those found
    // beyond the tolerance (0: no verification)
    int verify_order = 3;
    // called between rounds on the calling thread: (round, leaf triangles so far)
    std::function<void(int, std::uint64_t)> progress;
    // called during verification on the calling thread: (triangles measured, triangles to measure)
    std::function<void(std::uint64_t, std::uint64_t)> verify_progress;
    // incremental rebuild: a hierarchy built before with the same options on a field that differs
    // from this one only inside the `changed` caps. a node of the new hierarchy that has a
    // counterpart there (same place in the tree) and lies clear of every changed cap (its own cap
    // widened to twice its radius plus `changed_margin_m`) takes the counterpart's critical
    // tolerance, midpoint and measurements instead of computing them: the same numbers, since
    // every one depends only on the field near the node. the result is the hierarchy a fresh
    // build would make, bit for bit.
    const Hierarchy* previous = nullptr;
    std::vector<Cap> changed;
    double changed_margin_m = 0;
    // called once on the calling thread when the budget survey has made its estimate (and the
    // budget holds), before the refinement goes on: false stops the build with Status::Stopped
    // (a caller's memory or disk check takes the bake's own estimate instead of a second survey)
    std::function<bool(std::uint64_t)> estimated;
    // estimate only: run the budget survey and stop (stats.estimate), at most survey_cap leaves
    bool survey_only = false;
    std::uint64_t survey_cap = 0;
};

struct RefineStats {
    std::uint64_t estimate = 0;        // triangles predicted by the budget survey
    std::uint64_t tested = 0;          // triangle tests run (each triangle at most once)
    std::uint64_t repaired = 0;        // triangles split because verification found them too far
    std::uint64_t reused = 0;          // triangle tests taken from a previous hierarchy
    int rounds = 0;
    int max_level = 0;
    double refine_seconds = 0;  // probing and splitting
    double verify_seconds = 0;  // a posteriori measurement and repair
    std::uint64_t verify_points = 0;  // field evaluations of the a posteriori measurement
};

// measurements a node keeps besides its first (a node is a leaf of at most about three levels
// whose sampling orders differ)
constexpr int kAltSlots = 2;

// one triangle of the bisection hierarchy
struct Node {
    std::uint32_t v[3];   // v[0] newest vertex; refinement edge (base) is v[1]-v[2]
    std::uint32_t nb[3];  // neighbour across the edge opposite v[i] (among the finest leaves)
    std::uint32_t child = kNone;   // children at child, child + 1
    std::uint32_t parent = kNone;
    std::uint32_t pair = kNone;    // the node bisected together with this one (same new vertex)
    std::uint32_t chunk = kNone;   // ancestor at the chunk level, numbered in node order
    std::uint32_t list_off = 0, list_cnt = 0;  // candidate features in the pool
    std::uint8_t level = 0;
    std::uint8_t tested = 0;
    std::uint8_t err_order = 0;  // the sampling order err was measured at (see sampling_order)
    // more measurements at other sampling orders (0: none), for a node that is a leaf of levels
    // whose verification spacings differ; slot k's deviation is max(alt_m2s[k], alt_s2m[k])
    std::uint8_t alt_order[kAltSlots] = {};
    double mid_r = NAN;  // R + H at the base midpoint once known
    // critical tolerance: the probes and feature seeding want this node split at every
    // tolerance below tau (0: never)
    double tau = 0;
    float err = -1, m2s = 0, s2m = 0;  // measured deviation once verified (-1: not yet)
    // the part of tau set by feature seeding and walls (not by probes): the budget survey
    // follows it down to the finest tolerance, since it does not shrink with the node's area
    float tau_fine = 0;
    float alt_m2s[kAltSlots] = {}, alt_s2m[kAltSlots] = {};
    // the tight figures once measured (tight_deviation; -1: not yet), for the leaves that can
    // hold a level's largest deviation
    float tight_m2s = -1, tight_s2m = -1;
};

// the whole bisection hierarchy; every level of detail is a set of its nodes
struct Hierarchy {
    double radius = 1;
    std::vector<Vec3> dir;                // unit direction per vertex
    std::vector<double> rad;              // R + H per vertex
    std::vector<std::uint32_t> vparent;   // 2 per vertex: the edge it bisects (kNone: corner)
    std::vector<Node> nodes;
    std::vector<std::uint32_t> pool;      // candidate feature lists
    std::uint32_t chunks = 0;
    int min_level = 0;  // the chunk level: every node above it is split
    double tolerance = 0;  // the finest tolerance the hierarchy was built for
    // after an incremental rebuild: per node and per vertex, its counterpart in the previous
    // hierarchy (kNone: new there); empty after a fresh build
    std::vector<std::uint32_t> origin, vorigin;
    Vec3 pos(std::uint32_t v) const { return rad[v] * dir[v]; }
};

struct Mesh {
    std::vector<double> positions;     // 3 per vertex, metres
    std::vector<double> directions;    // 3 per vertex, unit
    std::vector<std::uint32_t> triangles;  // 3 per triangle, counter-clockwise seen from outside
    std::vector<std::uint8_t> levels;  // bisection level per triangle
    std::vector<float> errors;         // measured deviation per triangle (m), when verified
};

// the leaf triangles a hierarchy at this tolerance will need, from the budget survey (refinement
// to 4x the tolerance, see refine.cpp): stated within 1.5x of the real count. the survey stops at
// survey_cap leaves and extrapolates from there (an estimate of at least that many). 0 on bad
// arguments.
std::uint64_t estimate_triangles(const Field& field, double tolerance_m, OffsetMode mode, int min_level,
                                 std::uint64_t survey_cap, int threads);

// build the hierarchy down to options.tolerance_m (probes, seeding, closure, verification)
Status build_hierarchy(const Field& field, const RefineOptions& options, Hierarchy& h,
                       RefineStats& stats, std::string& error);

// the finest leaves of a hierarchy as a mesh
void leaves_mesh(const Hierarchy& h, Mesh& out);

// build and take the finest leaves in one call
Status refine(const Field& field, const RefineOptions& options, Mesh& out, RefineStats& stats,
              std::string& error);

// the base icosahedron: 12 unit vertices, 20 outward counter-clockwise faces
void icosahedron(std::vector<Vec3>& vertices, std::vector<std::uint32_t>& faces);

// run fn(begin, end) over [0, n) in blocks of `block` on up to `threads` threads (0: hardware
// threads)
void parallel_for(std::size_t n, int threads, const std::function<void(std::size_t, std::size_t)>& fn,
                  std::size_t block = 256);

// verification sample spacing for a tolerance: a quarter of the shortest noise wavelength whose
// amplitude is over a quarter of the tolerance (0: no bound)
double verify_spacing(const Field& field, double tolerance_m);

// incremental rebuild after an edit from `before` to `after` (same radius): the caps for
// RefineOptions::changed and the margin for changed_margin_m. The edited features are those
// outside the longest runs the two feature lists share at their start and at their end (so
// changing, inserting or removing one feature names that one only); their reach before and
// after is changed. When the verification spacing at `tolerance_m` or the presence of vertical
// walls differs, every node's numbers change: the whole sphere is.
void edit_caps(const Field& before, const Field& after, double tolerance_m, std::vector<Cap>& caps,
               double& margin_m);

// a node's footprint cap and the size floor shared by refinement and level extraction
Cap node_cap(const Hierarchy& h, const Node& t);
bool at_floor(const Hierarchy& h, const Node& t, double tolerance_m);

// is a vertical wall near the triangle (a wall point within 1.5 times its bounding radius of its
// centroid, Field::wall_distance)? a function of the corners and the field alone
bool near_wall(const Field& field, Vec3 V0, Vec3 V1, Vec3 V2);

// the largest measured deviation verification accepts for node t at tolerance_m (beyond it the
// node is split unless at the size floor): kVerifyMargin of it, divided by kWallSlack near a wall
double verify_limit(const Field& field, const Hierarchy& h, const Node& t, double tolerance_m);

// node t's tight figures (tight_deviation at the verification spacing of the hierarchy's own
// tolerance; surface -> mesh not searched beside a wall), measured once and kept in the node:
// a function of the node's corners and the field alone
void tight_of(const Field& field, const Hierarchy& h, Node& t);

// the leaves (node ids) that can hold the largest deviation, given each one's loose figure (the
// verification grid's), measured by tight_of: by decreasing loose figure times kGridSlack
// (kWallSlack beside a wall), in batches of kTightBatch, until no leaf left could pass the
// largest tight figure so far. tight[i] marks the measured ones; returns the largest.
double publish_tight(const Field& field, Hierarchy& h, const std::vector<std::uint32_t>& leaves,
                     const std::vector<float>& loose, int threads, std::vector<std::uint8_t>& tight);

}  // namespace gm
