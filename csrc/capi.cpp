// the stable C ABI (include/globemill.h): handles, caller-owned buffers, a status and a message
// for every failure, never an exception across the boundary. Baking runs the same core calls with
// the same defaults and the same arithmetic as src/globemill/bake.py (and attributes.py), so the
// arrays equal the Python API's bit for bit.
#define GLOBEMILL_BUILDING_LIBRARY 1
#include "include/globemill.h"

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstring>
#include <exception>
#include <memory>
#include <new>
#include <string>
#include <unordered_map>
#include <vector>

#include "field.hpp"
#include "lod.hpp"
#include "measure.hpp"
#include "refine.hpp"
#include "spec_json.hpp"

struct gm_world {
    gm::SpecData spec;
    gm::Field field;
};

namespace {

constexpr double kPi = 3.14159265358979323846;
// bake.py: verification order, critical-tolerance headroom
constexpr int kMeasureOrder = 4;
constexpr double kTauHeadroom = 8.0;
constexpr double kNoLayerColor = 0.5;

struct ChunkMesh {
    std::vector<std::uint32_t> ids;   // pool ids, ascending
    std::vector<std::uint32_t> tris;  // local, 3 per triangle
    std::uint64_t interior = 0;
    std::vector<std::uint32_t> stitched;    // local, every mask's triangles in mask order
    std::uint64_t stitch_off[9] = {};       // triangle offset of each mask 0..7 (+ end)
    std::vector<std::uint32_t> skirt;       // local
    std::vector<std::uint32_t> skirt_src;   // per skirt vertex: local index of its boundary vertex
    std::vector<double> skirt_pos, skirt_morph;  // 3 per skirt vertex
    std::size_t vertex_count() const { return ids.size() + skirt_src.size(); }
};

struct LevelOut {
    gm::Level lv;
    std::vector<ChunkMesh> chunks;
    std::uint64_t present_count = 0;
};

struct ColliderOut {
    std::vector<double> pos;
    std::vector<std::uint32_t> tris;
};

}  // namespace

struct gm_bake {
    double radius = 0;
    bool layers_ok = true;  // at most 255 layer rules
    std::vector<double> pos, dir, nrm, slope, alt, color;
    std::vector<std::uint8_t> layer;
    std::vector<LevelOut> levels;
    gm::ChunkInfo chunks;
    std::uint32_t nchunks = 0;
    bool skirt = false;
    double skirt_depth = 0;
    bool has_colliders = false;
    double col_tol = 0, col_err = 0;
    std::uint64_t col_tris = 0, col_max = 0;
    std::vector<ColliderOut> colliders;
};

// what an edit session keeps between updates: the options, the hierarchy and the levels as
// extracted (for the incremental rebuild), the spec and its field (to find what an update
// changed) and the current bake
struct gm_edit {
    gm_bake_options options{};
    gm::SpecData spec;
    gm::Field field;  // the spec's terrain field
    gm::Hierarchy h;
    std::vector<gm::Level> levels;
    std::unique_ptr<gm_bake> bake;
    std::vector<std::uint32_t> changed;  // (level, chunk) pairs of the last update
};

namespace {

// an incremental bake: the previous session state, the caps that changed, and where to keep the
// new hierarchy and levels for the next one
struct Incremental {
    const gm::Hierarchy* previous = nullptr;
    const std::vector<gm::Level>* previous_levels = nullptr;
    std::vector<gm::Cap> changed;
    double margin_m = 0;
    gm::Hierarchy* keep_h = nullptr;
    std::vector<gm::Level>* keep_levels = nullptr;
};

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
    if (level >= b->levels.size())
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "level " + std::to_string(level) + " is out of range (the bake has " +
                        std::to_string(b->levels.size()) + " levels)");
    if (chunk >= b->nchunks)
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "chunk " + std::to_string(chunk) + " is out of range (the bake has " +
                        std::to_string(b->nchunks) + " chunks)");
    return GM_OK;
}

gm_status level_only(const gm_bake* b, std::uint32_t level, gm_error* err) {
    if (!b) return null_arg(err, "bake");
    if (level >= b->levels.size())
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "level " + std::to_string(level) + " is out of range (the bake has " +
                        std::to_string(b->levels.size()) + " levels)");
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

const std::vector<double>* pool_data(const gm_bake* b, std::int32_t which) {
    switch (which) {
        case GM_VERTEX_POSITION: return &b->pos;
        case GM_VERTEX_DIRECTION: return &b->dir;
        case GM_VERTEX_NORMAL: return &b->nrm;
        case GM_VERTEX_SLOPE: return &b->slope;
        case GM_VERTEX_ALTITUDE: return &b->alt;
        case GM_VERTEX_COLOR: return &b->color;
        default: return nullptr;
    }
}

gm_status layers_check(const gm_bake* b, gm_error* err) {
    if (!b->layers_ok)
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "layers: at most 255 layer rules fit the 8-bit layer attribute");
    return GM_OK;
}

// ---------------------------------------------------------------------------------------------
// baking, step by step as bake.py

std::size_t lower(const std::vector<std::uint32_t>& ids, std::uint32_t v, bool& found) {
    auto it = std::lower_bound(ids.begin(), ids.end(), v);
    found = it != ids.end() && *it == v;
    return static_cast<std::size_t>(it - ids.begin());
}

