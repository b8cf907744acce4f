// collision meshes per chunk, with the centred bias and the per-chunk triangle cap.
#include "colliders.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>

#include "chunks.hpp"
#include "collider_angles.hpp"
#include "json.hpp"
#include "measure.hpp"

namespace gm {

namespace {

// the angle pass keeps each triangle it makes within this share of the collider tolerance
constexpr double kColliderAngleMargin = 0.9;

// move each collider vertex along its direction by half the mean signed gap (surface minus
// collider, radially, at the centroid and edge midpoints of its triangles): the collider then
// straddles the true surface instead of lying under its bumps and over its hollows. shifts are
// clipped to `limit` metres (steep ground makes radial gaps large)
std::vector<double> bias_vertices(const Field& f, const std::vector<double>& V,
                                  const std::vector<std::uint32_t>& tris, double limit, int threads) {
    const std::size_t T = tris.size() / 3, NV = V.size() / 3;
    const double R = f.radius();
    std::vector<double> gap(T);
    parallel_for(T, threads, [&](std::size_t b, std::size_t e) {
        for (std::size_t t = b; t < e; ++t) {
            Vec3 p[3];
            for (std::size_t k = 0; k < 3; ++k) {
                const double* q = &V[3 * static_cast<std::size_t>(tris[3 * t + k])];
                p[k] = {q[0], q[1], q[2]};
            }
            const Vec3 s[4] = {(1.0 / 3.0) * (p[0] + p[1] + p[2]), 0.5 * (p[0] + p[1]), 0.5 * (p[1] + p[2]),
                               0.5 * (p[2] + p[0])};
            double acc = 0;
            for (const Vec3& q : s) {
                const double r = norm(q);
                acc += (R + f.eval((1.0 / r) * q, nullptr)) - r;
            }
            gap[t] = acc / 4;
        }
    });
    std::vector<double> acc(NV, 0.0), cnt(NV, 0.0);
    for (std::size_t t = 0; t < T; ++t)
        for (std::size_t k = 0; k < 3; ++k) {
            acc[tris[3 * t + k]] += gap[t];
            cnt[tris[3 * t + k]] += 1;
        }
    std::vector<double> out(V);
    for (std::size_t v = 0; v < NV; ++v) {
        if (cnt[v] == 0) continue;
        const double shift = std::min(std::max(0.5 * acc[v] / cnt[v], -limit), limit);
        const double r = norm(Vec3{V[3 * v], V[3 * v + 1], V[3 * v + 2]});
        const double scale = (r + shift) / r;
        for (std::size_t k = 0; k < 3; ++k) out[3 * v + k] = V[3 * v + k] * scale;
    }
    return out;
}

}  // namespace

Status make_colliders(const Field& field, Hierarchy& h, BakeResult& r, std::string& error,
                      const std::function<void(std::uint64_t, std::uint64_t)>& step) {
    auto done = [&](std::uint64_t k) {
        if (step) step(k, kColliderSteps);
    };
    const auto t0 = std::chrono::steady_clock::now();
    const BakeSettings& s = r.settings;
    ColliderResult& out = r.colliders;
    out = ColliderResult{};
    out.made = true;
    out.requested_tolerance_m = r.plan.collider_m;
    const bool centered = s.collision_centered;
    double tol = r.plan.collider_m;
    std::vector<Level> cl;
    ChunkInfo ci;
    for (;;) {
        // with the bias, mesh a third tighter and move vertices by at most a third: the collider
        // stays within the tolerance on both sides
        cl.clear();
        Status st = extract_levels(field, h, {centered ? tol / 1.5 : tol}, kMeasureOrder, s.threads, false,
                                   cl, ci, error);
        if (st != Status::Ok) return st;
        std::vector<std::uint64_t> counts(r.chunk_count, 0);
        for (std::uint32_t c : cl[0].chunk) ++counts[c];
        out.max_triangles_per_chunk = counts.empty() ? 0 : *std::max_element(counts.begin(), counts.end());
        if (out.max_triangles_per_chunk <= s.collider_cap) break;
        if (tol > s.radius_m / 4) {
            error = "collision.max_triangles_per_chunk: " + std::to_string(s.collider_cap) +
                    " cannot be met (a chunk needs " + std::to_string(out.max_triangles_per_chunk) +
                    " triangles even at tolerance " + format_number(tol) + " m); raise it or lod.chunk_level";
            return Status::BudgetExceeded;
        }
        tol *= 1.25;
    }
    Level& lv = cl[0];
    done(1);
    // slivers out (collider_angles.cpp): first on the ground vertices within the meshing
    // tolerance, then once more on the final (biased) positions within the collider tolerance;
    // each new triangle is kept within a share of its budget, a margin for the independent
    // check's own sampling
    const double target = s.collider_min_angle_deg;
    const double mesh_tol = centered ? tol / 1.5 : tol;
    // the collider's own vertices: the hierarchy's, then the Steiner points the pass adds
    std::vector<double> ground = r.positions;
    AngleStats as = raise_min_angle(field, ground, lv.triangles, lv.chunk, target, kColliderAngleMargin * mesh_tol,
                                    kMeasureOrder, s.threads, s.collider_cap);
    done(2);
    std::vector<double> P =
        centered ? bias_vertices(field, ground, lv.triangles, tol / 3, s.threads) : std::move(ground);
    done(3);
    if (centered) {
        const AngleStats more = raise_min_angle(field, P, lv.triangles, lv.chunk, target, kColliderAngleMargin * tol,
                                                kMeasureOrder, s.threads, s.collider_cap);
        as.collapses += more.collapses;
        as.flips += more.flips;
        as.inserts += more.inserts;
        as.stuck = more.stuck;
    }
    done(4);
    {
        // the pass removes and adds triangles (within the cap): recount the largest chunk
        std::vector<std::uint64_t> counts(r.chunk_count, 0);
        for (std::uint32_t c : lv.chunk) ++counts[c];
        out.max_triangles_per_chunk = counts.empty() ? 0 : *std::max_element(counts.begin(), counts.end());
    }
    out.min_angle_target_deg = target;
    out.angle_collapses = as.collapses;
    out.angle_flips = as.flips;
    out.angle_inserts = as.inserts;
    out.angle_stuck = as.stuck;
    const std::size_t NV = P.size() / 3, T = lv.chunk.size();
    // the published figure: the covered grid at the verification spacing of the collider's own
    // tolerance, its largest searched out (measure_collider): never below what a dense search of
    // the collider finds, as a level's
    const Deviation dev = measure_collider(field, P.data(), NV, lv.triangles.data(), T, kMeasureOrder,
                                           verify_spacing(field, tol), s.threads, &out.tight_triangles);
    out.tolerance_m = tol;
    out.triangles = T;
    out.max_error_m = dev.max_m;
    out.mesh_to_surface_m = dev.mesh_to_surface_m;
    out.surface_to_mesh_m = dev.surface_to_mesh_m;
    done(5);
    out.min_angle_deg = T ? 180.0 : 0.0;
    const double tiny = 1e-12 * s.radius_m * s.radius_m;
    for (std::size_t t = 0; t < T; ++t) {
        Vec3 p[3];
        for (std::size_t k = 0; k < 3; ++k) {
            const double* q = &P[3 * static_cast<std::size_t>(lv.triangles[3 * t + k])];
            p[k] = {q[0], q[1], q[2]};
        }
        out.min_angle_deg = std::min(out.min_angle_deg, smallest_angle_deg(p[0], p[1], p[2]));
        if (norm(cross(p[1] - p[0], p[2] - p[0])) <= tiny) ++out.degenerate_triangles;
    }
    std::vector<std::uint64_t> offsets;
    std::vector<std::uint32_t> ids;
    chunk_vertex_ids(lv, r.chunk_count, offsets, ids);
    out.chunks.resize(r.chunk_count);
    std::size_t t = 0;
    for (std::uint32_t c = 0; c < r.chunk_count; ++c) {
        auto col = std::make_shared<Collider>();
        const std::uint32_t* cid = ids.data() + offsets[c];
        const std::size_t n = offsets[c + 1] - offsets[c];
        col->positions.resize(3 * n);
        for (std::size_t i = 0; i < n; ++i)
            for (std::size_t k = 0; k < 3; ++k) col->positions[3 * i + k] = P[3 * static_cast<std::size_t>(cid[i]) + k];
        std::size_t e = t;
        while (e < T && lv.chunk[e] == c) ++e;
        col->triangles.resize(3 * (e - t));
        for (std::size_t i = 0; i < col->triangles.size(); ++i)
            col->triangles[i] = static_cast<std::uint32_t>(
                std::lower_bound(cid, cid + n, lv.triangles[3 * t + i]) - cid);
        t = e;
        out.chunks[c] = std::move(col);
    }
    out.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    return Status::Ok;
}

}  // namespace gm
