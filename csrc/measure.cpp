// a posteriori deviation between a mesh and the true surface (Hausdorff distance in both
// directions, sampled): the measured number the report quotes, never the mesher's own estimate.
#include "measure.hpp"

#include <algorithm>
#include <cmath>
#include <mutex>

#include "distance.hpp"
#include "refine.hpp"

namespace gm {

int sampling_order(Vec3 V0, Vec3 V1, Vec3 V2, int order, double spacing_m) {
    if (spacing_m > 0) {
        double edge = std::max({norm(V1 - V0), norm(V2 - V1), norm(V0 - V2)});
        double need = std::ceil(edge / spacing_m);
        if (need > order) order = static_cast<int>(std::min(need, 32.0));
    }
    return order;
}

double triangle_deviation(const Field& field, Vec3 V0, Vec3 V1, Vec3 V2, int order,
                          double& mesh_to_surface, double& surface_to_mesh, double spacing_m,
                          const Vec3* cover, std::size_t cover_count, bool surface_only) {
    const double R = field.radius();
    order = sampling_order(V0, V1, V2, order, spacing_m);
    constexpr int kMaxSamples = 600;  // order <= 32
    // plain arrays: no per-call initialisation of the sample storage
    double px[kMaxSamples], py[kMaxSamples], pz[kMaxSamples];
    double radial[kMaxSamples];
    int idx[kMaxSamples];
    int n = 0;
    double s2m_max = 0;
    // pass 1: the radial bound and surface -> mesh at every sample but the corners (which lie
    // on the surface)
    // one sample: surface -> mesh now, its radial bound kept for pass 2
    auto sample = [&](Vec3 p) {
        double pn = norm(p);
        if (!(pn > 0) || n == kMaxSamples) return;
        Vec3 u = (1.0 / pn) * p;
        double H = field.eval(u, nullptr);
        Vec3 S = (R + H) * u;
        double s2m = norm(S - closest_on_triangle(S, V0, V1, V2));
        for (std::size_t c = 0; c < cover_count && s2m > s2m_max; ++c)
            s2m = std::min(s2m, norm(S - closest_on_triangle(S, cover[3 * c], cover[3 * c + 1], cover[3 * c + 2])));
        s2m_max = std::max(s2m_max, s2m);
        px[n] = p.x;
        py[n] = p.y;
        pz[n] = p.z;
        radial[n] = std::fabs(pn - R - H);
        idx[n] = n;
        ++n;
    };
    for (int i = 0; i <= order; ++i) {
        for (int j = 0; j <= order - i; ++j) {
            if ((i == 0 && j == 0) || i == order || j == order) continue;
            double b1 = static_cast<double>(i) / order, b2 = static_cast<double>(j) / order;
            sample((1 - b1 - b2) * V0 + b1 * V1 + b2 * V2);
        }
    }
    // the creases of features near the triangle: samples on a grid miss a crest line or a tip
    {
        Vec3 cen = normalize(V0 + V1 + V2);
        double reach = std::max({angle(cen, normalize(V0)), angle(cen, normalize(V1)), angle(cen, normalize(V2))});
        for (std::uint32_t fi : field.crease_features()) {
            if (!field.touches(fi, Cap{cen, reach + 1e-12})) continue;
            Vec3 cp[Field::kMaxCreasePoints];
            int k = field.crease_points(fi, cen, reach, cp);
            for (int i = 0; i < k; ++i) {
                Vec3 p;
                if (ray_hits_triangle(cp[i], V0, V1, V2, p)) sample(p);
            }
        }
    }
    // pass 2: mesh -> surface. the projection (and the walls) can only lower the radial bound,
    // so take samples by decreasing radial bound and stop once no bound can raise the maximum
    std::sort(idx, idx + n, [&](int a, int b) { return radial[a] > radial[b] || (radial[a] == radial[b] && a < b); });
    double m2s_max = 0;
    if (surface_only) n = 0;
    for (int k = 0; k < n; ++k) {
        int s = idx[k];
        if (radial[s] <= m2s_max) break;
        Vec3 ps{px[s], py[s], pz[s]};
        double d = std::min(radial[s], project_distance(field, ps, nullptr, 0, 4));
        if (field.has_steps()) d = std::min(d, field.wall_distance(ps));
        m2s_max = std::max(m2s_max, d);
    }
    mesh_to_surface = m2s_max;
    surface_to_mesh = s2m_max;
    return std::max(m2s_max, s2m_max);
}

namespace {

// the largest deviation over ntris triangles: one(t, scratch, m2s, s2m) measures triangle t
// (scratch: a buffer of the calling block); per_triangle (optional) receives each result
template <class One>
Deviation measure_each(std::size_t ntris, int order, int threads, double* per_triangle, const One& one) {
    Deviation total;
    std::mutex mu;
    parallel_for(ntris, threads, [&](std::size_t b, std::size_t e) {
        Deviation local;
        std::vector<Vec3> scratch;
        for (std::size_t t = b; t < e; ++t) {
            double m2s, s2m;
            const double worst = one(t, scratch, m2s, s2m);
            local.mesh_to_surface_m = std::max(local.mesh_to_surface_m, m2s);
            local.surface_to_mesh_m = std::max(local.surface_to_mesh_m, s2m);
            if (per_triangle) per_triangle[t] = worst;
        }
        std::lock_guard<std::mutex> lock(mu);
        total.mesh_to_surface_m = std::max(total.mesh_to_surface_m, local.mesh_to_surface_m);
        total.surface_to_mesh_m = std::max(total.surface_to_mesh_m, local.surface_to_mesh_m);
    });
    total.max_m = std::max(total.mesh_to_surface_m, total.surface_to_mesh_m);
    total.samples = static_cast<std::uint64_t>(ntris) * static_cast<std::uint64_t>((order + 1) * (order + 2) / 2 - 3);
    return total;
}

Vec3 corner_of(const double* P, const std::uint32_t* T, std::size_t t, int k) {
    const double* p = P + 3 * static_cast<std::size_t>(T[3 * t + static_cast<std::size_t>(k)]);
    return {p[0], p[1], p[2]};
}

}  // namespace

Deviation measure(const Field& field, const double* P, std::size_t nverts, const std::uint32_t* T,
                  std::size_t ntris, int order, int threads, double* per_triangle) {
    (void)nverts;
    order = std::max(order, 1);
    return measure_each(ntris, order, threads, per_triangle,
                        [&](std::size_t t, std::vector<Vec3>&, double& m2s, double& s2m) {
                            return triangle_deviation(field, corner_of(P, T, t, 0), corner_of(P, T, t, 1),
                                                      corner_of(P, T, t, 2), order, m2s, s2m);
                        });
}

Deviation measure_covered(const Field& field, const double* P, std::size_t nverts, const std::uint32_t* T,
                          std::size_t ntris, int order, int threads) {
    order = std::max(order, 1);
    // triangles around each vertex (compressed rows)
    std::vector<std::uint64_t> off(nverts + 1, 0);
    for (std::size_t i = 0; i < 3 * ntris; ++i) ++off[T[i] + 1];
    for (std::size_t v = 0; v < nverts; ++v) off[v + 1] += off[v];
    std::vector<std::uint32_t> ring(off[nverts]);
    {
        std::vector<std::uint64_t> fill(off.begin(), off.end() - 1);
        for (std::size_t i = 0; i < 3 * ntris; ++i) ring[fill[T[i]]++] = static_cast<std::uint32_t>(i / 3);
    }
    return measure_each(ntris, order, threads, nullptr,
                        [&](std::size_t t, std::vector<Vec3>& cover, double& m2s, double& s2m) {
                            cover.clear();
                            for (int k = 0; k < 3; ++k) {
                                const std::uint32_t v = T[3 * t + static_cast<std::size_t>(k)];
                                for (std::uint64_t i = off[v]; i < off[v + 1]; ++i)
                                    if (ring[i] != t)
                                        for (int j = 0; j < 3; ++j) cover.push_back(corner_of(P, T, ring[i], j));
                            }
                            return triangle_deviation(field, corner_of(P, T, t, 0), corner_of(P, T, t, 1),
                                                      corner_of(P, T, t, 2), order, m2s, s2m, 0, cover.data(),
                                                      cover.size() / 3);
                        });
}

}  // namespace gm