// np.unique of a run of indices, and the run in local indices (np.searchsorted)
bool localise(const std::uint32_t* t, std::size_t n, std::vector<std::uint32_t>& ids,
              std::vector<std::uint32_t>& local) {
    ids.assign(t, t + n);
    std::sort(ids.begin(), ids.end());
    ids.erase(std::unique(ids.begin(), ids.end()), ids.end());
    local.resize(n);
    for (std::size_t i = 0; i < n; ++i) {
        bool found;
        local[i] = static_cast<std::uint32_t>(lower(ids, t[i], found));
        if (!found) return false;
    }
    return true;
}

double norm3(const double* p) { return std::sqrt((p[0] * p[0] + p[1] * p[1]) + p[2] * p[2]); }

// bake._add_skirt: every boundary edge of the chunk gets a quad hanging `depth` metres down
void add_skirt(ChunkMesh& cm, const gm_bake& b, const std::vector<double>& morph, double depth) {
    const std::size_t T = cm.tris.size() / 3;
    std::vector<std::uint32_t> ea, eb;
    ea.reserve(3 * T);
    eb.reserve(3 * T);
    static const int pairs[3][2] = {{0, 1}, {1, 2}, {2, 0}};
    for (const auto& pr : pairs)
        for (std::size_t t = 0; t < T; ++t) {
            ea.push_back(cm.tris[3 * t + static_cast<std::size_t>(pr[0])]);
            eb.push_back(cm.tris[3 * t + static_cast<std::size_t>(pr[1])]);
        }
    std::unordered_map<std::uint64_t, std::uint32_t> count;
    auto key = [&](std::size_t i) {
        return (static_cast<std::uint64_t>(std::min(ea[i], eb[i])) << 32) | std::max(ea[i], eb[i]);
    };
    for (std::size_t i = 0; i < ea.size(); ++i) ++count[key(i)];
    std::vector<std::uint32_t> ba, bb, verts;
    for (std::size_t i = 0; i < ea.size(); ++i)
        if (count[key(i)] == 1) {
            ba.push_back(ea[i]);
            bb.push_back(eb[i]);
        }
    if (ba.empty()) return;
    verts = ba;
    verts.insert(verts.end(), bb.begin(), bb.end());
    std::sort(verts.begin(), verts.end());
    verts.erase(std::unique(verts.begin(), verts.end()), verts.end());
    const std::uint32_t n = static_cast<std::uint32_t>(cm.ids.size());
    auto low = [&](std::uint32_t v) {
        bool found;
        return n + static_cast<std::uint32_t>(lower(verts, v, found));
    };
    cm.skirt_src = verts;
    for (std::uint32_t v : verts) {
        const double* p = &b.pos[3 * static_cast<std::size_t>(cm.ids[v])];
        const double r = norm3(p);
        for (int k = 0; k < 3; ++k) cm.skirt_pos.push_back(p[k] * (r - depth) / r);
        const double* m = &morph[3 * static_cast<std::size_t>(cm.ids[v])];
        const double rm = norm3(m);
        for (int k = 0; k < 3; ++k) cm.skirt_morph.push_back(m[k] * (rm - depth) / rm);
    }
    for (std::size_t i = 0; i < ba.size(); ++i)
        cm.skirt.insert(cm.skirt.end(), {bb[i], ba[i], low(ba[i])});
    for (std::size_t i = 0; i < ba.size(); ++i)
        cm.skirt.insert(cm.skirt.end(), {bb[i], low(ba[i]), low(bb[i])});
}

// the core's height / gradient at a direction as PyField does it: normalised by (1 / |d|) d
double core_height(const gm::Field& f, gm::Vec3 d, gm::Vec3* grad) {
    const double l = gm::norm(d);
    const gm::Vec3 u = (1.0 / l) * d;
    return f.eval(u, grad);
}

// bake._bias_vertices: move each collider vertex along its direction by half the mean signed
// gap at the centroid and edge midpoints of its triangles, clipped to `limit`
std::vector<double> bias_vertices(const gm::Field& f, const std::vector<double>& V,
                                  const std::vector<std::uint32_t>& tris, double limit,
                                  int threads) {
    const std::size_t T = tris.size() / 3, NV = V.size() / 3;
    const double R = f.radius();
    std::vector<double> gap(T);
    gm::parallel_for(T, threads, [&](std::size_t b, std::size_t e) {
        for (std::size_t t = b; t < e; ++t) {
            const double* p[3];
            for (int k = 0; k < 3; ++k) p[k] = &V[3 * static_cast<std::size_t>(tris[3 * t + static_cast<std::size_t>(k)])];
            double s[4][3];
            for (int c = 0; c < 3; ++c) {
                s[0][c] = ((p[0][c] + p[1][c]) + p[2][c]) / 3;  // p.mean(axis=1)
                for (int i = 0; i < 3; ++i) s[1 + i][c] = (p[i][c] + p[(i + 1) % 3][c]) / 2;
            }
            double acc = 0;
            for (int i = 0; i < 4; ++i) {
                const double r = norm3(s[i]);
                const double h = core_height(f, {s[i][0], s[i][1], s[i][2]}, nullptr);
                const double g = (R + h) - r;
                acc = i == 0 ? g : acc + g;
            }
            gap[t] = acc / 4;  // np.mean(gaps, axis=0)
        }
    });
    std::vector<double> acc(NV, 0.0), cnt(NV, 0.0);
    for (int k = 0; k < 3; ++k)  // np.add.at, column by column
        for (std::size_t t = 0; t < T; ++t) {
            acc[tris[3 * t + static_cast<std::size_t>(k)]] += gap[t];
            cnt[tris[3 * t + static_cast<std::size_t>(k)]] += 1;
        }
    std::vector<double> out(V.size());
    for (std::size_t v = 0; v < NV; ++v) {
        double shift = cnt[v] > 0 ? 0.5 * acc[v] / std::max(cnt[v], 1.0) : 0.0;
        shift = std::min(std::max(shift, -limit), limit);  // np.clip
        const double r = norm3(&V[3 * v]);
        const double scale = (r + shift) / r;
        for (int k = 0; k < 3; ++k) out[3 * v + static_cast<std::size_t>(k)] = V[3 * v + static_cast<std::size_t>(k)] * scale;
    }
    return out;
}

