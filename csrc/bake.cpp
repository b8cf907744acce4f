// the whole bake, stage by stage: hierarchy, vertex attributes, levels, chunk buffers, colliders.
#include "bake.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>

#include "attributes.hpp"
#include "chunks.hpp"
#include "colliders.hpp"
#include "json.hpp"

namespace gm {

const char* const kStageRefine = "refine";
const char* const kStageVerify = "verify";
const char* const kStageLevels = "levels";
const char* const kStageSeams = "seams";
const char* const kStageChunks = "chunks";
const char* const kStageColliders = "colliders";

namespace {

using Clock = std::chrono::steady_clock;
double since(Clock::time_point t) { return std::chrono::duration<double>(Clock::now() - t).count(); }

// this thread's field evaluations since `before` (parallel_for adds its workers' to it)
EvalTally since(const EvalTally& before) {
    return {eval_tally().points - before.points, eval_tally().terms - before.terms};
}

std::string num(double x) { return format_number(x); }

bool finite_positive(double x) { return std::isfinite(x) && x > 0; }

}  // namespace

Status check_lod(const int* levels, const double* ratio, const int* chunk_level, std::string& error) {
    auto bad = [&](const std::string& m) {
        error = m;
        return Status::InvalidArgument;
    };
    if (levels && (*levels < 1 || *levels > 12))
        return bad("levels: must be an integer in 1..12, got " + std::to_string(*levels));
    if (ratio && !(*ratio > 1 && *ratio <= 16)) return bad("ratio: must be > 1 and <= 16, got " + num(*ratio));
    if (chunk_level && (*chunk_level < 0 || *chunk_level > 5))
        return bad("chunk_level: must be an integer in 0..5, got " + std::to_string(*chunk_level));
    return Status::Ok;
}

Status check_settings(const BakeSettings& s, std::string& error) {
    auto bad = [&](const std::string& m) {
        error = m;
        return Status::InvalidArgument;
    };
    if (!finite_positive(s.radius_m)) return bad("radius_m: must be a finite number > 0, got " + num(s.radius_m));
    if (!std::isfinite(s.tolerance_m) || !(s.tolerance_m > 0 && s.tolerance_m <= s.radius_m / 10))
        return bad("tolerance_m: must be > 0 and <= radius_m/10 = " + num(s.radius_m / 10) + ", got " +
                   num(s.tolerance_m));
    if (s.offset < 0 || s.offset > 2)
        return bad("offset: must be 0 (radial), 1 (normal) or 2 (exact), got " + std::to_string(s.offset));
    if (s.threads < 0 || s.threads > 1024)
        return bad("threads: must be an integer in 0..1024 (0 = all cores), got " + std::to_string(s.threads));
    if (check_lod(&s.levels, &s.ratio, &s.chunk_level, error) != Status::Ok) return Status::InvalidArgument;
    if (s.max_triangles < 1)
        return bad("max_triangles: must be an integer >= 1, got " + std::to_string(s.max_triangles));
    const std::uint64_t chunks = 20ull << (2 * s.chunk_level);
    if (chunks > s.max_triangles)
        return bad("chunk_level: " + std::to_string(s.chunk_level) + " makes " + std::to_string(chunks) +
                   " chunks, more than max_triangles=" + std::to_string(s.max_triangles));
    if (!std::isfinite(s.skirt_depth_m) || s.skirt_depth_m < 0)
        return bad("lod.skirt_depth_m: must be a finite number >= 0 (0 = twice the coarsest tolerance), got " +
                   num(s.skirt_depth_m));
    if (!std::isfinite(s.collision_tolerance_m) || s.collision_tolerance_m < 0)
        return bad("collision.tolerance_m: must be a finite number >= 0 (0 = 4 x tolerance_m), got " +
                   num(s.collision_tolerance_m));
    if (s.collider_cap < 1)
        return bad("collision.max_triangles_per_chunk: must be an integer >= 1, got " +
                   std::to_string(s.collider_cap));
    if (!std::isfinite(s.collider_min_angle_deg) || s.collider_min_angle_deg < 0 || s.collider_min_angle_deg > 60)
        return bad("collider_min_angle_deg: must be a number from 0 to 60 (0 = no angle pass), got " +
                   num(s.collider_min_angle_deg));
    if (s.layers.size() > kMaxLayers)
        return bad("layers: at most " + std::to_string(kMaxLayers) +
                   " layer rules fit the 8-bit layer attribute, got " + std::to_string(s.layers.size()));
    return Status::Ok;
}

Status check_feature_sizes(const Field& field, double tol, std::string& error) {
    for (std::size_t i = 0; i < field.size(); ++i) {
        const Feature& f = field.feature(i);
        if (f.kind == Kind::Noise || !(f.amp_m > tol)) continue;
        double smallest = (tol / 8) * std::sqrt(f.amp_m / tol);
        if (f.scale_m >= smallest) continue;
        // quoted rounded up to three significant digits: a size that passes
        const double unit = std::pow(10.0, std::floor(std::log10(smallest)) - 2);
        smallest = std::ceil(smallest / unit) * unit;
        static const char* const kSize[] = {"sigma_m", "radius_m", "min(half_x_m, half_y_m)",
                                            "min(radius_m, rim_width_m)", "half_width_m", ""};
        char quoted[32];
        std::snprintf(quoted, sizeof quoted, "%.3g", smallest);
        // max, min and set can change the ground by more than their own height (Field::amp_m)
        const std::string what = f.blend == Blend::Add ? "a feature " + num(f.amp_m) + " m tall"
                                                       : "a feature that can change the ground by " + num(f.amp_m) +
                                                             " m (its blend can undo the features beneath it)";
        error = "features[" + std::to_string(i) + "]: too thin to mesh at tolerance " + num(tol) + " m: its " +
                kSize[static_cast<int>(f.kind)] + " is " + num(f.scale_m) + " m; at this tolerance " + what +
                " needs at least " + quoted +
                " m (tolerance/8 x sqrt(amplitude/tolerance)); widen it, lower it, or raise tolerance_m";
        return Status::InvalidArgument;
    }
    return Status::Ok;
}

BakePlan plan_bake(const BakeSettings& s) {
    BakePlan p;
    p.tolerances.resize(static_cast<std::size_t>(s.levels));
    for (int k = 0; k < s.levels; ++k)
        p.tolerances[static_cast<std::size_t>(k)] = s.tolerance_m * std::pow(s.ratio, static_cast<double>(k));
    p.collider_m = s.collision_tolerance_m > 0 ? s.collision_tolerance_m : kColliderToleranceFactor * s.tolerance_m;
    p.finest_m = std::min(s.tolerance_m, p.collider_m);
    p.tau_cap_m = kTauHeadroom * std::max(p.tolerances.back(), p.collider_m);
    if (!s.stitch) p.skirt_depth_m = s.skirt_depth_m > 0 ? s.skirt_depth_m : kSkirtDepthFactor * p.tolerances.back();
    return p;
}

bool same_chunk(const ChunkMesh& a, const ChunkMesh& b) {
    return a.surface_vertices == b.surface_vertices && a.interior == b.interior && a.positions == b.positions &&
           a.normals == b.normals && a.morph == b.morph && a.slope_deg == b.slope_deg &&
           a.altitude_m == b.altitude_m && a.layer == b.layer && a.color == b.color &&
           a.triangles == b.triangles && a.stitched == b.stitched &&
           std::equal(a.stitch_offsets, a.stitch_offsets + 9, b.stitch_offsets) && a.skirt == b.skirt;
}

bool same_collider(const Collider& a, const Collider& b) {
    return a.positions == b.positions && a.triangles == b.triangles;
}

namespace {

// the vertex pool: positions, directions and every attribute. after an edit, a vertex that was
// there before and lies clear of the changed caps takes its previous attributes (they depend only
// on the ground at its direction, which did not change)
void make_pool(const Field& field, const Hierarchy& h, const Incremental* inc, BakeResult& r) {
    const std::size_t nv = h.dir.size();
    r.positions.resize(3 * nv);
    r.directions.resize(3 * nv);
    for (std::size_t v = 0; v < nv; ++v) {
        const Vec3 p = h.pos(static_cast<std::uint32_t>(v));
        const Vec3 d = h.dir[v];
        r.positions[3 * v] = p.x, r.positions[3 * v + 1] = p.y, r.positions[3 * v + 2] = p.z;
        r.directions[3 * v] = d.x, r.directions[3 * v + 1] = d.y, r.directions[3 * v + 2] = d.z;
    }
    r.vertex_parents = h.vparent;
    r.normals.resize(3 * nv);
    r.slope_deg.resize(nv);
    r.altitude_m.resize(nv);
    std::vector<std::uint32_t> fresh;
    const BakeResult* prev = inc ? inc->previous_result : nullptr;
    if (prev && h.vorigin.size() == nv) {
        // a metre of ground more than each cap, against rounding in the test
        const double slack = 1.0 / field.radius();
        bool all = false;
        std::vector<double> cap_cos;
        for (const Cap& c : inc->changed) {
            if (c.angle + slack >= 3.14159265358979323846) all = true;
            cap_cos.push_back(std::cos(c.angle + slack));
        }
        for (std::size_t v = 0; v < nv; ++v) {
            const std::uint32_t o = h.vorigin[v];
            bool known = !all && o != kNone;
            for (std::size_t i = 0; known && i < cap_cos.size(); ++i)
                known = dot(h.dir[v], inc->changed[i].c) < cap_cos[i];
            if (!known) {
                fresh.push_back(static_cast<std::uint32_t>(v));
                continue;
            }
            for (std::size_t k = 0; k < 3; ++k) r.normals[3 * v + k] = prev->normals[3 * o + k];
            r.slope_deg[v] = prev->slope_deg[o];
            r.altitude_m[v] = prev->altitude_m[o];
        }
    } else {
        fresh.resize(nv);
        for (std::size_t v = 0; v < nv; ++v) fresh[v] = static_cast<std::uint32_t>(v);
    }
    if (fresh.size() == nv) {
        surface_attributes(field, r.directions.data(), nv, r.settings.threads, r.normals.data(),
                           r.slope_deg.data(), r.altitude_m.data());
    } else if (!fresh.empty()) {
        const std::size_t n = fresh.size();
        std::vector<double> d(3 * n), nrm(3 * n), sl(n), al(n);
        for (std::size_t i = 0; i < n; ++i)
            for (std::size_t k = 0; k < 3; ++k) d[3 * i + k] = r.directions[3 * fresh[i] + k];
        surface_attributes(field, d.data(), n, r.settings.threads, nrm.data(), sl.data(), al.data());
        for (std::size_t i = 0; i < n; ++i) {
            const std::size_t v = fresh[i];
            for (std::size_t k = 0; k < 3; ++k) r.normals[3 * v + k] = nrm[3 * i + k];
            r.slope_deg[v] = sl[i];
            r.altitude_m[v] = al[i];
        }
    }
    r.layer.resize(nv);
    r.color.resize(3 * nv);
    assign_layers(r.settings.layers, r.slope_deg.data(), r.altitude_m.data(), nv, r.layer.data(), r.color.data());
}

// may chunk c of level k keep the previous result's buffers? the levels say its triangles,
// positions, morph targets and borders map one to one; its vertices' attributes must too
bool reusable(const BakeResult& r, const Hierarchy& h, const BakeResult& prev, std::size_t k, std::uint32_t c,
              const std::uint32_t* ids, std::size_t n) {
    const LevelResult& pl = prev.levels[k];
    if (pl.chunks.size() <= c || !pl.chunks[c] || pl.chunks[c]->surface_vertices != n) return false;
    for (std::size_t i = 0; i < n; ++i) {
        const std::size_t v = ids[i], o = h.vorigin[v];
        if (o == kNone || o != pl.vertex_ids[pl.vertex_offsets[c] + i]) return false;
        for (std::size_t q = 0; q < 3; ++q)
            if (r.normals[3 * v + q] != prev.normals[3 * o + q] || r.color[3 * v + q] != prev.color[3 * o + q])
                return false;
        if (r.slope_deg[v] != prev.slope_deg[o] || r.altitude_m[v] != prev.altitude_m[o] ||
            r.layer[v] != prev.layer[o])
            return false;
    }
    return true;
}

}  // namespace

Status bake(const Field& field, const BakeSettings& settings, BakeResult& r, std::string& error,
            const Incremental* inc, BakeState* state) {
    const auto t_start = Clock::now();
    const EvalTally e_start = eval_tally();
    Status st = check_settings(settings, error);
    if (st != Status::Ok) return st;
    if (field.radius() != settings.radius_m) {
        error = "radius_m: the field's radius " + num(field.radius()) + " differs from the settings' " +
                num(settings.radius_m);
        return Status::InvalidArgument;
    }
    BakePlan plan0 = plan_bake(settings);
    st = check_feature_sizes(field, plan0.finest_m, error);
    if (st != Status::Ok) return st;
    r = BakeResult{};
    r.settings = settings;
    r.settings.progress = nullptr;
    r.settings.on_estimate = nullptr;
    r.plan = std::move(plan0);
    const BakePlan& plan = r.plan;
    auto progress = [&](const char* stage, std::uint64_t done, std::uint64_t total) {
        if (settings.progress) settings.progress(stage, done, total);
    };

    // 1. the hierarchy
    RefineOptions ro;
    ro.tolerance_m = plan.finest_m;
    ro.mode = static_cast<OffsetMode>(settings.offset);
    ro.max_triangles = settings.max_triangles;
    ro.threads = settings.threads;
    ro.verify_order = kMeasureOrder;
    ro.min_level = 2 * settings.chunk_level;
    ro.tau_cap = plan.tau_cap_m;
    // the total is the budget survey's estimate once the survey is done
    if (settings.progress)
    {
        ro.progress = [&](int, std::uint64_t leaves) { progress(kStageRefine, leaves, std::max(r.stats.estimate, leaves)); };
        ro.verify_progress = [&](std::uint64_t done, std::uint64_t total) { progress(kStageVerify, done, total); };
    }
    const Hierarchy* previous = inc && inc->previous ? &inc->previous->hierarchy : nullptr;
    if (settings.on_estimate && !previous) ro.estimated = settings.on_estimate;
    if (previous) {
        ro.previous = previous;
        ro.changed = inc->changed;
        ro.changed_margin_m = inc->margin_m;
    }
    Hierarchy local;
    Hierarchy& h = state ? state->hierarchy : local;
    h = Hierarchy{};
    EvalTally ev = eval_tally();
    st = build_hierarchy(field, ro, h, r.stats, error);
    if (st != Status::Ok) return st;
    r.evaluations.hierarchy = since(ev);
    r.seconds.refine = r.stats.refine_seconds;
    r.seconds.verify = r.stats.verify_seconds;
    r.chunk_count = h.chunks;

    // 2. the vertex pool and its attributes
    auto t = Clock::now();
    ev = eval_tally();
    make_pool(field, h, previous ? inc : nullptr, r);
    r.seconds.attributes = since(t);
    r.evaluations.attributes = since(ev);

    // 3. levels, morph targets and seams
    t = Clock::now();
    ev = eval_tally();
    progress(kStageLevels, 0, plan.tolerances.size());
    const BakeResult* prev = previous ? inc->previous_result : nullptr;
    std::vector<const Level*> prev_levels;
    if (prev)
        for (const LevelResult& pl : prev->levels) prev_levels.push_back(&pl.mesh);
    std::vector<Level> levels;
    const LevelProgress level_progress = [&](const char* stage, std::uint64_t done, std::uint64_t total) {
        progress(std::string(stage) == "seams" ? kStageSeams : kStageLevels, done, total);
    };
    st = extract_levels(field, h, plan.tolerances, kMeasureOrder, settings.threads, settings.stitch, levels, r.chunks,
                        error, prev ? previous : nullptr, prev && prev_levels.size() == plan.tolerances.size() ? &prev_levels : nullptr,
                        settings.progress ? &level_progress : nullptr);
    if (st != Status::Ok) return st;

    // 4. per-chunk buffers, level by level (chunks in parallel; each writes only its own)
    const std::uint32_t nc = r.chunk_count;
    r.levels.resize(levels.size());
    for (std::size_t k = 0; k < levels.size(); ++k) {
        const auto t_chunks = Clock::now();
        LevelResult& L = r.levels[k];
        L.mesh = std::move(levels[k]);
        for (std::uint8_t p : L.mesh.present) L.vertex_count += p;
        chunk_vertex_ids(L.mesh, nc, L.vertex_offsets, L.vertex_ids);
        L.chunks.assign(nc, nullptr);
        std::vector<std::uint8_t> ok(nc, 1);
        parallel_for(
            nc, settings.threads,
            [&](std::size_t b, std::size_t e) {
                for (std::size_t c = b; c < e; ++c) {
                    const std::uint32_t* ids = L.vertex_ids.data() + L.vertex_offsets[c];
                    const std::size_t n = L.vertex_offsets[c + 1] - L.vertex_offsets[c];
                    const std::uint32_t ci = static_cast<std::uint32_t>(c);
                    if (prev && k < prev->levels.size() && L.mesh.same.size() == nc && L.mesh.same[c] &&
                        reusable(r, h, *prev, k, ci, ids, n)) {
                        L.chunks[c] = prev->levels[k].chunks[c];
                        continue;
                    }
                    auto m = std::make_shared<ChunkMesh>();
                    ok[c] = make_chunk(r, L.mesh, ci, ids, n, plan.skirt_depth_m, *m) ? 1 : 0;
                    L.chunks[c] = std::move(m);
                }
            },
            1);
        if (std::find(ok.begin(), ok.end(), 0) != ok.end()) {
            error = "internal: a stitched border uses a vertex outside its chunk";
            return Status::Internal;
        }
        L.seconds = L.mesh.seconds + since(t_chunks);
        progress(kStageChunks, k + 1, levels.size());
    }
    r.seconds.levels = since(t);
    r.evaluations.levels = since(ev);

    // 5. colliders
    if (settings.collision) {
        progress(kStageColliders, 0, kColliderSteps);
        ev = eval_tally();
        st = make_colliders(field, h, r, error, [&](std::uint64_t k, std::uint64_t n) { progress(kStageColliders, k, n); });
        if (st != Status::Ok) return st;
        r.evaluations.colliders = since(ev);
        r.seconds.colliders = r.colliders.seconds;
    }
    r.seconds.total = since(t_start);
    r.evaluations.total = since(e_start);
    if (!settings.accept_over_tolerance) {
        auto missed = [&](const std::string& what, double measured, double tol) {
            error = what + " measures " + num(measured) + " m from the true surface, beyond its tolerance " + num(tol) +
                    " m (refinement reached its size floor there); raise the tolerance, soften the feature, "
                    "or accept it explicitly (accept_over_tolerance)";
            return Status::ToleranceMissed;
        };
        for (std::size_t k = 0; k < r.levels.size(); ++k) {
            const Level& lv = r.levels[k].mesh;
            if (lv.max_error_m > lv.tolerance_m) return missed("level " + std::to_string(k), lv.max_error_m, lv.tolerance_m);
        }
        if (r.colliders.made && r.colliders.max_error_m > r.colliders.tolerance_m)
            return missed("the collider", r.colliders.max_error_m, r.colliders.tolerance_m);
    }
    return Status::Ok;
}

}  // namespace gm
