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
                          double& mesh_to_surface, double& surface_to_mesh, double spacing_m) {
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
        s2m_max = std::max(s2m_max, norm(S - closest_on_triangle(S, V0, V1, V2)));
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

Deviation measure(const Field& field, const double* P, std::size_t nverts, const std::uint32_t* T,
                  std::size_t ntris, int order, int threads, double* per_triangle) {
    (void)nverts;
    order = std::max(order, 1);
    Deviation total;
    std::mutex mu;
    parallel_for(ntris, threads, [&](std::size_t b, std::size_t e) {
        Deviation local;
        for (std::size_t t = b; t < e; ++t) {
            Vec3 V[3];
            for (int k = 0; k < 3; ++k) {
                const double* p = P + 3 * static_cast<std::size_t>(T[3 * t + static_cast<std::size_t>(k)]);
                V[k] = {p[0], p[1], p[2]};
            }
            double m2s, s2m;
            double worst = triangle_deviation(field, V[0], V[1], V[2], order, m2s, s2m);
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

}  // namespace gm
