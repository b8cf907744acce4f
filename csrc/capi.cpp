// the stable C ABI (include/globemill.h): handles, caller-owned buffers, a status and a message
// for every failure, never an exception across the boundary. Every number comes from the core's
// bake (csrc/bake.cpp) and edit session (csrc/session.cpp), the very code Python's globemill.bake
// and EditSession run: this file maps handles, options and buffers, and computes nothing.
#define GLOBEMILL_BUILDING_LIBRARY 1
#include "include/globemill.h"

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstring>
#include <exception>
#include <memory>
#include <mutex>
#include <new>
#include <string>
#include <vector>

#include "bake.hpp"
#include "field.hpp"
#include "session.hpp"
#include "spec_json.hpp"

struct gm_world {
    gm::SpecData spec;
    gm::Field field;
};

struct gm_bake {
    std::shared_ptr<const gm::BakeResult> r;
};

// an edit session: the core's session, the spec it holds (to refuse edits of other settings),
// the bake handle of its current result and what the last update changed
struct gm_edit {
    gm_bake_options options{};
    gm::SpecData spec;
    gm::EditSession session;
    gm_bake bake;
    std::vector<std::uint32_t> changed;  // (level, chunk) pairs of the last update
    mutable std::mutex lock;
};

namespace {

// ---------------------------------------------------------------------------------------------
// errors

gm_status fail(gm_error* err, gm_status s, const char* msg) noexcept {
    if (err) {
        err->status = s;
        std::size_t n = std::strlen(msg);
        err->truncated = 0;
        if (n >= GM_ERROR_MESSAGE_SIZE) {
            n = GM_ERROR_MESSAGE_SIZE - 1;
            // cut at a character boundary
            while (n > 0 && (static_cast<unsigned char>(msg[n]) & 0xC0) == 0x80) --n;
            err->truncated = 1;
        }
        std::memcpy(err->message, msg, n);
        err->message[n] = '\0';
    }
    return s;
}

gm_status fail(gm_error* err, gm_status s, const std::string& msg) noexcept {
    return fail(err, s, msg.c_str());
}

gm_status ok(gm_error* err) noexcept {
    if (err) {
        err->status = GM_OK;
        err->truncated = 0;
        err->message[0] = '\0';
    }
    return GM_OK;
}

// every entry point runs inside this: no exception crosses the boundary
template <class F>
gm_status guarded(gm_error* err, F&& f) noexcept {
    try {
        return f();
    } catch (const std::bad_alloc&) {
        return fail(err, GM_ERROR_OUT_OF_MEMORY, "out of memory");
    } catch (const std::exception& e) {
        return fail(err, GM_ERROR_INTERNAL, e.what());
    } catch (...) {
        return fail(err, GM_ERROR_INTERNAL, "unknown internal error");
    }
}

gm_status from_core(gm::Status s, const std::string& msg, gm_error* err) {
    switch (s) {
        case gm::Status::Ok:
            return ok(err);
        case gm::Status::BudgetExceeded:
            return fail(err, GM_ERROR_BUDGET, msg);
        case gm::Status::ToleranceMissed:
            return fail(err, GM_ERROR_TOLERANCE, msg);
        case gm::Status::InvalidArgument:
        case gm::Status::NonFinite:
            return fail(err, GM_ERROR_INVALID_ARGUMENT, msg);
        default:
            return fail(err, GM_ERROR_INTERNAL, msg);
    }
}

template <class T>
gm_status copy_out(T* dst, std::size_t cap, const T* src, std::size_t count, gm_error* err,
                   const char* what) {
    if (cap < count)
        return fail(err, GM_ERROR_BUFFER_TOO_SMALL,
                    std::string(what) + ": dst_capacity is " + std::to_string(cap) +
                        ", the call writes " + std::to_string(count) + " elements");
    if (count && !dst) return fail(err, GM_ERROR_INVALID_ARGUMENT, std::string(what) + ": dst is NULL");
    if (count) std::memcpy(dst, src, count * sizeof(T));
    return ok(err);
}

gm_status null_arg(gm_error* err, const char* what) {
    return fail(err, GM_ERROR_INVALID_ARGUMENT, std::string(what) + " is NULL");
}

gm_status level_chunk(const gm_bake* b, std::uint32_t level, std::uint32_t chunk, gm_error* err) {
    if (!b) return null_arg(err, "bake");
    if (level >= b->r->levels.size())
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "level " + std::to_string(level) + " is out of range (the bake has " +
                        std::to_string(b->r->levels.size()) + " levels)");
    if (chunk >= b->r->chunk_count)
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "chunk " + std::to_string(chunk) + " is out of range (the bake has " +
                        std::to_string(b->r->chunk_count) + " chunks)");
    return GM_OK;
}