std::string fmt_g(double x) { return gm::format_g(x, 6); }

gm_status bake(const gm_world& w, const gm_bake_options& o, gm_bake& b, gm_error* err,
               Incremental* inc = nullptr) {
    const gm::SpecData& spec = w.spec;
    const double R = spec.radius_m;
    // options, as bake.bake and bake._validate_options
    const double tol = o.tolerance_m == 0 ? spec.tolerance_m : o.tolerance_m;
    const int mode = o.offset == -1 ? spec.offset : o.offset;
    const int nlev = o.levels == 0 ? spec.levels : o.levels;
    const double rat = o.ratio == 0 ? spec.ratio : o.ratio;
    const int clev = o.chunk_level == -1 ? spec.chunk_level : o.chunk_level;
    const std::uint64_t budget = o.max_triangles == 0 ? spec.max_triangles : o.max_triangles;
    auto bad = [&](const std::string& m) { return fail(err, GM_ERROR_INVALID_ARGUMENT, m); };
    if (!std::isfinite(tol))
        return bad("tolerance_m: must be a finite number (allowed: > 0 and <= radius_m/10), got " +
                   gm::format_repr(tol));
    if (!(0 < tol && tol <= R / 10))
        return bad("tolerance_m: must be > 0 and <= radius_m/10 = " + fmt_g(R / 10) + ", got " + fmt_g(tol));
    if (mode < 0 || mode > 2)
        return bad("offset: must be one of 0 (radial), 1 (normal), 2 (exact), or -1 for the spec's, got " +
                   std::to_string(o.offset));
    if (o.threads < 0 || o.threads > 1024)
        return bad("threads: must be an integer in 0..1024 (0 = all cores), got " + std::to_string(o.threads));
    if (nlev < 1 || nlev > 12)
        return bad("levels: must be an integer in 1..12 (0 = the spec's), got " + std::to_string(o.levels));
    if (!(1 < rat && rat <= 16))
        return bad("ratio: must be > 1 and <= 16 (0 = the spec's), got " + gm::format_repr(rat));
    if (clev < 0 || clev > 5)
        return bad("chunk_level: must be an integer in 0..5 (-1 = the spec's), got " + std::to_string(o.chunk_level));
    if (o.collision != 0 && o.collision != 1)
        return bad("collision: must be 0 or 1, got " + std::to_string(o.collision));
    const std::uint64_t nchunks = 20ull << (2 * clev);
    if (nchunks > budget)
        return bad("chunk_level: " + std::to_string(clev) + " makes " + std::to_string(nchunks) +
                   " chunks, more than max_triangles=" + std::to_string(budget));
    const int threads = o.threads;
    std::vector<double> tolerances(static_cast<std::size_t>(nlev));
    for (int k = 0; k < nlev; ++k) tolerances[static_cast<std::size_t>(k)] = tol * std::pow(rat, static_cast<double>(k));
    const double col_tol = spec.has_collision_tolerance ? spec.collision_tolerance_m : 4.0 * tol;
    const double finest = std::min(tol, col_tol);

    gm::RefineOptions ro;
    ro.tolerance_m = finest;
    ro.mode = static_cast<gm::OffsetMode>(mode);
    ro.max_triangles = budget;
    ro.threads = threads;
    ro.verify_order = kMeasureOrder;
    ro.min_level = 2 * clev;
    ro.tau_cap = kTauHeadroom * std::max(tolerances.back(), col_tol);
    if (o.progress) {
        gm_progress_fn fn = o.progress;
        void* user = o.progress_user;
        ro.progress = [fn, user](int round, std::uint64_t leaves) { fn(user, round, leaves); };
    }
    if (inc && inc->previous) {
        ro.previous = inc->previous;
        ro.changed = inc->changed;
        ro.changed_margin_m = inc->margin_m;
    }
    gm::Hierarchy h;
    gm::RefineStats stats;
    std::string msg;
    gm::Status st = gm::build_hierarchy(w.field, ro, h, stats, msg);
    if (st != gm::Status::Ok) return from_core(st, msg, err);

    // the vertex pool, normals (field.Field.normals) and attributes (attributes.vertex_attributes)
    const std::size_t NV = h.dir.size();
    b.radius = R;
    b.pos.resize(3 * NV);
    b.dir.resize(3 * NV);
    b.nrm.resize(3 * NV);
    b.slope.resize(NV);
    b.alt.resize(NV);
    for (std::size_t v = 0; v < NV; ++v) {
        const gm::Vec3 p = h.pos(static_cast<std::uint32_t>(v));
        b.pos[3 * v] = p.x, b.pos[3 * v + 1] = p.y, b.pos[3 * v + 2] = p.z;
        b.dir[3 * v] = h.dir[v].x, b.dir[3 * v + 1] = h.dir[v].y, b.dir[3 * v + 2] = h.dir[v].z;
    }
    gm::parallel_for(NV, threads, [&](std::size_t lo, std::size_t hi) {
        for (std::size_t v = lo; v < hi; ++v) {
            const double* d = &b.dir[3 * v];
            const double l = norm3(d);
            const gm::Vec3 u{d[0] / l, d[1] / l, d[2] / l};
            const double hgt = core_height(w.field, u, nullptr);
            gm::Vec3 g;
            core_height(w.field, u, &g);
            const double rh = R + hgt;
            const double n[3] = {u.x - g.x / rh, u.y - g.y / rh, u.z - g.z / rh};
            const double nl = norm3(n);
            for (int k = 0; k < 3; ++k) b.nrm[3 * v + static_cast<std::size_t>(k)] = n[k] / nl;
            const double gl = std::sqrt((g.x * g.x + g.y * g.y) + g.z * g.z);
            b.slope[v] = std::atan2(gl, rh) * (180.0 / kPi);  // np.degrees
            b.alt[v] = hgt;
        }
    });
    b.layers_ok = spec.layers.size() <= 255;
    if (b.layers_ok) {
        b.layer.assign(NV, GM_NO_LAYER);
        b.color.resize(3 * NV);
        for (std::size_t v = 0; v < NV; ++v) {
            const double s = b.slope[v], a = b.alt[v];
            for (std::size_t i = 0; i < spec.layers.size(); ++i) {
                const gm::SpecLayer& L = spec.layers[i];
                if (s >= L.slope_deg[0] && s <= L.slope_deg[1] && a >= L.altitude_m[0] && a <= L.altitude_m[1]) {
                    b.layer[v] = static_cast<std::uint8_t>(i);
                    break;
                }
            }
            for (int k = 0; k < 3; ++k)
                b.color[3 * v + static_cast<std::size_t>(k)] =
                    b.layer[v] == GM_NO_LAYER ? kNoLayerColor : spec.layers[b.layer[v]].color[k];
        }
    }

    // levels, chunks, seams
    b.nchunks = h.chunks;
    b.skirt = spec.skirt;
    b.skirt_depth = spec.skirt ? (spec.skirt_depth_m != 0 ? spec.skirt_depth_m : 2.0 * tolerances.back()) : 0.0;
    std::vector<gm::Level> levels;
    st = gm::extract_levels(w.field, h, tolerances, kMeasureOrder, threads, !spec.skirt, levels, b.chunks, msg,
                            inc ? inc->previous : nullptr, inc ? inc->previous_levels : nullptr);
    if (st != gm::Status::Ok) return from_core(st, msg, err);
    if (inc && inc->keep_levels) *inc->keep_levels = levels;
    b.levels.resize(levels.size());
    for (std::size_t li = 0; li < levels.size(); ++li) {
        LevelOut& L = b.levels[li];
        L.lv = std::move(levels[li]);
        const gm::Level& lv = L.lv;
        for (std::uint8_t p : lv.present) L.present_count += p;
        L.chunks.resize(b.nchunks);
        std::size_t t0 = 0;
        const std::size_t nt = lv.chunk.size();
        for (std::uint32_t c = 0; c < b.nchunks; ++c) {
            std::size_t t1 = t0;
            while (t1 < nt && lv.chunk[t1] == c) ++t1;
            ChunkMesh& cm = L.chunks[c];
            localise(&lv.triangles[3 * t0], 3 * (t1 - t0), cm.ids, cm.tris);
            cm.interior = lv.interior[c];
            for (int mask = 0; mask < 8; ++mask) {
                cm.stitch_off[mask] = cm.stitched.size() / 3;
                if (mask == 0) continue;
                const std::uint64_t a = lv.stitch_offsets[8 * c + static_cast<std::uint32_t>(mask)];
                const std::uint64_t e = lv.stitch_offsets[8 * c + static_cast<std::uint32_t>(mask) + 1];
                for (std::uint64_t k = 3 * a; k < 3 * e; ++k) {
                    bool found;
                    cm.stitched.push_back(static_cast<std::uint32_t>(lower(cm.ids, lv.stitch[k], found)));
                    if (!found)
                        return fail(err, GM_ERROR_INTERNAL, "a stitched border uses a vertex outside its chunk");
                }
            }
            cm.stitch_off[8] = cm.stitched.size() / 3;
            if (spec.skirt) add_skirt(cm, b, lv.morph, b.skirt_depth);
            t0 = t1;
        }
    }

    // colliders, as bake._colliders
    b.has_colliders = o.collision != 0;
    if (b.has_colliders) {
        const std::uint64_t cap = spec.max_triangles_per_chunk;
        const bool centered = spec.collision_centered;
        double ct = col_tol;
        std::vector<gm::Level> cl;
        gm::ChunkInfo ci;
        std::uint64_t most = 0;
        for (;;) {
            cl.clear();
            st = gm::extract_levels(w.field, h, {centered ? ct / 1.5 : ct}, kMeasureOrder, threads, false, cl, ci, msg);
            if (st != gm::Status::Ok) return from_core(st, msg, err);
            std::vector<std::uint64_t> counts(b.nchunks, 0);
            for (std::uint32_t c : cl[0].chunk) ++counts[c];
            most = counts.empty() ? 0 : *std::max_element(counts.begin(), counts.end());
            if (most <= cap) break;
            if (ct > R / 4)
                return fail(err, GM_ERROR_BUDGET,
                            "collision.max_triangles_per_chunk: " + std::to_string(cap) +
                                " cannot be met (a chunk needs " + std::to_string(most) +
                                " triangles even at tolerance " + fmt_g(ct) + " m); raise it or lod.chunk_level");
            ct *= 1.25;
        }
        const gm::Level& lv = cl[0];
        std::vector<double> P = centered ? bias_vertices(w.field, b.pos, lv.triangles, ct / 3, threads) : b.pos;
        gm::Deviation dev = gm::measure(w.field, P.data(), NV, lv.triangles.data(), lv.chunk.size(),
                                        kMeasureOrder, threads, nullptr);
        b.col_tol = ct;
        b.col_err = dev.max_m;
        b.col_tris = lv.chunk.size();
        b.col_max = most;
        b.colliders.resize(b.nchunks);
        std::size_t t0 = 0;
        std::vector<std::uint32_t> ids;
        for (std::uint32_t c = 0; c < b.nchunks; ++c) {
            std::size_t t1 = t0;
            while (t1 < lv.chunk.size() && lv.chunk[t1] == c) ++t1;
            ColliderOut& co = b.colliders[c];
            localise(&lv.triangles[3 * t0], 3 * (t1 - t0), ids, co.tris);
            co.pos.resize(3 * ids.size());
            for (std::size_t i = 0; i < ids.size(); ++i)
                for (int k = 0; k < 3; ++k) co.pos[3 * i + static_cast<std::size_t>(k)] = P[3 * static_cast<std::size_t>(ids[i]) + static_cast<std::size_t>(k)];
            t0 = t1;
        }
    }
    if (inc && inc->keep_h) *inc->keep_h = std::move(h);
    return ok(err);
}

