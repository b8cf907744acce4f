// a posteriori deviation between a mesh and the true surface (Hausdorff distance in both
// directions, sampled): the measured number the report quotes, never the mesher's own estimate.
#include "measure.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <mutex>

#include "distance.hpp"
#include "refine.hpp"
#include "tight.hpp"

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
                          const Vec3* cover, std::size_t cover_count, bool surface_only, bool corners) {
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
    // on the surface, unless `corners`)
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
            if (!corners && ((i == 0 && j == 0) || i == order || j == order)) continue;
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
Deviation measure_each(std::size_t ntris, int order, int threads, double* per_triangle, const One& one,
                       double* per_m2s = nullptr, double* per_s2m = nullptr) {
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
            if (per_m2s) per_m2s[t] = m2s;
            if (per_s2m) per_s2m[t] = s2m;
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

namespace {

// the wall columns whose peak measure_collider searches out
constexpr std::size_t kWallPeaks = 8;

// the triangles around each vertex (compressed rows: ring[off[v] .. off[v+1]))
void vertex_rings(const std::uint32_t* T, std::size_t nverts, std::size_t ntris, std::vector<std::uint64_t>& off,
                  std::vector<std::uint32_t>& ring) {
    off.assign(nverts + 1, 0);
    for (std::size_t i = 0; i < 3 * ntris; ++i) ++off[T[i] + 1];
    for (std::size_t v = 0; v < nverts; ++v) off[v + 1] += off[v];
    ring.assign(off[nverts], 0);
    std::vector<std::uint64_t> fill(off.begin(), off.end() - 1);
    for (std::size_t i = 0; i < 3 * ntris; ++i) ring[fill[T[i]]++] = static_cast<std::uint32_t>(i / 3);
}

// the corners of every triangle sharing a vertex with t (t left out)
void cover_of(const double* P, const std::uint32_t* T, const std::vector<std::uint64_t>& off,
              const std::vector<std::uint32_t>& ring, std::size_t t, std::vector<Vec3>& cover) {
    cover.clear();
    for (int k = 0; k < 3; ++k) {
        const std::uint32_t v = T[3 * t + static_cast<std::size_t>(k)];
        for (std::uint64_t i = off[v]; i < off[v + 1]; ++i)
            if (ring[i] != t)
                for (int j = 0; j < 3; ++j) cover.push_back(corner_of(P, T, ring[i], j));
    }
}

Deviation covered(const Field& field, const double* P, const std::uint32_t* T, std::size_t ntris, int order,
                  int threads, double spacing_m, const std::vector<std::uint64_t>& off,
                  const std::vector<std::uint32_t>& ring, double* per_m2s, double* per_s2m) {
    return measure_each(ntris, order, threads, nullptr,
                        [&](std::size_t t, std::vector<Vec3>& cover, double& m2s, double& s2m) {
                            cover_of(P, T, off, ring, t, cover);
                            return triangle_deviation(field, corner_of(P, T, t, 0), corner_of(P, T, t, 1),
                                                      corner_of(P, T, t, 2), order, m2s, s2m, spacing_m,
                                                      cover.data(), cover.size() / 3, false, true);
                        },
                        per_m2s, per_s2m);
}

}  // namespace

Deviation measure_collider(const Field& field, const double* P, std::size_t nverts, const std::uint32_t* T,
                           std::size_t ntris, int order, double spacing_m, int threads, std::uint64_t* tight) {
    order = std::max(order, 1);
    std::vector<std::uint64_t> off;
    std::vector<std::uint32_t> ring;
    vertex_rings(T, nverts, ntris, off, ring);
    std::vector<double> loose_m2s(ntris, 0.0), loose_s2m(ntris, 0.0);
    Deviation dev = covered(field, P, T, ntris, order, threads, spacing_m, off, ring, loose_m2s.data(),
                            loose_s2m.data());
    // surface -> mesh to the nearest of the triangle and those around it overstates where the
    // nearest lies beyond them (beside a wall, by up to five times): the searched figures take
    // the exact distance to the whole collider
    const TriangleTree tree(P, T, ntris);
    // per triangle, once: beside a wall? its tight figures (-1: not searched yet)
    std::vector<std::int8_t> wall(ntris, -1);
    std::vector<double> tight_m2s(ntris, -1.0), tight_s2m(ntris, -1.0);
    auto near = [&](std::size_t t) {
        if (wall[t] < 0)
            wall[t] = near_wall(field, corner_of(P, T, t, 0), corner_of(P, T, t, 1), corner_of(P, T, t, 2)) ? 1 : 0;
        return wall[t] == 1;
    };
    std::uint64_t searched = 0;
    std::vector<std::pair<double, std::uint32_t>> pot;
    std::vector<std::uint32_t> batch;
    // each direction on its own: the candidates by what their tight figure could reach (the grid's
    // figure times the slack), searched until none left could pass the largest found. mesh ->
    // surface starts from the grid's largest (a distance to an actual surface point), surface ->
    // mesh from nothing (the grid's covered figure is only an upper bound)
    double best_m2s = dev.mesh_to_surface_m, best_s2m = 0;
    for (int dir = 0; dir < 2; ++dir) {
        const std::vector<double>& loose = dir == 0 ? loose_m2s : loose_s2m;
        const std::vector<double>& found = dir == 0 ? tight_m2s : tight_s2m;
        double& best = dir == 0 ? best_m2s : best_s2m;
        if (dir == 1)
            for (std::size_t t = 0; t < ntris; ++t) best = std::max(best, tight_s2m[t]);
        pot.clear();
        for (std::size_t t = 0; t < ntris; ++t) {
            if (!(loose[t] * kWallSlack > best)) continue;
            const double p = loose[t] * (near(t) ? kWallSlack : kGridSlack);
            if (p > best) pot.push_back({p, static_cast<std::uint32_t>(t)});
        }
        std::sort(pot.begin(), pot.end(),
                  [](const std::pair<double, std::uint32_t>& a, const std::pair<double, std::uint32_t>& b) {
                      return a.first > b.first || (a.first == b.first && a.second < b.second);
                  });
        for (std::size_t next = 0; next < pot.size() && pot[next].first > best;) {
            batch.clear();
            while (next < pot.size() && batch.size() < kTightBatch && pot[next].first > best) {
                const std::uint32_t t = pot[next++].second;
                if (found[t] >= 0) continue;  // searched in the other direction's pass
                batch.push_back(t);
            }
            parallel_for(batch.size(), threads, [&](std::size_t b, std::size_t e) {
                for (std::size_t k = b; k < e; ++k) {
                    const std::size_t t = batch[k];
                    tight_deviation(field, corner_of(P, T, t, 0), corner_of(P, T, t, 1), corner_of(P, T, t, 2),
                                    spacing_m, tight_m2s[t], tight_s2m[t], true, true, &tree);
                }
            }, 1);
            for (std::uint32_t t : batch) best = std::max(best, found[t]);
            searched += batch.size();
        }
    }
    // every searched figure is in its direction's best: each batch raised it
    dev.mesh_to_surface_m = best_m2s;
    dev.surface_to_mesh_m = best_s2m;
    if (field.has_steps()) {
        // the vertical walls are surface too: where a collider cuts a wall's corner, points of
        // the wall's face are farther from it than any ground point above it. every grid point
        // (kTightOrder at the spacing) of a triangle beside a wall names the nearest wall column
        // (Field::wall_point: a rim direction, foot to top); columns closer than a quarter of
        // the figure so far are taken once (the first in triangle order), each sampled foot to
        // top at that step. a wall point no farther from the triangle that named its column and
        // the triangles around it than the figure so far cannot raise it; the rest take the
        // exact distance to the whole collider (the distance is 1-Lipschitz: between samples it
        // can exceed them by at most half the step's diagonal)
        const double so_far = dev.surface_to_mesh_m;
        const double step = std::max(so_far, 1e-3) / 4;
        struct Column {
            std::int64_t key[3];
            std::uint32_t t, i;
            Vec3 w;
            double lo, hi;
        };
        std::vector<std::vector<Column>> per(ntris);
        parallel_for(ntris, threads, [&](std::size_t b, std::size_t e) {
            for (std::size_t t = b; t < e; ++t) {
                const Vec3 V0 = corner_of(P, T, t, 0), V1 = corner_of(P, T, t, 1), V2 = corner_of(P, T, t, 2);
                if (!near_wall(field, V0, V1, V2)) continue;
                const int o = sampling_order(V0, V1, V2, kTightOrder, spacing_m);
                std::uint32_t i = 0;
                for (int u = 0; u <= o; ++u)
                    for (int v = 0; v <= o - u; ++v, ++i) {
                        const double b1 = static_cast<double>(u) / o, b2 = static_cast<double>(v) / o;
                        const Vec3 p = (1 - b1 - b2) * V0 + b1 * V1 + b2 * V2;
                        Column c;
                        Vec3 q;
                        if (!std::isfinite(field.wall_point(p, q, &c.lo, &c.hi)) || !(c.hi > c.lo)) continue;
                        c.w = normalize(q);
                        const double R = field.radius();
                        c.key[0] = std::llround(c.w.x * R / step);
                        c.key[1] = std::llround(c.w.y * R / step);
                        c.key[2] = std::llround(c.w.z * R / step);
                        c.t = static_cast<std::uint32_t>(t);
                        c.i = i;
                        per[t].push_back(c);
                    }
            }
        });
        std::vector<Column> cols;
        for (auto& v : per) cols.insert(cols.end(), v.begin(), v.end());
        per.clear();
        per.shrink_to_fit();
        std::sort(cols.begin(), cols.end(), [](const Column& x, const Column& y) {
            for (int k = 0; k < 3; ++k)
                if (x.key[k] != y.key[k]) return x.key[k] < y.key[k];
            return x.t < y.t || (x.t == y.t && x.i < y.i);
        });
        cols.erase(std::unique(cols.begin(), cols.end(),
                               [](const Column& x, const Column& y) {
                                   return x.key[0] == y.key[0] && x.key[1] == y.key[1] && x.key[2] == y.key[2];
                               }),
                   cols.end());
        std::vector<double> face(cols.size(), 0.0);
        std::vector<Vec3> peak(cols.size());
        parallel_for(cols.size(), threads, [&](std::size_t b, std::size_t e) {
            std::vector<Vec3> cover;
            for (std::size_t k = b; k < e; ++k) {
                const Column& c = cols[k];
                const Vec3 V0 = corner_of(P, T, c.t, 0), V1 = corner_of(P, T, c.t, 1), V2 = corner_of(P, T, c.t, 2);
                cover_of(P, T, off, ring, c.t, cover);
                const int m = static_cast<int>(std::min(256.0, std::ceil((c.hi - c.lo) / step)));
                double worst = 0;
                for (int j = 0; j <= m; ++j) {
                    const Vec3 x = (c.lo + (c.hi - c.lo) * j / std::max(m, 1)) * c.w;
                    const double bar = std::max(so_far, worst);
                    double own = norm(x - closest_on_triangle(x, V0, V1, V2));
                    for (std::size_t n = 0; n < cover.size() && own > bar; n += 3)
                        own = std::min(own, norm(x - closest_on_triangle(x, cover[n], cover[n + 1], cover[n + 2])));
                    if (own <= bar) continue;
                    const double d = tree.distance(x, own);
                    if (d > worst) {
                        worst = d;
                        peak[k] = x;
                    }
                }
                face[k] = worst;
            }
        }, 16);
        for (double x : face) dev.surface_to_mesh_m = std::max(dev.surface_to_mesh_m, x);
        // the largest columns' peaks searched out on the wall (compass search, Kolda, Lewis &
        // Torczon 2003): along the column and across it, each trial point put back on the wall
        // by wall_point, until the step is a 32nd of the sampling step
        std::vector<std::uint32_t> top;
        for (std::size_t k = 0; k < cols.size(); ++k)
            if (face[k] > 0) top.push_back(static_cast<std::uint32_t>(k));
        const std::size_t keep = std::min<std::size_t>(top.size(), kWallPeaks);
        std::partial_sort(top.begin(), top.begin() + static_cast<std::ptrdiff_t>(keep), top.end(),
                          [&](std::uint32_t x, std::uint32_t y) { return face[x] > face[y] || (face[x] == face[y] && x < y); });
        top.resize(keep);
        std::vector<double> polished(keep, 0.0);
        parallel_for(keep, threads, [&](std::size_t b, std::size_t e) {
            for (std::size_t k = b; k < e; ++k) {
                Vec3 x = peak[top[k]];
                double v = face[top[k]], h = step;
                const Vec3 u = normalize(x);
                const Vec3 e1 = normalize(std::fabs(u.x) < 0.9 ? cross(u, Vec3{1, 0, 0}) : cross(u, Vec3{0, 1, 0}));
                const Vec3 dirs[6] = {u, -u, e1, -e1, cross(u, e1), -cross(u, e1)};
                for (int it = 0; it < 200 && h > step / 32; ++it) {
                    double best = v;
                    Vec3 at = x;
                    for (const Vec3& d : dirs) {
                        Vec3 q;
                        if (!std::isfinite(field.wall_point(x + h * d, q))) continue;
                        const double dq = tree.distance(q, std::numeric_limits<double>::infinity());
                        if (dq > best) {
                            best = dq;
                            at = q;
                        }
                    }
                    if (best > v) {
                        v = best;
                        x = at;
                    } else {
                        h *= 0.5;
                    }
                }
                polished[k] = v;
            }
        }, 1);
        for (double x : polished) dev.surface_to_mesh_m = std::max(dev.surface_to_mesh_m, x);
    }
    dev.max_m = std::max(dev.mesh_to_surface_m, dev.surface_to_mesh_m);
    if (tight) *tight = searched;
    return dev;
}

}  // namespace gm