gm_status level_only(const gm_bake* b, std::uint32_t level, gm_error* err) {
    if (!b) return null_arg(err, "bake");
    if (level >= b->r->levels.size())
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "level " + std::to_string(level) + " is out of range (the bake has " +
                        std::to_string(b->r->levels.size()) + " levels)");
    return GM_OK;
}

std::uint32_t components(std::int32_t which) {
    switch (which) {
        case GM_VERTEX_POSITION:
        case GM_VERTEX_DIRECTION:
        case GM_VERTEX_NORMAL:
        case GM_VERTEX_MORPH:
        case GM_VERTEX_COLOR:
            return 3;
        case GM_VERTEX_SLOPE:
        case GM_VERTEX_ALTITUDE:
            return 1;
        default:
            return 0;
    }
}

// the pool's array for a vertex attribute (nullptr: not a pool attribute)
const std::vector<double>* pool_data(const gm::BakeResult& r, std::int32_t which) {
    switch (which) {
        case GM_VERTEX_POSITION: return &r.positions;
        case GM_VERTEX_DIRECTION: return &r.directions;
        case GM_VERTEX_NORMAL: return &r.normals;
        case GM_VERTEX_SLOPE: return &r.slope_deg;
        case GM_VERTEX_ALTITUDE: return &r.altitude_m;
        case GM_VERTEX_COLOR: return &r.color;
        default: return nullptr;
    }
}

// a chunk's array for a vertex attribute (nullptr: not one)
const std::vector<double>* chunk_data(const gm::ChunkMesh& m, std::int32_t which) {
    switch (which) {
        case GM_VERTEX_POSITION: return &m.positions;
        case GM_VERTEX_NORMAL: return &m.normals;
        case GM_VERTEX_MORPH: return &m.morph;
        case GM_VERTEX_SLOPE: return &m.slope_deg;
        case GM_VERTEX_ALTITUDE: return &m.altitude_m;
        case GM_VERTEX_COLOR: return &m.color;
        default: return nullptr;
    }
}

// height and gradient at any non-zero direction, as Python's globemill.field(spec) evaluates it
double height_at(const gm::Field& f, gm::Vec3 d, gm::Vec3* grad) {
    return f.eval((1.0 / gm::norm(d)) * d, grad);
}

std::vector<gm::LayerRule> layers_of(const gm::SpecData& spec) {
    std::vector<gm::LayerRule> out(spec.layers.size());
    for (std::size_t i = 0; i < out.size(); ++i) {
        const gm::SpecLayer& L = spec.layers[i];
        for (int k = 0; k < 2; ++k) out[i].slope_deg[k] = L.slope_deg[k], out[i].altitude_m[k] = L.altitude_m[k];
        for (int k = 0; k < 3; ++k) out[i].color[k] = L.color[k];
    }
    return out;
}

