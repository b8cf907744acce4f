// point-triangle and point-surface distances.
// closest point on a triangle: Ericson, "Real-Time Collision Detection" (2005), section 5.1.5.
#include "distance.hpp"

#include <algorithm>
#include <cmath>

namespace gm {

Vec3 closest_on_triangle(Vec3 p, Vec3 a, Vec3 b, Vec3 c) {
    Vec3 ab = b - a, ac = c - a, ap = p - a;
    double d1 = dot(ab, ap), d2 = dot(ac, ap);
    if (d1 <= 0 && d2 <= 0) return a;
    Vec3 bp = p - b;
    double d3 = dot(ab, bp), d4 = dot(ac, bp);
    if (d3 >= 0 && d4 <= d3) return b;
    double vc = d1 * d4 - d3 * d2;
    if (vc <= 0 && d1 >= 0 && d3 <= 0) return a + (d1 / (d1 - d3)) * ab;
    Vec3 cp = p - c;
    double d5 = dot(ab, cp), d6 = dot(ac, cp);
    if (d6 >= 0 && d5 <= d6) return c;
    double vb = d5 * d2 - d1 * d6;
    if (vb <= 0 && d2 >= 0 && d6 <= 0) return a + (d2 / (d2 - d6)) * ac;
    double va = d3 * d6 - d5 * d4;
    if (va <= 0 && (d4 - d3) >= 0 && (d5 - d6) >= 0)
        return b + ((d4 - d3) / ((d4 - d3) + (d5 - d6))) * (c - b);
    double denom = 1.0 / (va + vb + vc);
    double v = vb * denom, w = vc * denom;
    return a + v * ab + w * ac;
}

bool ray_hits_triangle(Vec3 u, Vec3 a, Vec3 b, Vec3 c, Vec3& p, double eps) {
    Vec3 n = cross(b - a, c - a);
    double den = dot(n, u);
    if (!(std::fabs(den) > 0)) return false;
    p = (dot(n, a) / den) * u;
    double nn = dot(n, n);
    double w0 = dot(cross(b - p, c - p), n) / nn;
    double w1 = dot(cross(c - p, a - p), n) / nn;
    double w2 = 1 - w0 - w1;
    return w0 >= -eps && w1 >= -eps && w2 >= -eps;
}

double project_distance(const Field& field, Vec3 p, const std::uint32_t* list, std::size_t count,
                        int iterations) {
    const double R = field.radius();
    Vec3 u = normalize(p);
    double best = INFINITY;
    for (int it = 0; it <= iterations; ++it) {
        Vec3 g;
        double H = list ? field.eval(u, list, count, &g) : field.eval(u, &g);
        double r = R + H;
        Vec3 res = r * u - p;
        double d = norm(res);
        if (d < best) best = d;
        if (it == iterations || d == 0) break;
        // tangent basis at u
        Vec3 a = std::fabs(u.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
        Vec3 e1 = normalize(a - dot(a, u) * u);
        Vec3 e2 = cross(u, e1);
        Vec3 j1 = r * e1 + dot(g, e1) * u;
        Vec3 j2 = r * e2 + dot(g, e2) * u;
        double a11 = dot(j1, j1), a12 = dot(j1, j2), a22 = dot(j2, j2);
        double b1 = -dot(j1, res), b2 = -dot(j2, res);
        double det = a11 * a22 - a12 * a12;
        if (!(std::fabs(det) > 0)) break;
        double s1 = (b1 * a22 - b2 * a12) / det;
        double s2 = (a11 * b2 - a12 * b1) / det;
        // keep steps small: the linear model is only local
        double step = std::sqrt(s1 * s1 + s2 * s2);
        // converged: the next ground point would lie within about a micrometre (times the
        // slope) of this one, far below any tolerance; the step no longer pays for its gradient
        if (r * step < 1e-6) break;
        if (step > 0.25) {
            s1 *= 0.25 / step;
            s2 *= 0.25 / step;
        }
        u = normalize(u + s1 * e1 + s2 * e2);
    }
    return best;
}

double project_safeguarded(const Field& field, Vec3 p, double trust_m, int iterations, double xtol_m,
                           const Vec3* start) {
    const double R = field.radius();
    Vec3 u = start ? normalize(*start) : normalize(p), g;
    double H = field.eval(u, &g);
    double d = norm((R + H) * u - p);
    double trust = trust_m;
    for (int it = 0; it < iterations && d > 0 && trust >= xtol_m; ++it) {
        const double rho = R + H;
        Vec3 a = std::fabs(u.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
        const Vec3 e1 = normalize(a - dot(a, u) * u), e2 = cross(u, e1);
        const Vec3 res = rho * u - p;
        const Vec3 j1 = rho * e1 + dot(g, e1) * u, j2 = rho * e2 + dot(g, e2) * u;
        const double a11 = dot(j1, j1), a12 = dot(j1, j2), a22 = dot(j2, j2);
        const double b1 = -dot(j1, res), b2 = -dot(j2, res);
        const double det = a11 * a22 - a12 * a12;
        double s1, s2;
        if (det > 1e-12 * a11 * a22) {
            s1 = (b1 * a22 - b2 * a12) / det;
            s2 = (a11 * b2 - a12 * b1) / det;
        } else {  // a singular model: steepest descent instead
            s1 = b1 / a11;
            s2 = b2 / a22;
        }
        const double length = rho * std::sqrt(s1 * s1 + s2 * s2);
        const double scale = std::min(1.0, trust / std::max(length, 1e-300));
        const Vec3 un = normalize(u + (s1 * scale) * e1 + (s2 * scale) * e2);
        Vec3 gn;
        const double Hn = field.eval(un, &gn);
        const double dn = norm((R + Hn) * un - p);
        const double taken = length * scale;
        if (dn < d) {
            u = un;
            H = Hn;
            g = gn;
            d = dn;
            trust = 2 * taken;
            if (taken < xtol_m) break;
        } else {
            trust = 0.5 * taken;
        }
    }
    return d;
}

double cap_distance(const Field& field, Vec3 p, double upper, int grid) {
    const double pn = norm(p);
    if (!(pn > 0) || !(upper > 0) || grid < 2) return upper;
    const Vec3 pu = (1.0 / pn) * p;
    Vec3 a = std::fabs(pu.x) < 0.9 ? Vec3{1, 0, 0} : Vec3{0, 1, 0};
    const Vec3 e1 = normalize(a - dot(a, pu) * pu), e2 = cross(pu, e1);
    const double half = std::tan(std::asin(std::min(upper / pn, 0.99)));
    const double R = field.radius();
    double best = upper;
    Vec3 best_u = pu;
    for (int i = 0; i < grid; ++i)
        for (int j = 0; j < grid; ++j) {
            const double x = half * (-1.0 + 2.0 * i / (grid - 1)), y = half * (-1.0 + 2.0 * j / (grid - 1));
            const Vec3 u = normalize(pu + x * e1 + y * e2);
            const double d = norm((R + field.eval(u, nullptr)) * u - p);
            if (d < best) {
                best = d;
                best_u = u;
            }
        }
    // from the best node: the safeguarded projection of p, started there (a point on the ray
    // through it at p's radius), with a trust radius of two grid steps
    const double step = 2.0 * half * pn / (grid - 1);
    return std::min(best, project_safeguarded(field, p, 2 * step, 20, 1e-6, &best_u));
}

namespace {

constexpr std::uint32_t kLeafTriangles = 4;

double box_distance2(Vec3 p, Vec3 lo, Vec3 hi) {
    const double dx = std::max({lo.x - p.x, 0.0, p.x - hi.x});
    const double dy = std::max({lo.y - p.y, 0.0, p.y - hi.y});
    const double dz = std::max({lo.z - p.z, 0.0, p.z - hi.z});
    return dx * dx + dy * dy + dz * dz;
}

}  // namespace

TriangleTree::TriangleTree(const double* P, const std::uint32_t* T, std::size_t ntris) {
    std::vector<std::uint32_t> order(ntris);
    std::vector<Vec3> centroid(ntris);
    for (std::size_t t = 0; t < ntris; ++t) {
        order[t] = static_cast<std::uint32_t>(t);
        Vec3 c{};
        for (int k = 0; k < 3; ++k) {
            const double* q = P + 3 * static_cast<std::size_t>(T[3 * t + static_cast<std::size_t>(k)]);
            c += Vec3{q[0], q[1], q[2]};
        }
        centroid[t] = (1.0 / 3.0) * c;
    }
    boxes_.reserve(2 * (ntris / kLeafTriangles + 1) + 1);
    if (ntris) {
        boxes_.emplace_back();
        build(order, centroid, 0, 0, static_cast<std::uint32_t>(ntris));
    }
    corners_.resize(3 * ntris);
    for (std::size_t i = 0; i < ntris; ++i)
        for (int k = 0; k < 3; ++k) {
            const double* q = P + 3 * static_cast<std::size_t>(T[3 * static_cast<std::size_t>(order[i]) + static_cast<std::size_t>(k)]);
            corners_[3 * i + static_cast<std::size_t>(k)] = {q[0], q[1], q[2]};
        }
    // boxes from the corners (children come after their parent: filled from the back)
    for (std::size_t b = boxes_.size(); b-- > 0;) {
        Box& x = boxes_[b];
        if (x.count) {
            x.lo = x.hi = corners_[3 * x.first];
            for (std::uint32_t i = 3 * x.first; i < 3 * (x.first + x.count); ++i) {
                const Vec3 c = corners_[i];
                x.lo = {std::min(x.lo.x, c.x), std::min(x.lo.y, c.y), std::min(x.lo.z, c.z)};
                x.hi = {std::max(x.hi.x, c.x), std::max(x.hi.y, c.y), std::max(x.hi.z, c.z)};
            }
        } else {
            const Box& l = boxes_[x.left];
            const Box& r = boxes_[x.left + 1];
            x.lo = {std::min(l.lo.x, r.lo.x), std::min(l.lo.y, r.lo.y), std::min(l.lo.z, r.lo.z)};
            x.hi = {std::max(l.hi.x, r.hi.x), std::max(l.hi.y, r.hi.y), std::max(l.hi.z, r.hi.z)};
        }
    }
}

// box `slot` over order[first .. first + count): a leaf, or two children made as a pair
void TriangleTree::build(std::vector<std::uint32_t>& order, const std::vector<Vec3>& centroid, std::uint32_t slot,
                         std::uint32_t first, std::uint32_t count) {
    if (count <= kLeafTriangles) {
        boxes_[slot].first = first;
        boxes_[slot].count = count;
        return;
    }
    Vec3 lo = centroid[order[first]], hi = lo;
    for (std::uint32_t i = first; i < first + count; ++i) {
        const Vec3 c = centroid[order[i]];
        lo = {std::min(lo.x, c.x), std::min(lo.y, c.y), std::min(lo.z, c.z)};
        hi = {std::max(hi.x, c.x), std::max(hi.y, c.y), std::max(hi.z, c.z)};
    }
    const Vec3 ext = hi - lo;
    const int axis = ext.x >= ext.y && ext.x >= ext.z ? 0 : (ext.y >= ext.z ? 1 : 2);
    auto key = [&](std::uint32_t t) { return axis == 0 ? centroid[t].x : axis == 1 ? centroid[t].y : centroid[t].z; };
    const std::uint32_t half = count / 2;
    std::nth_element(order.begin() + first, order.begin() + first + half, order.begin() + first + count,
                     [&](std::uint32_t a, std::uint32_t b) { return key(a) < key(b) || (key(a) == key(b) && a < b); });
    const std::uint32_t left = static_cast<std::uint32_t>(boxes_.size());
    boxes_.emplace_back();
    boxes_.emplace_back();
    boxes_[slot].left = left;
    build(order, centroid, left, first, half);
    build(order, centroid, left + 1, first + half, count - half);
}

double TriangleTree::distance(Vec3 p, double upper) const {
    if (boxes_.empty()) return upper;
    double best2 = upper * upper;
    std::uint32_t stack[128];
    int n = 0;
    stack[n++] = 0;
    while (n > 0) {
        const Box& b = boxes_[stack[--n]];
        if (box_distance2(p, b.lo, b.hi) >= best2) continue;
        if (b.count) {
            for (std::uint32_t i = b.first; i < b.first + b.count; ++i) {
                const Vec3 q = closest_on_triangle(p, corners_[3 * i], corners_[3 * i + 1], corners_[3 * i + 2]);
                best2 = std::min(best2, dot(p - q, p - q));
            }
            continue;
        }
        const double dl = box_distance2(p, boxes_[b.left].lo, boxes_[b.left].hi);
        const double dr = box_distance2(p, boxes_[b.left + 1].lo, boxes_[b.left + 1].hi);
        if (n + 2 > 128) return std::sqrt(best2);  // cannot happen for a balanced tree
        // the nearer child is searched first (pushed last)
        if (dl <= dr) {
            stack[n++] = b.left + 1;
            stack[n++] = b.left;
        } else {
            stack[n++] = b.left;
            stack[n++] = b.left + 1;
        }
    }
    return std::sqrt(best2);
}

}  // namespace gm