// chunk vertex data: the pool's for surface vertices, then skirt vertices
gm_status chunk_data(double* dst, std::size_t cap, const gm_bake* b, std::uint32_t level,
                     std::uint32_t chunk, std::int32_t which, gm_error* err) {
    const std::uint32_t nc = components(which);
    if (nc == 0) return fail(err, GM_ERROR_INVALID_ARGUMENT, "which: not a gm_vertex_data value, got " + std::to_string(which));
    if (which == GM_VERTEX_COLOR && layers_check(b, err) != GM_OK) return GM_ERROR_INVALID_ARGUMENT;
    const LevelOut& L = b->levels[level];
    const ChunkMesh& cm = L.chunks[chunk];
    const std::size_t n = cm.vertex_count(), count = nc * n;
    if (cap < count)
        return fail(err, GM_ERROR_BUFFER_TOO_SMALL,
                    "gm_chunk_vertex_data: dst_capacity is " + std::to_string(cap) + ", the call writes " +
                        std::to_string(count) + " elements");
    if (count && !dst) return null_arg(err, "dst");
    const std::vector<double>* src = which == GM_VERTEX_MORPH ? &L.lv.morph : pool_data(b, which);
    for (std::size_t i = 0; i < cm.ids.size(); ++i)
        for (std::uint32_t k = 0; k < nc; ++k) dst[nc * i + k] = (*src)[nc * static_cast<std::size_t>(cm.ids[i]) + k];
    for (std::size_t s = 0; s < cm.skirt_src.size(); ++s) {
        const std::size_t i = cm.ids.size() + s;
        for (std::uint32_t k = 0; k < nc; ++k) {
            double x;
            if (which == GM_VERTEX_POSITION) x = cm.skirt_pos[3 * s + k];
            else if (which == GM_VERTEX_MORPH) x = cm.skirt_morph[3 * s + k];
            else x = (*src)[nc * static_cast<std::size_t>(cm.ids[cm.skirt_src[s]]) + k];
            dst[nc * i + k] = x;
        }
    }
    return ok(err);
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
        default: return "unknown status";
    }
}

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
        if (message_length) *message_length = msg.size();
        if (message && message_capacity) {
            std::size_t n = std::min(msg.size(), message_capacity - 1);
            if (n < msg.size())
                while (n > 0 && (static_cast<unsigned char>(msg[n]) & 0xC0) == 0x80) --n;
            std::memcpy(message, msg.data(), n);
            message[n] = '\0';
        }
        return r;
    });
    if (s == GM_ERROR_OUT_OF_MEMORY || s == GM_ERROR_INTERNAL) {
        if (message_length) *message_length = 0;
        if (message && message_capacity) message[0] = '\0';
    }
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
            core_height(world->field, v, &g);
            out[3 * i] = g.x, out[3 * i + 1] = g.y, out[3 * i + 2] = g.z;
        } else {
            out[i] = core_height(world->field, v, nullptr);
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
        gm_bake_options_init(&o);
        if (options) {
            if (options->struct_size < sizeof(std::uint32_t) || options->struct_size > 4096)
                return fail(err, GM_ERROR_INVALID_ARGUMENT,
                            "options->struct_size must be sizeof(gm_bake_options) (use gm_bake_options_init)");
            // an older, shorter struct keeps the defaults for the members it lacks
            std::memcpy(&o, options, std::min<std::size_t>(options->struct_size, sizeof o));
        }
        std::unique_ptr<gm_bake> b(new gm_bake);
        gm_status s = bake(*world, o, *b, err);
        if (s != GM_OK) return s;
        *out = b.release();
        return ok(err);
    });
}