// the core's settings: the spec's, overridden by the options (0 or -1: the spec's); the core
// checks every range
gm_status settings_of(const gm::SpecData& spec, const gm_bake_options& o, gm::BakeSettings& s, gm_error* err) {
    if (o.collision != 0 && o.collision != 1)
        return fail(err, GM_ERROR_INVALID_ARGUMENT, "collision: must be 0 or 1, got " + std::to_string(o.collision));
    s.radius_m = spec.radius_m;
    s.tolerance_m = o.tolerance_m == 0 ? spec.tolerance_m : o.tolerance_m;
    s.offset = o.offset == -1 ? spec.offset : o.offset;
    s.levels = o.levels == 0 ? spec.levels : o.levels;
    s.ratio = o.ratio == 0 ? spec.ratio : o.ratio;
    s.chunk_level = o.chunk_level == -1 ? spec.chunk_level : o.chunk_level;
    s.max_triangles = o.max_triangles == 0 ? spec.max_triangles : o.max_triangles;
    s.stitch = !spec.skirt;
    s.skirt_depth_m = spec.skirt_depth_m;
    s.collision = o.collision == 1;
    s.collision_tolerance_m = spec.has_collision_tolerance ? spec.collision_tolerance_m : 0.0;
    s.collision_centered = spec.collision_centered;
    s.collider_cap = spec.max_triangles_per_chunk;
    s.threads = o.threads;
    s.accept_over_tolerance = o.accept_over_tolerance != 0;
    s.layers = layers_of(spec);
    if (o.progress) {
        gm_progress_fn fn = o.progress;
        void* user = o.progress_user;
        auto round = std::make_shared<std::int32_t>(0);
        s.progress = [fn, user, round](const char* stage, std::uint64_t done, std::uint64_t) {
            if (std::strcmp(stage, gm::kStageRefine) == 0) fn(user, ++*round, done);
        };
    }
    std::string msg;
    if (gm::check_settings(s, msg) != gm::Status::Ok) return fail(err, GM_ERROR_INVALID_ARGUMENT, msg);
    return GM_OK;
}

gm_status options_of(const gm_bake_options* options, gm_bake_options& o, gm_error* err) {
    gm_bake_options_init(&o);
    if (!options) return GM_OK;
    if (options->struct_size < sizeof(std::uint32_t) || options->struct_size > 4096)
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "options->struct_size must be sizeof(gm_bake_options) (use gm_bake_options_init)");
    // an older, shorter struct keeps the defaults for the members it lacks
    std::memcpy(&o, options, std::min<std::size_t>(options->struct_size, sizeof o));
    o.struct_size = sizeof o;
    return GM_OK;
}

// everything but the features, the layers and the name
bool same_settings(const gm::SpecData& a, const gm::SpecData& b) {
    return a.radius_m == b.radius_m && a.tolerance_m == b.tolerance_m && a.offset == b.offset &&
           a.max_triangles == b.max_triangles && a.levels == b.levels && a.ratio == b.ratio &&
           a.chunk_level == b.chunk_level && a.skirt == b.skirt && a.skirt_depth_m == b.skirt_depth_m &&
           a.has_collision_tolerance == b.has_collision_tolerance &&
           a.collision_tolerance_m == b.collision_tolerance_m &&
           a.collision_centered == b.collision_centered &&
           a.max_triangles_per_chunk == b.max_triangles_per_chunk;
}

