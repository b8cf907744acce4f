// the tight deviation of one triangle (tight.hpp). the verification's grid finds the deviation
// within a few per cent on smooth ground, but where the distance has a kink (a vertical wall's
// top and foot, a crease, a blend changing sides) its peak lies between the samples and the grid
// falls short by up to the sample spacing times the slope: this search closes that gap.
// compass search: Kolda, Lewis & Torczon, "Optimization by direct search" (SIAM Review 2003).
#include "tight.hpp"

#include <algorithm>
#include <cmath>

#include "distance.hpp"
#include "measure.hpp"

namespace gm {

namespace {

// seeds of the search: grid values within kSeedShare of the largest, at most kSeeds of them
// (mesh -> surface is evaluated in full where the radial bound is within kGridShare of it)
constexpr double kSeedShare = 0.95;
constexpr double kGridShare = 0.8;
constexpr int kSeeds = 2;
constexpr int kMaxSteps = 60;
// the search stops once its step (in metres) is this share of the value found
constexpr double kStopShare = 2e-2;
// with the whole mesh (an exact distance), surface -> mesh, which has no allowance for its last
// step (the ground above a point moves faster than the point on steep ground), searches on until
// the step is this share of the value. against one triangle it does not: there the value on a
// steep flank overstates (the nearest mesh point lies on a neighbour) and a finer search would
// only climb further up that overstatement
constexpr double kWholeMeshStopShare = 2e-3;
constexpr double kStopFloor = 1e-5;
// projection steps per mesh point (Gauss-Newton, project_distance: it stops once converged)
constexpr int kProjectIterations = 6;
// the cap search's grid (cap_distance) for the values that decide; a peak it lowers below this
// share was a projection in the wrong basin
constexpr int kCapGrid = 7;
constexpr double kConfirmShare = 0.98;

struct Seed {
    double v, b1, b2;
};

// the six directions of the barycentric lattice
constexpr double kDirs[6][2] = {{1, 0}, {0, 1}, {-1, 1}, {-1, 0}, {0, -1}, {1, -1}};

// keep the kSeeds largest seeds (largest first)
void offer(Seed* seeds, int& n, Seed s) {
    int i = n < kSeeds ? n++ : kSeeds;
    if (i == kSeeds) {
        if (!(s.v > seeds[kSeeds - 1].v)) return;
        i = kSeeds - 1;
    }
    while (i > 0 && seeds[i - 1].v < s.v) {
        seeds[i] = seeds[i - 1];
        --i;
    }
    seeds[i] = s;
}

// the compass search from a seed (grid step h in barycentric units): the largest value found
// and, in `step_m`, the last step in metres (at1, at2: where). a neighbour whose value would win is confirmed
// first (confirm(b1, b2, value) returns a value no larger)
template <class Value, class Confirm>
double climb(const Value& value, const Confirm& confirm, Seed s, double h, double edge_m, double& step_m,
             double& at1, double& at2, double stop_share = kStopShare) {
    double v = s.v, b1 = s.b1, b2 = s.b2;
    for (int it = 0; it < kMaxSteps && h * edge_m > std::max(stop_share * v, kStopFloor); ++it) {
        double best = v, n1 = b1, n2 = b2;
        for (const auto& d : kDirs) {
            const double c1 = b1 + h * d[0], c2 = b2 + h * d[1];
            if (c1 < 0 || c2 < 0 || c1 + c2 > 1) continue;
            double x = value(c1, c2);
            if (x > best) x = confirm(c1, c2, x);
            if (x > best) {
                best = x;
                n1 = c1;
                n2 = c2;
            }
        }
        if (best > v) {
            v = best;
            b1 = n1;
            b2 = n2;
        } else {
            h *= 0.5;
        }
    }
    step_m = h * edge_m;
    at1 = b1;
    at2 = b2;
    return v;
}

}  // namespace

double tight_deviation(const Field& field, Vec3 V0, Vec3 V1, Vec3 V2, double spacing_m, double& mesh_to_surface,
                       double& surface_to_mesh, bool search_surface, bool corners, const TriangleTree* mesh) {
    const double R = field.radius();
    const int order = sampling_order(V0, V1, V2, kTightOrder, spacing_m);
    const double edge = std::max({norm(V1 - V0), norm(V2 - V1), norm(V0 - V2)});
    auto point = [&](double b1, double b2) { return (1 - b1 - b2) * V0 + b1 * V1 + b2 * V2; };
    auto mesh_value = [&](double b1, double b2) {
        const Vec3 p = point(b1, b2);
        const double pn = norm(p);
        if (!(pn > 0)) return 0.0;
        double d = std::fabs(pn - R - field.eval((1.0 / pn) * p, nullptr));
        d = std::min(d, project_distance(field, p, nullptr, 0, kProjectIterations));
        if (field.has_steps()) d = std::min(d, field.wall_distance(p));
        return d;
    };
    // the distance from surface point S to the triangle, or to the whole mesh when given
    auto to_mesh = [&](Vec3 S) {
        const double d = norm(S - closest_on_triangle(S, V0, V1, V2));
        return mesh ? mesh->distance(S, d) : d;
    };
    auto surface_value = [&](double b1, double b2) {
        const Vec3 p = point(b1, b2);
        const double pn = norm(p);
        if (!(pn > 0)) return 0.0;
        const Vec3 u = (1.0 / pn) * p;
        return to_mesh((R + field.eval(u, nullptr)) * u);
    };
    // the grid (corners left out unless asked for: a level's lie on the surface) and the crease
    // points, each with its radial bound, which bounds mesh -> surface
    constexpr int kMaxPoints = 600 + Field::kMaxCreasePoints * 4;
    double b1s[kMaxPoints], b2s[kMaxPoints], radial[kMaxPoints];
    int idx[kMaxPoints];
    int n = 0;
    Seed m2s_seeds[kSeeds], s2m_seeds[kSeeds];
    int n_m2s = 0, n_s2m = 0;
    auto sample = [&](double b1, double b2) {
        if (n == kMaxPoints) return;
        const Vec3 p = point(b1, b2);
        const double pn = norm(p);
        if (!(pn > 0)) return;
        const Vec3 u = (1.0 / pn) * p;
        const double H = field.eval(u, nullptr);
        const Vec3 S = (R + H) * u;
        offer(s2m_seeds, n_s2m, {to_mesh(S), b1, b2});
        b1s[n] = b1;
        b2s[n] = b2;
        radial[n] = std::fabs(pn - R - H);
        idx[n] = n;
        ++n;
    };
    for (int i = 0; i <= order; ++i)
        for (int j = 0; j <= order - i; ++j) {
            if (!corners && ((i == 0 && j == 0) || i == order || j == order)) continue;
            sample(static_cast<double>(i) / order, static_cast<double>(j) / order);
        }
    {
        const Vec3 nrm = cross(V1 - V0, V2 - V0);
        const double nn = dot(nrm, nrm);
        const Vec3 cen = normalize(V0 + V1 + V2);
        const double reach =
            std::max({angle(cen, normalize(V0)), angle(cen, normalize(V1)), angle(cen, normalize(V2))});
        for (std::uint32_t fi : field.crease_features()) {
            if (!(nn > 0) || !field.touches(fi, Cap{cen, reach + 1e-12})) continue;
            Vec3 cp[Field::kMaxCreasePoints];
            const int k = field.crease_points(fi, cen, reach, cp);
            for (int i = 0; i < k; ++i) {
                Vec3 p;
                if (!ray_hits_triangle(cp[i], V0, V1, V2, p)) continue;
                const double w1 = dot(cross(V2 - p, V0 - p), nrm) / nn, w2 = dot(cross(V0 - p, V1 - p), nrm) / nn;
                sample(std::min(1.0, std::max(0.0, w1)), std::min(1.0 - std::max(0.0, w1), std::max(0.0, w2)));
            }
        }
    }
    // mesh -> surface at the samples whose radial bound could make them seeds, largest first
    std::sort(idx, idx + n, [&](int a, int b) { return radial[a] > radial[b] || (radial[a] == radial[b] && a < b); });
    double value[kMaxPoints];
    bool sure[kMaxPoints] = {};
    int evaluated = 0;
    double grid_max = 0;
    for (; evaluated < n; ++evaluated) {
        const int s = idx[evaluated];
        if (radial[s] <= kGridShare * grid_max) break;
        value[s] = std::min(radial[s], mesh_value(b1s[s], b2s[s]));
        grid_max = std::max(grid_max, value[s]);
    }
    // the seeds: the largest values, each confirmed by the cap search (a projection that fell
    // into the wrong basin overstates, and the search would climb towards it) before it counts
    auto confirm = [&](double b1, double b2, double v) { return cap_distance(field, point(b1, b2), v, kCapGrid); };
    for (int taken = 0; taken < kSeeds;) {
        int top = -1;
        for (int k = 0; k < evaluated; ++k) {
            const int s = idx[k];
            if (value[s] >= 0 && (top < 0 || value[s] > value[top])) top = s;
        }
        if (top < 0 || (n_m2s > 0 && value[top] < kSeedShare * m2s_seeds[0].v)) break;
        if (!sure[top]) {
            value[top] = confirm(b1s[top], b2s[top], value[top]);
            sure[top] = true;
            continue;
        }
        offer(m2s_seeds, n_m2s, {value[top], b1s[top], b2s[top]});
        value[top] = -1;  // taken
        ++taken;
    }
    const double h = 1.0 / order;
    double m2s = 0, s2m = 0;
    const auto as_is = [](double, double, double v) { return v; };
    for (int k = 0; k < n_m2s; ++k) {
        // a second seed next to the first climbs the same peak
        if (k > 0 && std::fabs(m2s_seeds[k].b1 - m2s_seeds[0].b1) + std::fabs(m2s_seeds[k].b2 - m2s_seeds[0].b2) < 2.5 * h)
            continue;
        double step = 0, b1 = 0, b2 = 0;
        // the search on the projections' values, its peak confirmed; only where the cap search
        // lowers the peak (a projection in the wrong basin) the search runs again confirming
        // every value that would win
        double v = climb(mesh_value, as_is, m2s_seeds[k], h, edge, step, b1, b2);
        const double c = confirm(b1, b2, v);
        if (c < kConfirmShare * v) v = climb(mesh_value, confirm, m2s_seeds[k], h, edge, step, b1, b2);
        else v = c;
        m2s = std::max(m2s, v + step);
    }
    for (int k = 0; k < n_s2m; ++k) {
        if (s2m_seeds[k].v < kSeedShare * s2m_seeds[0].v) break;
        if (!search_surface) {
            s2m = s2m_seeds[0].v;
            break;
        }
        double step = 0, b1 = 0, b2 = 0;
        s2m = std::max(s2m, climb(surface_value, as_is, s2m_seeds[k], h, edge, step, b1, b2,
                                  mesh ? kWholeMeshStopShare : kStopShare));
    }
    mesh_to_surface = m2s;
    surface_to_mesh = s2m;
    return std::max(m2s, s2m);
}

}  // namespace gm