GM_API void gm_bake_destroy(gm_bake* bake) { delete bake; }

GM_API gm_status gm_bake_get_info(gm_bake_info* info, const gm_bake* b, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (!b) return null_arg(err, "bake");
        gm_bake_info out;
        std::memset(&out, 0, sizeof out);
        out.vertex_count = b->dir.size() / 3;
        out.level_count = static_cast<uint32_t>(b->levels.size());
        out.chunk_count = b->nchunks;
        out.seams = b->skirt ? 1 : 0;
        out.has_colliders = b->has_colliders ? 1 : 0;
        out.skirt_depth_m = b->skirt_depth;
        out.collision_tolerance_m = b->col_tol;
        out.collision_max_error_m = b->col_err;
        out.collision_triangles = b->col_tris;
        out.collision_max_triangles_per_chunk = b->col_max;
        *info = out;
        return ok(err);
    });
}

GM_API gm_status gm_bake_level_info(gm_level_info* info, const gm_bake* b, uint32_t level,
                                    gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (gm_status s = level_only(b, level, err)) return s;
        const LevelOut& L = b->levels[level];
        gm_level_info out;
        std::memset(&out, 0, sizeof out);
        out.tolerance_m = L.lv.tolerance_m;
        out.max_error_m = L.lv.max_error_m;
        out.mesh_to_surface_m = L.lv.mesh_to_surface_m;
        out.surface_to_mesh_m = L.lv.surface_to_mesh_m;
        out.vertex_count = L.present_count;
        out.triangle_count = L.lv.chunk.size();
        out.repaired = L.lv.repaired;
        out.stitch_failures = L.lv.stitch_failures;
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
        const std::vector<double>* src = pool_data(b, which);
        if (!src) return fail(err, GM_ERROR_INVALID_ARGUMENT, "which: not a gm_vertex_data value, got " + std::to_string(which));
        if (which == GM_VERTEX_COLOR)
            if (gm_status s = layers_check(b, err)) return s;
        return copy_out(dst, dst_capacity, src->data(), src->size(), err, "gm_bake_vertex_data");
    });
}