const gm::ChunkMesh& chunk_of(const gm_bake* b, std::uint32_t level, std::uint32_t chunk) {
    return *b->r->levels[level].chunks[chunk];
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// the ABI

extern "C" {

GM_API uint32_t gm_version(void) { return GM_VERSION; }

GM_API const char* gm_version_string(void) { return GM_VERSION_STRING; }

GM_API const char* gm_status_name(int32_t status) {
    switch (status) {
        case GM_OK: return "ok";
        case GM_ERROR_INVALID_ARGUMENT: return "invalid argument";
        case GM_ERROR_PARSE: return "malformed spec text";
        case GM_ERROR_SPEC: return "invalid world spec";
        case GM_ERROR_BUDGET: return "triangle budget exceeded";
        case GM_ERROR_BUFFER_TOO_SMALL: return "buffer too small";
        case GM_ERROR_OUT_OF_MEMORY: return "out of memory";
        case GM_ERROR_INTERNAL: return "internal error";
        case GM_ERROR_TOLERANCE: return "tolerance missed";
        default: return "unknown status";
    }
}

namespace {
// a text output (gm_spec_check, gm_world_warnings): the full length without the NUL to *length,
// and as much of the text as fits `capacity` bytes, cut at a character boundary, NUL-terminated
void text_out(char* dst, size_t capacity, size_t* length, const std::string& text) noexcept {
    if (length) *length = text.size();
    if (dst && capacity) {
        std::size_t n = std::min(text.size(), capacity - 1);
        if (n < text.size())
            while (n > 0 && (static_cast<unsigned char>(text[n]) & 0xC0) == 0x80) --n;
        std::memcpy(dst, text.data(), n);
        dst[n] = '\0';
    }
}
}  // namespace

GM_API gm_status gm_spec_check(char* message, size_t message_capacity, size_t* message_length,
                               const char* spec_json, size_t spec_length) {
    gm_status s = guarded(nullptr, [&]() -> gm_status {
        std::string msg;
        gm_status r = GM_OK;
        if (!spec_json) {
            msg = "spec_json is NULL";
            r = GM_ERROR_INVALID_ARGUMENT;
        } else {
            gm::SpecData spec;
            gm::SpecStatus ss = gm::load_spec_json(spec_json, spec_length, gm::SpecLimits{}, spec, msg);
            r = ss == gm::SpecStatus::Ok ? GM_OK : ss == gm::SpecStatus::Malformed ? GM_ERROR_PARSE : GM_ERROR_SPEC;
        }
        text_out(message, message_capacity, message_length, msg);
        return r;
    });
    if (s == GM_ERROR_OUT_OF_MEMORY || s == GM_ERROR_INTERNAL) text_out(message, message_capacity, message_length, "");
    return s;
}

GM_API gm_status gm_world_create(gm_world** world, const char* spec_json, size_t spec_length,
                                 gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!world) return null_arg(err, "world");
        *world = nullptr;
        if (!spec_json) return null_arg(err, "spec_json");
        std::unique_ptr<gm_world> w(new gm_world);
        std::string msg;
        gm::SpecStatus ss = gm::load_spec_json(spec_json, spec_length, gm::SpecLimits{}, w->spec, msg);
        if (ss == gm::SpecStatus::Malformed) return fail(err, GM_ERROR_PARSE, msg);
        if (ss == gm::SpecStatus::Invalid) return fail(err, GM_ERROR_SPEC, msg);
        gm::Status st = w->field.init(w->spec.radius_m, w->spec.features.data(), w->spec.feature_count(), msg);
        if (st != gm::Status::Ok) return fail(err, GM_ERROR_SPEC, "invalid world spec: " + msg);
        *world = w.release();
        return ok(err);
    });
}

GM_API void gm_world_destroy(gm_world* world) { delete world; }

GM_API gm_status gm_world_warnings(char* text, size_t text_capacity, size_t* text_length,
                                   const gm_world* world, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!world) return null_arg(err, "world");
        if (!text && text_capacity) return null_arg(err, "text (with a text_capacity above 0)");
        std::string lines;
        for (const std::string& w : world->spec.warnings) lines += (lines.empty() ? "" : "\n") + w;
        text_out(text, text_capacity, text_length, lines);  // cannot throw: written whole
        return ok(err);
    });
}

