// the whole bake of one world: hierarchy, levels, chunks, seams, skirts, morph targets, vertex
// attributes, colliders, measured errors and per-stage times, in one result that Python (numpy
// views) and the C ABI (pointers and copy-outs) both read. nothing is computed outside the core.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "field.hpp"
#include "lod.hpp"
#include "refine.hpp"

namespace gm {

// a posteriori verification: a barycentric grid of this order on every triangle
// ((k+1)(k+2)/2 samples), exact projection onto the surface
constexpr int kMeasureOrder = 4;
// critical tolerances are computed exactly up to this many times the coarsest tolerance asked
// for, so a raised collider tolerance still finds them
constexpr double kTauHeadroom = 8.0;
// the guaranteed smallest angle of any triangle of directions: newest-vertex bisection keeps
// three planar shape classes with angles >= 30 degrees (Mitchell 1989); projecting the first,
// large triangles onto the sphere bends that to 24.6
constexpr double kMinAngleDeg = 24.0;
// the smallest triangle angle the collider angle pass aims for (collider_angles.cpp); the report's
// collision.min_angle_deg is what it reached
constexpr double kColliderMinAngleDeg = 12.0;
// colliders default to this many times the finest render tolerance
constexpr double kColliderToleranceFactor = 4.0;
// skirts default to hanging this many times the coarsest level's tolerance
constexpr double kSkirtDepthFactor = 2.0;
// the layer index of a vertex no layer rule holds, and its grey (linear RGB)
constexpr std::uint8_t kNoLayer = 255;
constexpr double kNoLayerGrey = 0.5;
constexpr std::size_t kMaxLayers = 255;

// one material layer rule: the first rule whose closed slope and altitude bands hold a vertex
struct LayerRule {
    double slope_deg[2] = {0.0, 90.0};
    double altitude_m[2] = {-1e300, 1e300};
    double color[3] = {kNoLayerGrey, kNoLayerGrey, kNoLayerGrey};  // linear RGB
};

// every setting of a bake, as the spec and the caller's overrides resolve them
struct BakeSettings {
    double radius_m = 0;
    double tolerance_m = 0;  // level 0
    int offset = 1;          // OffsetMode: 0 radial, 1 normal, 2 exact
    int levels = 4;          // tolerance of level k: tolerance_m * ratio^k
    double ratio = 2.0;
    int chunk_level = 1;  // 20 * 4^chunk_level chunks
    std::uint64_t max_triangles = 8000000;
    bool stitch = true;        // stitched seams; false: skirts
    double skirt_depth_m = 0;  // 0: kSkirtDepthFactor x the coarsest tolerance
    bool collision = true;
    double collision_tolerance_m = 0;  // 0: kColliderToleranceFactor x tolerance_m
    bool collision_centered = true;    // bias: the collider straddles the true surface
    std::uint64_t collider_cap = 65535;  // triangles per chunk collider
    double collider_min_angle_deg = kColliderMinAngleDeg;  // 0: no angle pass
    std::vector<LayerRule> layers;
    int threads = 0;  // 0: every hardware thread; the result does not depend on it
    // keep a bake whose level or collider measures beyond its tolerance (default: it fails with
    // Status::ToleranceMissed, naming the level and the figures)
    bool accept_over_tolerance = false;
    // called on the calling thread as the bake goes: (stage, done, total) with stage one of the
    // kStage* names, in order: refine (leaf triangles of about an estimate), verify (triangles
    // measured), levels and seams (levels done), chunks (levels whose chunk buffers are made),
    // colliders (steps done of colliders.hpp's kColliderSteps: cut, angles, bias, angles, measure)
    std::function<void(const char*, std::uint64_t, std::uint64_t)> progress;
    // called once on the calling thread with the budget survey's triangle estimate, before the
    // refinement goes on; false stops the bake (Status::Stopped). Edits never call it.
    std::function<bool(std::uint64_t)> on_estimate;
};

// the stages progress reports, in order
extern const char* const kStageRefine;
extern const char* const kStageVerify;
extern const char* const kStageLevels;
extern const char* const kStageSeams;
extern const char* const kStageChunks;
extern const char* const kStageColliders;

// check every setting against its allowed range; the message names the setting and the range
Status check_settings(const BakeSettings& s, std::string& error);

// the ranges of the level table's settings alone (check_settings applies the same): levels,
// ratio and chunk_level, each checked only when given (a null pointer: not given). The command
// line and the farm check their overrides with it before any work.
Status check_lod(const int* levels, const double* ratio, const int* chunk_level, std::string& error);

// features too thin to mesh within `tolerance_m`: a feature of amplitude A above the tolerance
// needs triangles of about scale * sqrt(tolerance / A) at its peak, and refinement stops at
// triangles tolerance / 8 across (refine.cpp, at_floor), so a feature whose scale is below
// (tolerance / 8) * sqrt(A / tolerance) would be missed. The message names the feature, its size
// and the smallest size allowed at this tolerance. (Noise is sampled by its wavelengths instead.)
Status check_feature_sizes(const Field& field, double tolerance_m, std::string& error);

// what the settings make of a bake: level tolerances (finest first), the collider tolerance
// asked for, the finest tolerance the hierarchy must reach, and the skirt depth (0: stitched)
struct BakePlan {
    std::vector<double> tolerances;
    double collider_m = 0;
    double finest_m = 0;
    double tau_cap_m = 0;
    double skirt_depth_m = 0;
};
BakePlan plan_bake(const BakeSettings& s);

// one chunk at one level with its own vertex buffer: the chunk's surface vertices (ascending
// pool ids, LevelResult::vertex_ids) then its skirt vertices. shared between the results of an
// edit session while it does not change.
struct ChunkMesh {
    std::uint32_t surface_vertices = 0;  // skirt vertices follow these
    std::vector<double> positions;       // 3 per vertex, metres
    std::vector<double> normals;         // 3 per vertex, unit, analytic (skirt: its top's)
    std::vector<double> morph;           // 3 per vertex: position on the next coarser level
    std::vector<double> slope_deg, altitude_m;  // 1 per vertex (skirt: its top's)
    std::vector<std::uint8_t> layer;            // 1 per vertex (kNoLayer: no rule holds it)
    std::vector<double> color;                  // 3 per vertex, linear RGB
    std::vector<std::uint32_t> triangles;       // 3 per triangle, local, counter-clockwise
    std::uint32_t interior = 0;  // the first `interior` triangles never change, the rest are the border
    // stitched borders: the triangles for edge mask k (1..7) are stitched[3*off[k] .. 3*off[k+1])
    std::vector<std::uint32_t> stitched;
    std::uint64_t stitch_offsets[9] = {};
    std::vector<std::uint32_t> skirt;  // 3 per triangle, local (empty when stitched)
    std::size_t vertex_count() const { return slope_deg.size(); }
};

struct LevelResult {
    Level mesh;  // the whole level (global vertex ids): triangles, errors, morph, present, seams
    std::uint64_t vertex_count = 0;
    // per chunk: its surface vertices' pool ids at vertex_ids[vertex_offsets[c] .. [c+1])
    std::vector<std::uint64_t> vertex_offsets;
    std::vector<std::uint32_t> vertex_ids;
    std::vector<std::shared_ptr<const ChunkMesh>> chunks;
    double seconds = 0;  // this level's closure, verification, seams and chunk buffers
};

struct Collider {
    std::vector<double> positions;         // 3 per vertex
    std::vector<std::uint32_t> triangles;  // 3 per triangle, local
};

struct ColliderResult {
    bool made = false;
    double requested_tolerance_m = 0;  // as asked
    double tolerance_m = 0;            // raised until every chunk fits collider_cap
    std::uint64_t triangles = 0, max_triangles_per_chunk = 0, degenerate_triangles = 0;
    double max_error_m = 0, mesh_to_surface_m = 0, surface_to_mesh_m = 0;
    double min_angle_deg = 0;
    double min_angle_target_deg = 0;  // what the angle pass aimed for (0: no pass)
    std::uint64_t angle_collapses = 0, angle_flips = 0, angle_inserts = 0, angle_stuck = 0;
    std::uint64_t tight_triangles = 0;  // triangles whose figure was searched out (measure_collider)
    double seconds = 0;
    std::vector<std::shared_ptr<const Collider>> chunks;
};

struct StageSeconds {
    double refine = 0, verify = 0, attributes = 0, levels = 0, colliders = 0, total = 0;
};

// field evaluations per stage (points and point x feature terms; see EvalTally)
struct StageEvaluations {
    EvalTally hierarchy, attributes, levels, colliders, total;
};

struct BakeResult {
    BakeSettings settings;  // progress cleared
    BakePlan plan;
    // the vertex pool: every level's vertices, per vertex
    std::vector<double> positions, directions, normals;  // 3 each
    std::vector<double> slope_deg, altitude_m;
    std::vector<std::uint8_t> layer;
    std::vector<double> color;  // 3 each
    std::vector<std::uint32_t> vertex_parents;  // 2 each: the edge a vertex bisects (kNone: corner)
    std::vector<LevelResult> levels;            // finest first
    ChunkInfo chunks;
    std::uint32_t chunk_count = 0;
    ColliderResult colliders;
    RefineStats stats;
    StageSeconds seconds;
    StageEvaluations evaluations;
};

// the previous state of an edit session, for an incremental bake
struct BakeState {
    Hierarchy hierarchy;
    std::vector<Level> levels;  // as extracted, before chunk buffers were cut
};
struct Incremental {
    const BakeState* previous = nullptr;
    const BakeResult* previous_result = nullptr;
    std::vector<Cap> changed;  // where the ground may differ from the previous bake's
    double margin_m = 0;
};

// bake `field` with `settings`. with `inc`, a rebuild of a previous bake whose ground differs only
// inside inc->changed: the same bytes as a fresh bake, reusing what the edit did not touch
// (unchanged chunks share their ChunkMesh with the previous result). `state` (optional) receives
// what a later incremental bake needs.
Status bake(const Field& field, const BakeSettings& settings, BakeResult& out, std::string& error,
            const Incremental* inc = nullptr, BakeState* state = nullptr);

// do two chunk meshes hold the same arrays? (what an engine would upload)
bool same_chunk(const ChunkMesh& a, const ChunkMesh& b);
bool same_collider(const Collider& a, const Collider& b);

}  // namespace gm