GM_API gm_status gm_bake_vertex_layers(uint8_t* dst, size_t dst_capacity, const gm_bake* b,
                                       gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!b) return null_arg(err, "bake");
        if (gm_status s = layers_check(b, err)) return s;
        return copy_out(dst, dst_capacity, b->layer.data(), b->layer.size(), err, "gm_bake_vertex_layers");
    });
}

GM_API gm_status gm_bake_level_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                         uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->levels[level].lv.triangles;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_triangles");
    });
}

GM_API gm_status gm_bake_level_triangle_chunks(uint32_t* dst, size_t dst_capacity,
                                               const gm_bake* b, uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->levels[level].lv.chunk;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_triangle_chunks");
    });
}

GM_API gm_status gm_bake_level_errors(float* dst, size_t dst_capacity, const gm_bake* b,
                                      uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->levels[level].lv.errors;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_errors");
    });
}

GM_API gm_status gm_bake_level_morph(double* dst, size_t dst_capacity, const gm_bake* b,
                                     uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->levels[level].lv.morph;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_morph");
    });
}

GM_API gm_status gm_bake_level_present(uint8_t* dst, size_t dst_capacity, const gm_bake* b,
                                       uint32_t level, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_only(b, level, err)) return s;
        const auto& v = b->levels[level].lv.present;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_bake_level_present");
    });
}

GM_API gm_status gm_chunk_get_info(gm_chunk_info* info, const gm_bake* b, uint32_t level,
                                   uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!info) return null_arg(err, "info");
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const ChunkMesh& cm = b->levels[level].chunks[chunk];
        gm_chunk_info out;
        std::memset(&out, 0, sizeof out);
        out.vertex_count = cm.vertex_count();
        out.surface_vertex_count = cm.ids.size();
        out.triangle_count = cm.tris.size() / 3;
        out.interior_count = cm.interior;
        out.skirt_triangle_count = cm.skirt.size() / 3;
        for (int m = 1; m < 8; ++m) out.stitched_triangle_count[m] = cm.stitch_off[m + 1] - cm.stitch_off[m];
        for (std::uint32_t i = 0; i < 3; ++i) {
            out.neighbors[i] = b->chunks.neighbors[3 * chunk + i];
            out.corners[i] = b->chunks.corners[3 * chunk + i];
        }
        *info = out;
        return ok(err);
    });
}