GM_API gm_status gm_world_get_info(gm_world_info* info, const gm_world* world, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (!world) return null_arg(err, "world");
        const gm::SpecData& s = world->spec;
        gm_world_info out;
        std::memset(&out, 0, sizeof out);
        out.radius_m = s.radius_m;
        out.tolerance_m = s.tolerance_m;
        out.ratio = s.ratio;
        out.skirt_depth_m = s.skirt_depth_m;
        out.collision_tolerance_m = s.has_collision_tolerance ? s.collision_tolerance_m : 4.0 * s.tolerance_m;
        out.max_triangles = s.max_triangles;
        out.feature_count = static_cast<uint32_t>(s.feature_count());
        out.layer_count = static_cast<uint32_t>(s.layers.size());
        out.levels = static_cast<uint32_t>(s.levels);
        out.chunk_level = static_cast<uint32_t>(s.chunk_level);
        out.chunk_count = 20u << (2 * s.chunk_level);
        out.collision_max_triangles_per_chunk = static_cast<uint32_t>(s.max_triangles_per_chunk);
        out.offset = s.offset;
        out.seams = s.skirt ? 1 : 0;
        out.collision_bias = s.collision_centered ? 1 : 0;
        std::memcpy(out.name, s.name.data(), std::min(s.name.size(), sizeof out.name - 1));
        *info = out;
        return ok(err);
    });
}

GM_API gm_status gm_world_features(double* dst, size_t dst_capacity, const gm_world* world,
                                   gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!world) return null_arg(err, "world");
        return copy_out(dst, dst_capacity, world->spec.features.data(), world->spec.features.size(), err,
                        "gm_world_features");
    });
}

namespace {
gm_status eval_many(double* out, size_t cap, const gm_world* world, const double* d, size_t count,
                    bool grad, gm_error* err) {
    if (!world) return null_arg(err, "world");
    const std::size_t need = grad ? 3 * count : count;
    if (count && !d) return null_arg(err, "directions");
    if (cap < need)
        return fail(err, GM_ERROR_BUFFER_TOO_SMALL,
                    std::string(grad ? "gm_world_gradient" : "gm_world_height") + ": capacity is " +
                        std::to_string(cap) + ", the call writes " + std::to_string(need) + " elements");
    if (need && !out) return null_arg(err, "dst");
    for (std::size_t i = 0; i < count; ++i) {
        gm::Vec3 v{d[3 * i], d[3 * i + 1], d[3 * i + 2]};
        const double l = gm::norm(v);
        if (!std::isfinite(l) || !(l > 0))
            return fail(err, GM_ERROR_INVALID_ARGUMENT,
                        "directions[" + std::to_string(i) + "] must be a finite non-zero vector");
    }
    for (std::size_t i = 0; i < count; ++i) {
        gm::Vec3 v{d[3 * i], d[3 * i + 1], d[3 * i + 2]};
        if (grad) {
            gm::Vec3 g;
            height_at(world->field, v, &g);
            out[3 * i] = g.x, out[3 * i + 1] = g.y, out[3 * i + 2] = g.z;
        } else {
            out[i] = height_at(world->field, v, nullptr);
        }
    }
    return ok(err);
}
}  // namespace

GM_API gm_status gm_world_height(double* heights, size_t heights_capacity, const gm_world* world,
                                 const double* directions, size_t count, gm_error* err) {
    return guarded(err, [&] { return eval_many(heights, heights_capacity, world, directions, count, false, err); });
}

GM_API gm_status gm_world_gradient(double* gradients, size_t gradients_capacity,
                                   const gm_world* world, const double* directions, size_t count,
                                   gm_error* err) {
    return guarded(err, [&] { return eval_many(gradients, gradients_capacity, world, directions, count, true, err); });
}

GM_API void gm_bake_options_init(gm_bake_options* options) {
    if (!options) return;
    std::memset(options, 0, sizeof *options);
    options->struct_size = sizeof(gm_bake_options);
    options->chunk_level = -1;
    options->offset = -1;
    options->collision = 1;
}

GM_API gm_status gm_bake_create(gm_bake** out, const gm_world* world,
                                const gm_bake_options* options, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!out) return null_arg(err, "bake");
        *out = nullptr;
        if (!world) return null_arg(err, "world");
        gm_bake_options o;
        if (gm_status s = options_of(options, o, err)) return s;
        gm::BakeSettings settings;
        if (gm_status s = settings_of(world->spec, o, settings, err)) return s;
        auto r = std::make_shared<gm::BakeResult>();
        std::string msg;
        const gm::Status st = gm::bake(world->field, settings, *r, msg);
        if (st != gm::Status::Ok) return from_core(st, msg, err);
        *out = new gm_bake{std::move(r)};
        return ok(err);
    });
}

