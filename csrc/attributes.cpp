// vertex attributes of the true surface, from the analytic height and gradient.
#include "attributes.hpp"

#include <cmath>

#include "bake.hpp"
#include "refine.hpp"

namespace gm {

void surface_attributes(const Field& field, const double* directions, std::size_t n, int threads,
                        double* normals, double* slope_deg, double* altitude_m) {
    const double R = field.radius();
    constexpr double kDegrees = 57.295779513082320876798154814105;  // 180 / pi
    parallel_for(n, threads, [&](std::size_t b, std::size_t e) {
        for (std::size_t v = b; v < e; ++v) {
            const Vec3 u{directions[3 * v], directions[3 * v + 1], directions[3 * v + 2]};
            Vec3 g;
            const double h = field.eval(u, &g);
            const double rh = R + h;
            const Vec3 nrm = normalize(u - (1.0 / rh) * g);
            normals[3 * v] = nrm.x;
            normals[3 * v + 1] = nrm.y;
            normals[3 * v + 2] = nrm.z;
            // atan2 keeps it finite for any R + H > 0
            slope_deg[v] = std::atan2(norm(g), rh) * kDegrees;
            altitude_m[v] = h;
        }
    });
}

void assign_layers(const std::vector<LayerRule>& rules, const double* slope_deg,
                   const double* altitude_m, std::size_t n, std::uint8_t* layer, double* color) {
    for (std::size_t v = 0; v < n; ++v) {
        const double s = slope_deg[v], a = altitude_m[v];
        std::uint8_t hit = kNoLayer;
        for (std::size_t i = 0; i < rules.size() && i < kMaxLayers; ++i) {
            const LayerRule& L = rules[i];
            if (s >= L.slope_deg[0] && s <= L.slope_deg[1] && a >= L.altitude_m[0] &&
                a <= L.altitude_m[1]) {
                hit = static_cast<std::uint8_t>(i);
                break;
            }
        }
        layer[v] = hit;
        for (int k = 0; k < 3; ++k)
            color[3 * v + static_cast<std::size_t>(k)] = hit == kNoLayer ? kNoLayerGrey : rules[hit].color[k];
    }
}

}  // namespace gm