GM_API gm_status gm_chunk_vertex_ids(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                     uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const auto& v = b->levels[level].chunks[chunk].ids;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_vertex_ids");
    });
}

GM_API gm_status gm_chunk_vertex_data(double* dst, size_t dst_capacity, const gm_bake* b,
                                      uint32_t level, uint32_t chunk, int32_t which,
                                      gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        return chunk_data(dst, dst_capacity, b, level, chunk, which, err);
    });
}

GM_API gm_status gm_chunk_vertex_layers(uint8_t* dst, size_t dst_capacity, const gm_bake* b,
                                        uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        if (gm_status s = layers_check(b, err)) return s;
        const ChunkMesh& cm = b->levels[level].chunks[chunk];
        std::vector<std::uint8_t> v;
        v.reserve(cm.vertex_count());
        for (std::uint32_t id : cm.ids) v.push_back(b->layer[id]);
        for (std::uint32_t s : cm.skirt_src) v.push_back(b->layer[cm.ids[s]]);
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_vertex_layers");
    });
}

GM_API gm_status gm_chunk_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                    uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const auto& v = b->levels[level].chunks[chunk].tris;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_triangles");
    });
}

GM_API gm_status gm_chunk_stitched(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                   uint32_t level, uint32_t chunk, uint32_t mask, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        if (mask < 1 || mask > 7)
            return fail(err, GM_ERROR_INVALID_ARGUMENT, "mask must be in 1..7, got " + std::to_string(mask));
        const ChunkMesh& cm = b->levels[level].chunks[chunk];
        const std::uint64_t a = cm.stitch_off[mask], e = cm.stitch_off[mask + 1];
        return copy_out(dst, dst_capacity, cm.stitched.data() + 3 * a, static_cast<std::size_t>(3 * (e - a)), err,
                        "gm_chunk_stitched");
    });
}

GM_API gm_status gm_chunk_skirt(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                uint32_t level, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = level_chunk(b, level, chunk, err)) return s;
        const auto& v = b->levels[level].chunks[chunk].skirt;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_chunk_skirt");
    });
}

namespace {
gm_status collider_of(const gm_bake* b, uint32_t chunk, gm_error* err) {
    if (!b) return null_arg(err, "bake");
    if (!b->has_colliders)
        return fail(err, GM_ERROR_INVALID_ARGUMENT, "the bake has no colliders (made with options.collision = 0)");
    if (chunk >= b->nchunks)
        return fail(err, GM_ERROR_INVALID_ARGUMENT,
                    "chunk " + std::to_string(chunk) + " is out of range (the bake has " +
                        std::to_string(b->nchunks) + " chunks)");
    return GM_OK;
}
}  // namespace

GM_API gm_status gm_collider_counts(uint64_t* vertex_count, uint64_t* triangle_count,
                                    const gm_bake* b, uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = collider_of(b, chunk, err)) return s;
        const ColliderOut& c = b->colliders[chunk];
        if (vertex_count) *vertex_count = c.pos.size() / 3;
        if (triangle_count) *triangle_count = c.tris.size() / 3;
        return ok(err);
    });
}

GM_API gm_status gm_collider_positions(double* dst, size_t dst_capacity, const gm_bake* b,
                                       uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = collider_of(b, chunk, err)) return s;
        const auto& v = b->colliders[chunk].pos;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_collider_positions");
    });
}

GM_API gm_status gm_collider_triangles(uint32_t* dst, size_t dst_capacity, const gm_bake* b,
                                       uint32_t chunk, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (gm_status s = collider_of(b, chunk, err)) return s;
        const auto& v = b->colliders[chunk].tris;
        return copy_out(dst, dst_capacity, v.data(), v.size(), err, "gm_collider_triangles");
    });
}

}  // extern "C"

// ---------------------------------------------------------------------------------------------
// live editing