GM_API void gm_bake_destroy(gm_bake* bake) { delete bake; }

GM_API gm_status gm_bake_get_info(gm_bake_info* info, const gm_bake* b, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (!b) return null_arg(err, "bake");
        const gm::BakeResult& r = *b->r;
        gm_bake_info out;
        std::memset(&out, 0, sizeof out);
        out.vertex_count = r.slope_deg.size();
        out.level_count = static_cast<uint32_t>(r.levels.size());
        out.chunk_count = r.chunk_count;
        out.seams = r.settings.stitch ? 0 : 1;
        out.has_colliders = r.colliders.made ? 1 : 0;
        out.skirt_depth_m = r.plan.skirt_depth_m;
        out.collision_tolerance_m = r.colliders.tolerance_m;
        out.collision_max_error_m = r.colliders.max_error_m;
        out.collision_triangles = r.colliders.triangles;
        out.collision_max_triangles_per_chunk = r.colliders.max_triangles_per_chunk;
        *info = out;
        return ok(err);
    });
}

GM_API gm_status gm_bake_level_info(gm_level_info* info, const gm_bake* b, uint32_t level,
                                    gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (gm_status s = level_only(b, level, err)) return s;
        const gm::LevelResult& L = b->r->levels[level];
        gm_level_info out;
        std::memset(&out, 0, sizeof out);
        out.tolerance_m = L.mesh.tolerance_m;
        out.max_error_m = L.mesh.max_error_m;
        out.mesh_to_surface_m = L.mesh.mesh_to_surface_m;
        out.surface_to_mesh_m = L.mesh.surface_to_mesh_m;
        out.vertex_count = L.vertex_count;
        out.triangle_count = L.mesh.chunk.size();
        out.repaired = L.mesh.repaired;
        out.stitch_failures = L.mesh.stitch_failures;
        *info = out;
        return ok(err);
    });
}

GM_API uint32_t gm_vertex_data_components(int32_t which) { return components(which); }

GM_API gm_status gm_bake_vertex_data(double* dst, size_t dst_capacity, const gm_bake* b,
                                     int32_t which, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!b) return null_arg(err, "bake");
        if (which == GM_VERTEX_MORPH)
            return fail(err, GM_ERROR_INVALID_ARGUMENT, "GM_VERTEX_MORPH is per level: use gm_bake_level_morph");
        const std::vector<double>* src = pool_data(*b->r, which);
        if (!src) return fail(err, GM_ERROR_INVALID_ARGUMENT, "which: not a gm_vertex_data value, got " + std::to_string(which));
        return copy_out(dst, dst_capacity, src->data(), src->size(), err, "gm_bake_vertex_data");
    });
}

GM_API gm_status gm_bake_vertex_layers(uint8_t* dst, size_t dst_capacity, const gm_bake* b,
                                       gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!b) return null_arg(err, "bake");
        return copy_out(dst, dst_capacity, b->r->layer.data(), b->r->layer.size(), err, "gm_bake_vertex_layers");
    });
}

GM_API gm_status gm_bake_level_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                         uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->r->levels[level].mesh.triangles;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_triangles");
    });
}

GM_API gm_status gm_bake_level_triangle_chunks(uint32_t* dst, size_t dst_capacity,
                                               const gm_bake* b, uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->r->levels[level].mesh.chunk;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_triangle_chunks");
    });
}

GM_API gm_status gm_bake_level_errors(float* dst, size_t dst_capacity, const gm_bake* b,
                                      uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->r->levels[level].mesh.errors;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_errors");
    });
}

GM_API gm_status gm_bake_level_morph(double* dst, size_t dst_capacity, const gm_bake* b,
                                     uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->r->levels[level].mesh.morph;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_morph");
    });
}

GM_API gm_status gm_bake_level_present(uint8_t* dst, size_t dst_capacity, const gm_bake* b,
                                       uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->r->levels[level].mesh.present;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_present");
    });
}

GM_API gm_status gm_chunk_get_info(gm_chunk_info* info, const gm_bake* b, uint32_t level,
                                   uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const gm::ChunkMesh& cm = chunk_of(b, level, chunk);
        gm_chunk_info out;
        std::memset(&out, 0, sizeof out);
        out.vertex_count = cm.vertex_count();
        out.surface_vertex_count = cm.surface_vertices;
        out.triangle_count = cm.triangles.size() / 3;
        out.interior_count = cm.interior;
        out.skirt_triangle_count = cm.skirt.size() / 3;
        for (int m = 1; m < 8; ++m) out.stitched_triangle_count[m] = cm.stitch_offsets[m + 1] - cm.stitch_offsets[m];
        for (std::uint32_t i = 0; i < 3; ++i) {
            out.neighbors[i] = b->r->chunks.neighbors[3 * chunk + i];
            out.corners[i] = b->r->chunks.corners[3 * chunk + i];
        }
        *info = out;
        return ok(err);
    });
}

GM_API gm_status gm_chunk_vertex_ids(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                     uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const gm::LevelResult& L = b->r->levels[level];
        const std::size_t a = L.vertex_offsets[chunk], e = L.vertex_offsets[chunk + 1];
        return copy_out(dst, dst_capacity, L.vertex_ids.data() + a, e - a, err, "gm_chunk_vertex_ids");
    });
}

GM_API gm_status gm_chunk_vertex_data(double* dst, size_t dst_capacity, const gm_bake* b,
                                      uint32_t level, uint32_t chunk, int32_t which,
                                      gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const std::vector<double>* src = chunk_data(chunk_of(b, level, chunk), which);
        if (!src) return fail(err, GM_ERROR_INVALID_ARGUMENT, "which: not a per-chunk gm_vertex_data value, got " + std::to_string(which));
        return copy_out(dst, dst_capacity, src->data(), src->size(), err, "gm_chunk_vertex_data");
    });
}

GM_API gm_status gm_chunk_vertex_layers(uint8_t* dst, size_t dst_capacity, const gm_bake* b,
                                        uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const auto& v = chunk_of(b, level, chunk).layer;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_vertex_layers");
    });
}

GM_API gm_status gm_chunk_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                    uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const auto& v = chunk_of(b, level, chunk).triangles;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_triangles");
    });
}

GM_API gm_status gm_chunk_stitched(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                   uint32_t level, uint32_t chunk, uint32_t mask, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        if (mask < 1 || mask > 7)
            return fail(err, GM_ERROR_INVALID_ARGUMENT, "mask must be in 1..7, got " + std::to_string(mask));
        const gm::ChunkMesh& cm = chunk_of(b, level, chunk);
        const std::uint64_t a = cm.stitch_offsets[mask], e = cm.stitch_offsets[mask + 1];
        return copy_out(dst, dst_capacity, cm.stitched.data() + 3 * a, static_cast<std::size_t>(3 * (e - a)), err,
                        "gm_chunk_stitched");
    });
}

GM_API gm_status gm_chunk_skirt(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const auto& v = chunk_of(b, level, chunk).skirt;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_skirt");
    });
}

namespace {
gm_status collider_of(const gm_bake* b, uint32_t chunk, gm_error* err) {
    if (!b) return null_arg(err, "bake");
    if (!b->r->colliders.made)
        return fail(err, GM_ERROR_INVALID_ARGUMENT, "the bake has no colliders (made with options.collision = 0)");
    if (chunk >= b->r->chunk_count)
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "chunk " + std::to_string(chunk) + " is out of range (the bake has " +
                        std::to_string(b->r->chunk_count) + " chunks)");
    return GM_OK;
}
}  // namespace