namespace {

// the finest tolerance a bake of this spec with these options builds its hierarchy to
double finest_of(const gm::SpecData& spec, const gm_bake_options& o) {
    const double tol = o.tolerance_m == 0 ? spec.tolerance_m : o.tolerance_m;
    const double col = spec.has_collision_tolerance ? spec.collision_tolerance_m : 4.0 * tol;
    return std::min(tol, col);
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

// do two bakes hold the same arrays for one chunk at one level (vertex ids aside)?
bool same_chunk(const gm_bake& A, const gm_bake& B, std::uint32_t level, std::uint32_t c) {
    const LevelOut& la = A.levels[level];
    const LevelOut& lb = B.levels[level];
    const ChunkMesh& a = la.chunks[c];
    const ChunkMesh& b = lb.chunks[c];
    if (a.ids.size() != b.ids.size() || a.interior != b.interior || a.tris != b.tris ||
        a.stitched != b.stitched || a.skirt != b.skirt || a.skirt_src != b.skirt_src ||
        a.skirt_pos != b.skirt_pos || a.skirt_morph != b.skirt_morph ||
        !std::equal(std::begin(a.stitch_off), std::end(a.stitch_off), std::begin(b.stitch_off)))
        return false;
    for (std::size_t i = 0; i < a.ids.size(); ++i) {
        const std::size_t u = a.ids[i], v = b.ids[i];
        for (std::size_t k = 0; k < 3; ++k)
            if (A.pos[3 * u + k] != B.pos[3 * v + k] || A.nrm[3 * u + k] != B.nrm[3 * v + k] ||
                la.lv.morph[3 * u + k] != lb.lv.morph[3 * v + k])
                return false;
        if (A.slope[u] != B.slope[v] || A.alt[u] != B.alt[v]) return false;
        if (A.layers_ok != B.layers_ok) return false;
        if (A.layers_ok) {
            if (A.layer[u] != B.layer[v]) return false;
            for (std::size_t k = 0; k < 3; ++k)
                if (A.color[3 * u + k] != B.color[3 * v + k]) return false;
        }
    }
    return true;
}

bool same_collider(const gm_bake& A, const gm_bake& B, std::uint32_t c) {
    return A.colliders[c].pos == B.colliders[c].pos && A.colliders[c].tris == B.colliders[c].tris;
}

}  // namespace

GM_API gm_status gm_edit_create(gm_edit** out, const gm_world* world, const gm_bake_options* options,
                                gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!out) return null_arg(err, "edit");
        *out = nullptr;
        if (!world) return null_arg(err, "world");
        std::unique_ptr<gm_edit> e(new gm_edit);
        gm_bake_options_init(&e->options);
        if (options) {
            if (options->struct_size < sizeof(std::uint32_t) || options->struct_size > 4096)
                return fail(err, GM_ERROR_INVALID_ARGUMENT,
                            "options->struct_size must be sizeof(gm_bake_options) (use gm_bake_options_init)");
            std::memcpy(&e->options, options, std::min<std::size_t>(options->struct_size, sizeof e->options));
        }
        e->options.struct_size = sizeof e->options;
        e->options.progress = nullptr;  // only the first bake would call it
        e->bake.reset(new gm_bake);
        Incremental keep;
        keep.keep_h = &e->h;
        keep.keep_levels = &e->levels;
        gm_bake_options first = e->options;
        if (options && options->struct_size >= offsetof(gm_bake_options, progress_user) + sizeof(void*)) {
            first.progress = options->progress;
            first.progress_user = options->progress_user;
        }
        gm_status s = bake(*world, first, *e->bake, err, &keep);
        if (s != GM_OK) return s;
        e->spec = world->spec;
        e->field = world->field;
        *out = e.release();
        return ok(err);
    });
}

GM_API void gm_edit_destroy(gm_edit* edit) { delete edit; }

GM_API gm_status gm_edit_update(gm_edit* e, const gm_world* world, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!e) return null_arg(err, "edit");
        if (!world) return null_arg(err, "world");
        if (!same_settings(e->spec, world->spec))
            return fail(err, GM_ERROR_INVALID_ARGUMENT,
                        "world: only features, layers and name may differ from the session's spec "
                        "(radius_m, tolerance_m, offset, max_triangles, lod and collision must match)");
        Incremental inc;
        gm::edit_caps(e->field, world->field, finest_of(e->spec, e->options), inc.changed, inc.margin_m);
        inc.previous = &e->h;
        inc.previous_levels = &e->levels;
        gm::Hierarchy h;
        std::vector<gm::Level> levels;
        inc.keep_h = &h;
        inc.keep_levels = &levels;
        std::unique_ptr<gm_bake> nb(new gm_bake);
        gm_status s = bake(*world, e->options, *nb, err, &inc);
        if (s != GM_OK) return s;  // the session stays as it was
        std::vector<std::uint32_t> changed;
        const gm_bake& A = *e->bake;
        for (std::uint32_t li = 0; li < nb->levels.size(); ++li)
            for (std::uint32_t c = 0; c < nb->nchunks; ++c)
                if (!same_chunk(A, *nb, li, c)) changed.insert(changed.end(), {li, c});
        for (std::uint32_t c = 0; c < nb->colliders.size(); ++c)
            if (!same_collider(A, *nb, c)) changed.insert(changed.end(), {GM_COLLIDER_LEVEL, c});
        e->spec = world->spec;
        e->field = world->field;
        e->h = std::move(h);
        e->levels = std::move(levels);
        e->bake = std::move(nb);
        e->changed = std::move(changed);
        return ok(err);
    });
}

GM_API const gm_bake* gm_edit_bake(const gm_edit* edit) { return edit ? edit->bake.get() : nullptr; }

GM_API gm_status gm_edit_changed_count(uint64_t* count, const gm_edit* edit, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!count) return null_arg(err, "count");
        if (!edit) return null_arg(err, "edit");
        *count = edit->changed.size() / 2;
        return ok(err);
    });
}

GM_API gm_status gm_edit_changed(uint32_t* dst, size_t dst_capacity, const gm_edit* edit, gm_error* err) {
    return guarded(err, [&]() -> gm_status {
        if (!edit) return null_arg(err, "edit");
        return copy_out(dst, dst_capacity, edit->changed.data(), edit->changed.size(), err, "changed");
    });
}