GM_API gm_status gm_collider_counts(uint64_t* vertex_count, uint64_t* triangle_count,
                                    const gm_bake* b, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = collider_of(b, chunk, err)) return s;
        const gm::Collider& c = *b->r->colliders.chunks[chunk];
        if (vertex_count) *vertex_count = c.positions.size() / 3;
        if (triangle_count) *triangle_count = c.triangles.size() / 3;
        return ok(err);
    });
}

GM_API gm_status gm_collider_positions(double* dst, size_t dst_capacity, const gm_bake* b,
                                       uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = collider_of(b, chunk, err)) return s;
        const auto& v = b->r->colliders.chunks[chunk]->positions;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_collider_positions");
    });
}

GM_API gm_status gm_collider_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                       uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = collider_of(b, chunk, err)) return s;
        const auto& v = b->r->colliders.chunks[chunk]->triangles;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_collider_triangles");
    });
}

// ---------------------------------------------------------------------------------------------
// live editing: the core's session; every call on one session serialises on its lock

GM_API gm_status gm_edit_create(gm_edit** out, const gm_world* world, const gm_bake_options* options,
                                gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!out) return null_arg(err, "edit");
        *out = nullptr;
        if (!world) return null_arg(err, "world");
        std::unique_ptr<gm_edit> e(new gm_edit);
        if (gm_status s = options_of(options, e->options, err)) return s;
        gm::BakeSettings settings;
        if (gm_status s = settings_of(world->spec, e->options, settings, err)) return s;
        e->options.progress = nullptr;  // only the first bake calls it
        std::string msg;
        const gm::Status st = e->session.start(world->field, settings, msg);
        if (st != gm::Status::Ok) return from_core(st, msg, err);
        e->spec = world->spec;
        e->bake.r = e->session.result();
        *out = e.release();
        return ok(err);
    });
}

GM_API void gm_edit_destroy(gm_edit* edit) { delete edit; }

GM_API gm_status gm_edit_update(gm_edit* e, const gm_world* world, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!e) return null_arg(err, "edit");
        if (!world) return null_arg(err, "world");
        std::lock_guard<std::mutex> g(e->lock);
        if (!same_settings(e->spec, world->spec))
            return fail(err, GM_ERROR_INVALID_ARGUMENT,
                        "world: only features, layers and name may differ from the session's spec "
                        "(radius_m, tolerance_m, offset, max_triangles, lod and collision must match)");
        gm::EditChanges changes;
        std::string msg;
        const gm::Status st = e->session.update(world->field, layers_of(world->spec), changes, msg);
        if (st != gm::Status::Ok) return from_core(st, msg, err);  // the session stays as it was
        std::vector<std::uint32_t> changed;
        for (const auto& p : changes.chunks) changed.insert(changed.end(), {p.first, p.second});
        for (std::uint32_t c : changes.colliders) changed.insert(changed.end(), {GM_COLLIDER_LEVEL, c});
        e->spec = world->spec;
        e->bake.r = e->session.result();
        e->changed = std::move(changed);
        return ok(err);
    });
}

GM_API const gm_bake* gm_edit_bake(const gm_edit* edit) {
    if (!edit) return nullptr;
    std::lock_guard<std::mutex> g(edit->lock);
    return &edit->bake;
}

GM_API gm_status gm_edit_changed_count(uint64_t* count, const gm_edit* edit, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!count) return null_arg(err, "count");
        if (!edit) return null_arg(err, "edit");
        std::lock_guard<std::mutex> g(edit->lock);
        *count = edit->changed.size() / 2;
        return ok(err);
    });
}

GM_API gm_status gm_edit_changed(uint32_t* dst, size_t dst_capacity, const gm_edit* edit, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!edit) return null_arg(err, "edit");
        std::lock_guard<std::mutex> g(edit->lock);
        return copy_out(dst, dst_capacity, edit->changed.data(), edit->changed.size(), err, "changed");
    });
}

}  // extern "C"
