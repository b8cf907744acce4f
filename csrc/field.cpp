// the terrain field of docs/terrain.md: features, blends, analytic gradients, footprint index.
// gradient noise: Perlin 2002 "Improving Noise"; permutation seeded with SplitMix64
// (Steele, Lea & Flood 2014) and shuffled by Fisher-Yates.
#include "field.hpp"

#include "json.hpp"
#include "spec_rules.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numeric>

namespace gm {
namespace {

constexpr double kPi = 3.14159265358979323846;
const double kE4 = std::exp(-8.0);  // truncated Gaussian offset, G(4 sigma) = 0

double clamp01(double t) { return t < 0 ? 0 : (t > 1 ? 1 : t); }

// falloff F(t) = 1 - 3t^2 + 2t^3 on [0,1], 1 before, 0 after; and its derivative
void falloff(double t, double& f, double& df) {
    if (t <= 0) {
        f = 1;
        df = 0;
    } else if (t >= 1) {
        f = 0;
        df = 0;
    } else {
        f = 1 - t * t * (3 - 2 * t);
        df = 6 * t * (t - 1);
    }
}

// gradient of the angle theta(u, c) with respect to u (tangent, per radian)
Vec3 angle_grad(Vec3 u, Vec3 c, double theta) {
    double s = std::sin(theta);
    if (s <= 0) return {};
    return (1.0 / s) * (std::cos(theta) * u - c);
}

std::uint64_t splitmix64(std::uint64_t& state) {
    state += 0x9E3779B97F4A7C15ull;
    std::uint64_t z = state;
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

double fade(double t) { return t * t * t * (t * (t * 6 - 15) + 10); }
double dfade(double t) { return 30 * t * t * (t * (t - 2) + 1); }

// Perlin's corner gradients as a table: grad(h, x, y, z) = G[h & 15] . (x, y, z), the same
// values as the reference implementation's branches (h < 8 ? x : y, h < 4 ? y : h in {12,14} ? x : z)
struct Grad {
    double x, y, z;
};
constexpr Grad kGrad[16] = {
    {1, 1, 0}, {-1, 1, 0}, {1, -1, 0}, {-1, -1, 0}, {1, 0, 1}, {-1, 0, 1}, {1, 0, -1}, {-1, 0, -1},
    {0, 1, 1}, {0, -1, 1}, {0, 1, -1}, {0, -1, -1}, {1, 1, 0}, {0, -1, 1}, {-1, 1, 0}, {0, -1, -1},
};

template <bool WithGrad>
double perlin(const std::uint8_t* P, Vec3 q, Vec3* grad) {
    double fx = std::floor(q.x), fy = std::floor(q.y), fz = std::floor(q.z);
    int X = static_cast<int>(static_cast<long long>(fx) & 255);
    int Y = static_cast<int>(static_cast<long long>(fy) & 255);
    int Z = static_cast<int>(static_cast<long long>(fz) & 255);
    double x = q.x - fx, y = q.y - fy, z = q.z - fz;
    double u = fade(x), v = fade(y), w = fade(z);
    int A = P[X] + Y, B = P[X + 1] + Y;
    int AA = P[A] + Z, AB = P[A + 1] + Z, BA = P[B] + Z, BB = P[B + 1] + Z;
    const Grad& g000 = kGrad[P[AA] & 15];
    const Grad& g100 = kGrad[P[BA] & 15];
    const Grad& g010 = kGrad[P[AB] & 15];
    const Grad& g110 = kGrad[P[BB] & 15];
    const Grad& g001 = kGrad[P[AA + 1] & 15];
    const Grad& g101 = kGrad[P[BA + 1] & 15];
    const Grad& g011 = kGrad[P[AB + 1] & 15];
    const Grad& g111 = kGrad[P[BB + 1] & 15];
    double x1 = x - 1, y1 = y - 1, z1 = z - 1;
    double n000 = g000.x * x + g000.y * y + g000.z * z;
    double n100 = g100.x * x1 + g100.y * y + g100.z * z;
    double n010 = g010.x * x + g010.y * y1 + g010.z * z;
    double n110 = g110.x * x1 + g110.y * y1 + g110.z * z;
    double n001 = g001.x * x + g001.y * y + g001.z * z1;
    double n101 = g101.x * x1 + g101.y * y + g101.z * z1;
    double n011 = g011.x * x + g011.y * y1 + g011.z * z1;
    double n111 = g111.x * x1 + g111.y * y1 + g111.z * z1;
    // trilinear interpolation in the reference implementation's order
    double a0 = n000 + u * (n100 - n000), a1 = n010 + u * (n110 - n010);
    double a2 = n001 + u * (n101 - n001), a3 = n011 + u * (n111 - n011);
    double b0 = a0 + v * (a1 - a0), b1 = a2 + v * (a3 - a2);
    double value = b0 + w * (b1 - b0);
    if constexpr (WithGrad) {
        // the derivative of the trilinear blend of n_ijk = g_ijk . (x - i, y - j, z - k): the corner
        // gradients blended with the same weights, plus each weight's slope times the difference
        // it blends (about half the work of summing the eight corners' terms)
        const double du = dfade(x), dv = dfade(y), dw = dfade(z);
        auto blend = [&](double c000, double c100, double c010, double c110, double c001, double c101,
                         double c011, double c111) {
            const double e0 = c000 + u * (c100 - c000), e1 = c010 + u * (c110 - c010);
            const double e2 = c001 + u * (c101 - c001), e3 = c011 + u * (c111 - c011);
            const double f0 = e0 + v * (e1 - e0), f1 = e2 + v * (e3 - e2);
            return f0 + w * (f1 - f0);
        };
        const double ex0 = (n100 - n000) + v * ((n110 - n010) - (n100 - n000));
        const double ex1 = (n101 - n001) + v * ((n111 - n011) - (n101 - n001));
        const double ey0 = a1 - a0, ey1 = a3 - a2;
        grad->x = blend(g000.x, g100.x, g010.x, g110.x, g001.x, g101.x, g011.x, g111.x) + du * (ex0 + w * (ex1 - ex0));
        grad->y = blend(g000.y, g100.y, g010.y, g110.y, g001.y, g101.y, g011.y, g111.y) + dv * (ey0 + w * (ey1 - ey0));
        grad->z = blend(g000.z, g100.z, g010.z, g110.z, g001.z, g101.z, g011.z, g111.z) + dw * (b1 - b0);
    }
    return value;
}

// block local coordinate r*atan2(u.a, u.c) and its gradient
double local_coord(Vec3 u, Vec3 axis, Vec3 c, double r, Vec3& g) {
    double a = dot(u, axis), b = dot(u, c);
    double d = a * a + b * b;
    g = d > 0 ? (r / d) * (b * axis - a * c) : Vec3{};
    return r * std::atan2(a, b);
}

// polynomial smooth minimum with width k and gradient
double smin(double a, Vec3 ga, double b, Vec3 gb, double k, Vec3& g) {
    double h = clamp01(0.5 + 0.5 * (b - a) / k);
    double v = b * (1 - h) + a * h - k * h * (1 - h);
    Vec3 dh{};
    if (h > 0 && h < 1) dh = (0.5 / k) * (gb - ga);
    g = (1 - h) * gb + h * ga + (a - b) * dh - (k * (1 - 2 * h)) * dh;
    return v;
}


// the first column of feature row r (features[i], finite values) that breaks the rule table, as a problem line
// naming the field and its allowed range; empty when the row holds only allowed values. `kind`
// is set to the row's kind when its code is known.
std::string row_problem(const SpecRules& rules, const double* r, std::size_t i, const KindRules*& kind) {
    const std::string at = "features[" + std::to_string(i) + "]";  // r holds finite values
    kind = r[0] == std::floor(r[0]) && std::fabs(r[0]) < 1e9 ? rules.kind_by_code(static_cast<int>(r[0])) : nullptr;
    if (!kind) return at + ".kind: unknown kind code (allowed: the codes of " + rules.kind_list + "), got " + format_number(r[0]);
    auto column_of = [&](const std::string& key) {
        for (const SectionRules* s : {static_cast<const SectionRules*>(&rules.feature), static_cast<const SectionRules*>(kind)})
            for (const RowEntry& e : s->row)
                if (e.what == RowEntry::Value && e.key == key) return e.col;
        return -1;
    };
    for (const SectionRules* s : {static_cast<const SectionRules*>(&rules.feature), static_cast<const SectionRules*>(kind)}) {
        for (const RowEntry& e : s->row) {
            const double* x = r + e.col;
            if (e.what == RowEntry::Direction) {
                if (std::fabs(std::sqrt(x[0] * x[0] + x[1] * x[1] + x[2] * x[2]) - 1) > 1e-9)
                    return at + ": columns " + std::to_string(e.col) + ".." + std::to_string(e.col + 2) +
                           " (" + e.key + ", " + e.key2 + ") must be a unit vector";
                continue;
            }
            if (e.what != RowEntry::Value) continue;
            const FieldRule* f = s->field(e.key);
            if (!f) continue;
            if (!e.only_if_key.empty()) {
                const FieldRule* when = s->field(e.only_if_key);
                const int wc = column_of(e.only_if_key);
                if (!when || wc < 0) continue;
                const double w = r[wc];
                if (!(w >= 0 && w < static_cast<double>(when->values.size()) && w == std::floor(w))) continue;
                const std::string& name = when->values[static_cast<std::size_t>(w)];
                if (std::find(e.only_if_in.begin(), e.only_if_in.end(), name) == e.only_if_in.end()) continue;
            }
            Bounds b = f->bounds;
            std::string allowed = f->allowed;
            if (f->type == RuleType::Choice) {
                b = Bounds{};
                b.has_lo = b.has_hi = b.integer = true;
                b.hi = static_cast<double>(f->values.size()) - 1;
                allowed = "the codes 0 to " + format_number(b.hi) + " of " + f->allowed;
            } else if (e.radians) {
                b.lo *= kPi / 180.0;
                b.hi *= kPi / 180.0;
                allowed = b.describe() + " (radians)";
            }
            const std::string broken = b.broken(x[0]);
            if (!broken.empty())
                return at + "." + e.key + ": must be " + broken + " (allowed: " + allowed + "), got " + format_number(x[0]);
        }
    }
    for (const CheckRule& c : kind->checks) {
        if (c.rule != "at_most_min") continue;
        const int col = column_of(c.key);
        double limit = HUGE_VAL;
        for (const std::string& k : c.of_keys) limit = std::min(limit, column_of(k) >= 0 ? r[column_of(k)] : HUGE_VAL);
        const FieldRule* f = kind->field(c.key);
        if (col >= 0 && f && r[col] > limit)
            return at + "." + c.key + ": must be <= " + format_number(limit) + " (allowed: " + f->allowed +
                   "), got " + format_number(r[col]);
    }
    return {};
}

}  // namespace

Status Field::init(double radius_m, const double* rows, std::size_t n, std::string& error) {
    if (!(radius_m > 0) || !std::isfinite(radius_m)) {
        error = "radius_m must be a finite number > 0";
        return Status::InvalidArgument;
    }
    radius_ = radius_m;
    features_.clear();
    perms_.clear();
    has_steps_ = false;
    steps_.clear();
    creases_.clear();
    const double R = radius_m;
    for (std::size_t i = 0; i < n; ++i) {
        const double* r = rows + i * kFeatureColumns;
        for (int j = 0; j < kFeatureColumns; ++j) {
            if (!std::isfinite(r[j])) {
                error = "features[" + std::to_string(i) + "] has a non-finite value in column " +
                        std::to_string(j);
                return Status::NonFinite;
            }
        }
        // the columns the rule table's row entries fill must hold values the table allows (the
        // spec loaders check the same rules on the fields; a row from elsewhere is checked here)
        const KindRules* rule = nullptr;
        error = row_problem(spec_rules(), r, i, rule);
        if (!error.empty()) return Status::InvalidArgument;
        Feature f;
        f.kind = static_cast<Kind>(rule->code);
        f.blend = static_cast<Blend>(static_cast<int>(r[1]));
        f.k = r[2];
        f.c = normalize({r[3], r[4], r[5]});
        f.c1 = normalize({r[6], r[7], r[8]});
        for (int j = 0; j < 7; ++j) f.prm[j] = r[9 + j];
        // guards of the derived geometry below (degenerate frames, tangents past 90 degrees); the
        // spec loaders refuse the same cases with the table's (stricter) rules
        auto bad = [&](const char* what) {
            error = "features[" + std::to_string(i) + "]." + what;
            return Status::InvalidArgument;
        };
        double* p = f.prm;
        f.cap_c = f.c;
        switch (f.kind) {
            case Kind::Hill:
                f.cap_angle = std::min(kPi, 4 * p[1] / R);
                f.scale_m = p[1];
                f.amp_m = std::fabs(p[0]);
                break;
            case Kind::Mesa:
                f.cap_angle = std::min(kPi, (p[1] + p[2]) / R);
                f.scale_m = p[1];
                f.amp_m = std::fabs(p[0]);
                f.step = p[2] == 0;
                break;
            case Kind::Block: {
                double ex = (p[1] + p[4]) / R, ey = (p[2] + p[4]) / R;
                if (ex >= kPi / 3 || ey >= kPi / 3) return bad("footprint must stay within 60 degrees of its centre");
                Vec3 up{0, 1, 0};
                if (std::fabs(f.c.y) > 1 - 1e-9) up = {0, 0, 1};
                Vec3 north = normalize(up - dot(up, f.c) * f.c);
                Vec3 east = cross(north, f.c);
                double hd = p[5];
                f.ax = std::cos(hd) * east + std::sin(hd) * north;
                f.ay = -std::sin(hd) * east + std::cos(hd) * north;
                double tx = std::tan(ex), ty = std::tan(ey);
                f.cap_angle = std::atan(std::sqrt(tx * tx + ty * ty));
                f.scale_m = std::min(p[1], p[2]);
                f.amp_m = std::fabs(p[0]);
                f.step = p[4] == 0;
                break;
            }
            case Kind::Crater:
                f.cap_angle = std::min(kPi, (p[1] + p[3]) / R);
                f.scale_m = std::min(p[1], p[3]);
                f.amp_m = p[0] + p[2];
                break;
            case Kind::Ridge: {
                double arc = angle(f.c, f.c1);
                if (!(arc > 1e-12) || arc > kPi * 179.0 / 180.0) return bad("arc angle must be in (0, 179] degrees");
                f.ax = normalize(cross(f.c, f.c1));
                f.cap_c = normalize(f.c + f.c1);
                f.cap_angle = std::min(kPi, 0.5 * arc + p[1] / R);
                f.scale_m = p[1];
                f.amp_m = std::fabs(p[0]);
                break;
            }
            case Kind::Noise: {
                f.cap_angle = 4;  // everywhere
                std::array<std::uint8_t, 512> P{};
                std::array<int, 256> perm{};
                std::iota(perm.begin(), perm.end(), 0);
                std::uint64_t state = static_cast<std::uint64_t>(p[4]);
                for (int a = 255; a >= 1; --a) {
                    std::uint64_t j = splitmix64(state) % static_cast<std::uint64_t>(a + 1);
                    std::swap(perm[a], perm[j]);
                }
                for (int a = 0; a < 512; ++a) P[a] = static_cast<std::uint8_t>(perm[a & 255]);
                f.noise_table = static_cast<int>(perms_.size());
                perms_.push_back(P);
                // finest octave: wavelength 1 / (f 2^(n-1)); amplitude bound A * sum g^k
                int oct = static_cast<int>(p[2]);
                double amp = 0, g = 1;
                for (int o = 0; o < oct; ++o, g *= p[3]) amp += g;
                f.amp_m = std::fabs(p[0]) * amp;
                f.scale_m = 1.0 / (p[1] * std::ldexp(1.0, oct - 1));
                break;
            }
        }
        has_steps_ = has_steps_ || f.step;
        if (f.step) steps_.push_back(static_cast<std::uint32_t>(features_.size()));
        f.cap_cos = std::cos(std::min(f.cap_angle, kPi));
        f.cap_sin = std::sin(std::min(f.cap_angle, kPi));
        f.outside_cos = f.cap_angle < kPi ? f.cap_cos - 1e-12 : -2.0;
        features_.push_back(f);
        if (has_creases(features_.size() - 1)) creases_.push_back(static_cast<std::uint32_t>(features_.size() - 1));
    }
    widen_blend_amplitudes();
    build_index();
    return Status::Ok;
}

// max, min and set (smooth or not) move H towards the profile, so such a feature can also undo
// what the earlier features beneath it built: a 1 mm `set` disc at height 0 on a 40 m hill digs a
// 40 m pit. |H| before feature i is at most the sum over the earlier features whose footprints
// meet i's of their amplitude (a blend's result lies between H and p; a smooth one undershoots by
// at most k/4, the polynomial smooth minimum's largest dip), so that sum is added to amp_m. exact
// footprint overlaps while the pairs stay few; beyond that the sum over all earlier features (a
// looser bound that never understates)
void Field::widen_blend_amplitudes() {
    const std::size_t n = features_.size();
    std::size_t blended = 0;
    for (const Feature& f : features_) blended += f.blend != Blend::Add;
    if (blended == 0) return;
    const bool exact = blended * n <= 20000000;
    std::vector<double> own(n);
    for (std::size_t j = 0; j < n; ++j) {
        const Feature& g = features_[j];
        const bool smooth = g.blend == Blend::SmoothMax || g.blend == Blend::SmoothMin;
        own[j] = g.amp_m + (smooth ? 0.25 * g.k : 0.0);
    }
    double prefix = 0;
    for (std::size_t i = 0; i < n; ++i) {
        Feature& f = features_[i];
        if (f.blend != Blend::Add) {
            double below = 0;
            if (!exact) {
                below = prefix;
            } else {
                for (std::size_t j = 0; j < i; ++j) {
                    const Feature& g = features_[j];
                    if (f.cap_angle >= kPi || g.cap_angle >= kPi ||
                        angle(f.cap_c, g.cap_c) <= f.cap_angle + g.cap_angle)
                        below += own[j];
                }
            }
            f.amp_m = own[i] + below;
        }
        prefix += own[i];
    }
}

void Field::contribution(const Feature& f, Vec3 u, bool want_grad, Contribution& o) const {
    const double R = radius_;
    const double* p = f.prm;
    o = Contribution{};
    // surely outside the footprint cap, where every profile below gives weight 0: skip the
    // angle (an atan2) and the profile
    if (dot(u, f.cap_c) < f.outside_cos) return;
    switch (f.kind) {
        case Kind::Hill: {
            double th = angle(u, f.c), d = R * th, s = p[1];
            if (d >= 4 * s) return;
            double e = std::exp(-d * d / (2 * s * s));
            o.p = p[0];
            o.m = (e - kE4) / (1 - kE4);
            if (want_grad) o.gm = (-d / (s * s) * e / (1 - kE4) * R) * angle_grad(u, f.c, th);
            return;
        }
        case Kind::Mesa: {
            double th = angle(u, f.c), d = R * th, a = p[1], w = p[2];
            if (w == 0) {
                o.p = p[0];
                o.m = d <= a ? 1 : 0;
                return;
            }
            if (d >= a + w) return;
            double fv, df;
            falloff((d - a) / w, fv, df);
            o.p = p[0];
            o.m = fv;
            if (want_grad && df != 0) o.gm = (df / w * R) * angle_grad(u, f.c, th);
            return;
        }
        case Kind::Block: {
            Vec3 gx, gy;
            double x = local_coord(u, f.ax, f.c, R, gx);
            double y = local_coord(u, f.ay, f.c, R, gy);
            if (dot(u, f.c) <= 0) return;
            double hx = p[1], hy = p[2], r = p[3], w = p[4];
            double sx = x < 0 ? -1.0 : 1.0, sy = y < 0 ? -1.0 : 1.0;
            double qx = std::fabs(x) - (hx - r), qy = std::fabs(y) - (hy - r);
            double mx = std::max(qx, 0.0), my = std::max(qy, 0.0);
            double out = std::sqrt(mx * mx + my * my);
            double s = out + std::min(std::max(qx, qy), 0.0) - r;
            Vec3 gs{};
            if (want_grad) {
                if (out > 0)
                    gs = (mx * sx / out) * gx + (my * sy / out) * gy;
                else
                    gs = qx > qy ? sx * gx : sy * gy;
            }
            o.p = p[0];
            if (w == 0) {
                o.m = s <= 0 ? 1 : 0;
                return;
            }
            if (s >= w) {
                o.p = 0;
                return;
            }
            double fv, df;
            falloff(s / w, fv, df);
            o.m = fv;
            if (want_grad && df != 0) o.gm = (df / w) * gs;
            return;
        }
        case Kind::Crater: {
            double th = angle(u, f.c), d = R * th;
            double D = p[0], a = p[1], hr = p[2], wr = p[3];
            if (d >= a + wr) return;
            if (d <= a) {
                o.p = -D + (D + hr) * (d / a) * (d / a);
                o.m = 1;
                if (want_grad) o.gp = (2 * (D + hr) * d / (a * a) * R) * angle_grad(u, f.c, th);
                return;
            }
            double fv, df;
            falloff((d - a) / wr, fv, df);
            o.p = hr;
            o.m = fv;
            if (want_grad && df != 0) o.gm = (df / wr * R) * angle_grad(u, f.c, th);
            return;
        }
        case Kind::Ridge: {
            Vec3 n = f.ax;
            double un = dot(u, n);
            Vec3 q = u - un * n;
            double delta;
            Vec3 gd{};
            if (dot(cross(f.c, q), n) >= 0 && dot(cross(q, f.c1), n) >= 0) {
                double a = std::min(1.0, std::fabs(un));
                delta = R * std::asin(a);
                if (want_grad && a < 1) gd = ((un < 0 ? -R : R) / std::sqrt(1 - a * a)) * n;
            } else {
                double t0 = angle(u, f.c), t1 = angle(u, f.c1);
                if (t0 <= t1) {
                    delta = R * t0;
                    if (want_grad) gd = R * angle_grad(u, f.c, t0);
                } else {
                    delta = R * t1;
                    if (want_grad) gd = R * angle_grad(u, f.c1, t1);
                }
            }
            double b = p[1], s = delta / b;
            if (s >= 1) return;
            double k, dk;
            if (p[2] == 0) {
                k = (1 - s * s) * (1 - s * s);
                dk = -4 * s * (1 - s * s);
            } else {
                k = 1 - s;
                dk = -1;
            }
            o.p = p[0];
            o.m = k;
            if (want_grad) o.gm = (dk / b) * gd;
            return;
        }
        case Kind::Noise: {
            o.m = 1;
            o.p = noise(f, u, want_grad ? &o.gp : nullptr);
            return;
        }
    }
}

double Field::max_change_over(std::size_t i, const Cap& cap) const {
    const Feature& f = features_[i];
    if (f.kind != Kind::Hill) return f.amp_m;
    const double R = radius_, s = f.prm[1];
    const double d = R * std::max(0.0, angle(cap.c, f.c) - cap.angle);
    if (d >= 4 * s) return 0;
    // the weight falls with the distance from the centre: its largest value is at the nearest
    // point (rounded up by a part in 10^12, a margin for the cap's own rounding)
    const double w = (std::exp(-d * d / (2 * s * s)) - kE4) / (1 - kE4);
    return f.amp_m * std::min(1.0, w * (1 + 1e-12));
}

double Field::noise(const Feature& f, Vec3 u, Vec3* grad) const {
    const std::uint8_t* P = perms_[static_cast<std::size_t>(f.noise_table)].data();
    const double* p = f.prm;
    int oct = static_cast<int>(p[2]);
    double scale = p[1] * radius_, amp = 1, sum = 0;
    Vec3 g{};
    for (int k = 0; k < oct; ++k) {
        Vec3 off{19.19 * k, 47.11 * k, 73.37 * k};
        Vec3 gk;
        sum += amp * (grad ? perlin<true>(P, scale * u + off, &gk) : perlin<false>(P, scale * u + off, nullptr));
        if (grad) g += (amp * scale) * gk;
        amp *= p[3];
        scale *= 2;
    }
    if (grad) *grad = p[0] * g;
    return p[0] * sum;
}

double Field::eval(Vec3 u, const std::uint32_t* list, std::size_t count, Vec3* grad, int force,
                   double force_m) const {
    EvalTally& tally = tl_eval_tally;
    ++tally.points;
    tally.terms += count;
    double H = 0;
    Vec3 G{};
    const bool wg = grad != nullptr;
    for (std::size_t i = 0; i < count; ++i) {
        const Feature& f = features_[list[i]];
        Contribution c;
        contribution(f, u, wg, c);
        if (static_cast<int>(list[i]) == force) {
            if (c.m == 0 && force_m != 0) {
                // step feature evaluated just outside its rim: its profile value is constant
                c.p = f.prm[0];
            }
            c.m = force_m;
            c.gm = {};
        }
        if (c.m == 0) continue;  // outside the footprint: exactly no change
        if (f.blend == Blend::Add) {
            H += c.m * c.p;
            if (wg) G += c.m * c.gp + c.p * c.gm;
            continue;
        }
        double X;
        Vec3 gX{};
        switch (f.blend) {
            case Blend::Max:
                if (c.p > H) {
                    X = c.p;
                    gX = c.gp;
                } else {
                    X = H;
                    gX = G;
                }
                break;
            case Blend::Min:
                if (c.p < H) {
                    X = c.p;
                    gX = c.gp;
                } else {
                    X = H;
                    gX = G;
                }
                break;
            case Blend::Set:
                X = c.p;
                gX = c.gp;
                break;
            case Blend::SmoothMin:
                X = smin(H, G, c.p, c.gp, f.k, gX);
                break;
            case Blend::SmoothMax:
            default:
                X = -smin(-H, -G, -c.p, -c.gp, f.k, gX);
                gX = -gX;
                break;
        }
        double diff = X - H;
        if (wg) G = G + diff * c.gm + c.m * (gX - G);
        H = H + c.m * diff;
    }
    if (wg) *grad = tangent(G, u);
    return H;
}

namespace {

// cube map: face 0 +x, 1 -x, 2 +y, 3 -y, 4 +z, 5 -z; on each face the coordinates (s, t) in
// [-1, 1]^2 are the other two components divided by the largest one's magnitude
Vec3 face_direction(int face, double s, double t) {
    double sg = (face % 2 == 0) ? 1.0 : -1.0;
    if (face < 2) return normalize({sg, s, t});
    if (face < 4) return normalize({s, sg, t});
    return normalize({s, t, sg});
}

int face_coords(Vec3 u, double& s, double& t) {
    double ax = std::fabs(u.x), ay = std::fabs(u.y), az = std::fabs(u.z);
    if (!(ax + ay + az > 0)) {
        s = t = 0;
        return 0;
    }
    if (ax >= ay && ax >= az) {
        s = u.y / ax;
        t = u.z / ax;
        return u.x > 0 ? 0 : 1;
    }
    if (ay >= az) {
        s = u.x / ay;
        t = u.z / ay;
        return u.y > 0 ? 2 : 3;
    }
    s = u.x / az;
    t = u.y / az;
    return u.z > 0 ? 4 : 5;
}

// a cell of the cube-map quadtree: face, level and position (i, j) among the 2^level x 2^level
// cells of the face. its corners are dyadic fractions, exact in double, so they equal the
// midpoints a query computes while it descends.
struct QuadCell {
    int face = 0, level = 0;
    std::uint32_t i = 0, j = 0;
    std::uint32_t node = 0;               // its node in the index
    std::size_t start = 0, count = 0;     // its list in the build's pool
};

// the cap around the cell: centre the direction of the cell's middle, radius the largest angle
// to a corner (a spherical quadrilateral of great-circle arcs within a hemisphere lies in the
// cap through its corners), plus a margin for rounding
Cap bounding_cap(const QuadCell& c) {
    double w = std::ldexp(1.0, 1 - c.level);
    double s0 = -1 + w * c.i, s1 = s0 + w, t0 = -1 + w * c.j, t1 = t0 + w;
    Cap cap;
    cap.c = face_direction(c.face, 0.5 * (s0 + s1), 0.5 * (t0 + t1));
    for (Vec3 corner : {face_direction(c.face, s0, t0), face_direction(c.face, s0, t1),
                        face_direction(c.face, s1, t0), face_direction(c.face, s1, t1)})
        cap.angle = std::max(cap.angle, angle(cap.c, corner));
    cap.angle += 1e-9;
    return cap;
}

}  // namespace

std::size_t Field::index_bound_bytes(std::size_t features) {
    return std::max<std::size_t>(std::size_t{16} << 20, 128 * features);
}

std::size_t Field::cell_of(Vec3 u) const {
    double s, t;
    std::size_t id = static_cast<std::size_t>(face_coords(u, s, t));
    double s0 = -1, s1 = 1, t0 = -1, t1 = 1;
    while (index_nodes_[id].child >= 0) {
        double sm = 0.5 * (s0 + s1), tm = 0.5 * (t0 + t1);
        std::size_t q = 0;
        if (s >= sm) {
            q += 2;
            s0 = sm;
        } else {
            s1 = sm;
        }
        if (t >= tm) {
            q += 1;
            t0 = tm;
        } else {
            t1 = tm;
        }
        id = static_cast<std::size_t>(index_nodes_[id].child) + q;
    }
    return id;
}

void Field::build_index() {
    // breadth first, one level at a time, so that when the memory bound stops splitting it
    // stops at the same depth everywhere rather than starving one side of the sphere.
    // a cell splits when it lists more than kIndexLeafItems features and either
    // - its children together list at most kSplitGrowth times as many (the split pays: a query
    //   in an average child scans fewer), or
    // - most of its features have footprints under half the cell's size: those lie in few
    //   children one level or two further down (a cluster on the cell's middle, the corner of
    //   all four children, is separated at the next level).
    // a feature that covers a cell lands in every child, so cells stop at about the size of the
    // footprints that crowd them; the memory bound caps the rest.
    constexpr double kSplitGrowth = 2.5;
    const std::size_t bound = index_bound_bytes(features_.size());
    index_nodes_.assign(6, IndexNode{});
    index_items_.clear();
    std::vector<QuadCell> cur, next;
    std::vector<std::uint32_t> cur_items, next_items;
    auto bytes = [&]() {
        return sizeof(IndexNode) * index_nodes_.size() +
               sizeof(std::uint32_t) * (index_items_.size() + cur_items.size() + next_items.size());
    };
    // the features of `list` whose footprints touch cell c, appended to `out`
    auto gather = [&](QuadCell& c, const std::uint32_t* list, std::size_t count, bool all,
                      std::vector<std::uint32_t>& out) {
        Cap cap = bounding_cap(c);
        double cc = std::cos(cap.angle), sc = std::sin(cap.angle);
        c.start = out.size();
        for (std::size_t k = 0; k < count; ++k) {
            std::uint32_t f = all ? static_cast<std::uint32_t>(k) : list[k];
            if (touches(f, cap, cc, sc)) out.push_back(f);
        }
        c.count = out.size() - c.start;
        return cap;
    };
    for (int face = 0; face < 6; ++face) {
        QuadCell c;
        c.face = face;
        c.node = static_cast<std::uint32_t>(face);
        gather(c, nullptr, features_.size(), true, cur_items);
        cur.push_back(c);
    }
    while (!cur.empty()) {
        next.clear();
        next_items.clear();
        for (const QuadCell& c : cur) {
            const std::uint32_t* list = cur_items.data() + c.start;
            bool split = c.count > kIndexLeafItems && c.level < kIndexMaxDepth &&
                         bytes() + 4 * sizeof(IndexNode) <= bound;
            if (split) {
                const std::size_t mark = next_items.size();
                double half = 0;
                std::size_t sum = 0;
                for (std::uint32_t q = 0; q < 4; ++q) {
                    QuadCell k;
                    k.face = c.face;
                    k.level = c.level + 1;
                    k.i = 2 * c.i + (q >> 1);
                    k.j = 2 * c.j + (q & 1);
                    k.node = static_cast<std::uint32_t>(index_nodes_.size()) + q;
                    half = gather(k, list, c.count, false, next_items).angle;  // about half the cell
                    sum += k.count;
                    next.push_back(k);
                }
                bool pays = static_cast<double>(sum) <= kSplitGrowth * static_cast<double>(c.count);
                if (!pays) {
                    std::size_t small = 0;
                    for (std::size_t k = 0; k < c.count; ++k)
                        small += features_[list[k]].cap_angle < half;
                    pays = 2 * small > c.count;
                }
                split = pays && bytes() + 4 * sizeof(IndexNode) <= bound;
                if (split) {
                    index_nodes_[c.node].child = static_cast<std::int32_t>(index_nodes_.size());
                    index_nodes_.resize(index_nodes_.size() + 4);
                } else {
                    next_items.resize(mark);
                    next.resize(next.size() - 4);
                }
            }
            if (!split) {
                IndexNode& node = index_nodes_[c.node];
                node.start = static_cast<std::uint32_t>(index_items_.size());
                node.count = static_cast<std::uint32_t>(c.count);
                index_items_.insert(index_items_.end(), list, list + c.count);
            }
        }
        std::swap(cur, next);
        std::swap(cur_items, next_items);
    }
    index_nodes_.shrink_to_fit();
    index_items_.shrink_to_fit();
}

Field::IndexStats Field::index_stats() const {
    IndexStats st;
    st.nodes = index_nodes_.size();
    st.items = index_items_.size();
    st.bytes = sizeof(IndexNode) * st.nodes + sizeof(std::uint32_t) * st.items;
    // depth by walking down from the roots (children always follow their parent)
    std::vector<int> depth(index_nodes_.size(), 0);
    for (std::size_t id = 0; id < index_nodes_.size(); ++id) {
        const IndexNode& n = index_nodes_[id];
        if (n.child >= 0) {
            for (std::size_t q = 0; q < 4; ++q) depth[static_cast<std::size_t>(n.child) + q] = depth[id] + 1;
            continue;
        }
        ++st.leaves;
        st.longest = std::max<std::size_t>(st.longest, n.count);
        st.depth = std::max(st.depth, depth[id]);
    }
    return st;
}

void Field::candidates(Vec3 u, const std::uint32_t*& list, std::size_t& count) const {
    const IndexNode& leaf = index_nodes_[cell_of(u)];
    list = index_items_.data() + leaf.start;
    count = leaf.count;
}

double Field::eval(Vec3 u, Vec3* grad) const {
    const std::uint32_t* list;
    std::size_t count;
    candidates(u, list, count);
    return eval(u, list, count, grad);
}

bool Field::touches(std::size_t fi, const Cap& cap) const {
    return touches(fi, cap, std::cos(cap.angle), std::sin(cap.angle));
}

bool Field::touches(std::size_t fi, const Cap& cap, double cap_cos, double cap_sin) const {
    const Feature& f = features_[fi];
    if (f.cap_angle >= kPi) return true;
    if (f.cap_angle + cap.angle >= kPi) return true;
    // cos(a + b) = cos a cos b - sin a sin b
    return dot(f.cap_c, cap.c) >= f.cap_cos * cap_cos - f.cap_sin * cap_sin - 1e-12;
}

double Field::finest_wavelength(double amplitude_m) const {
    double best = std::numeric_limits<double>::infinity();
    for (const Feature& f : features_) {
        if (f.kind != Kind::Noise) continue;
        double a = std::fabs(f.prm[0]), lam = 1.0 / f.prm[1];
        for (int k = 0; k < static_cast<int>(f.prm[2]); ++k, a *= f.prm[3], lam *= 0.5)
            if (a > amplitude_m) best = std::min(best, lam);
    }
    return best;
}

bool Field::has_creases(std::size_t fi) const {
    const Feature& f = features_[fi];
    return f.kind == Kind::Crater || (f.kind == Kind::Ridge && f.prm[2] != 0);
}

int Field::crease_points(std::size_t fi, Vec3 c, double reach, Vec3* out) const {
    const Feature& f = features_[fi];
    const double R = radius_;
    int n = 0;
    // the point at angle a from centre k, on the great circle through k and dir
    auto toward = [](Vec3 k, Vec3 dir, double a, Vec3& p) {
        Vec3 t = dir - dot(dir, k) * k;
        double tn = norm(t);
        if (!(tn > 1e-15)) return false;
        p = std::cos(a) * k + (std::sin(a) / tn) * t;
        return true;
    };
    // p0 and 16 more points along the circle about axis k through p0, spread over +-reach (an
    // arc on the unit sphere); rotation by Rodrigues' formula
    auto along = [&](Vec3 k, Vec3 p0) {
        double r = std::sin(angle(k, p0));
        if (!(r > 1e-12) || n + 17 > kMaxCreasePoints) return;
        out[n++] = p0;
        for (int j = -8; j <= 8; ++j) {
            if (j == 0) continue;
            double phi = (j / 8.0) * reach / r;
            Vec3 q = std::cos(phi) * p0 + std::sin(phi) * cross(k, p0) + (1 - std::cos(phi)) * dot(k, p0) * k;
            out[n++] = q;
        }
    };
    Vec3 p;
    if (f.kind == Kind::Crater) {
        if (toward(f.c, c, f.prm[1] / R, p)) along(f.c, p);  // the rim crest
        return n;
    }
    if (f.kind != Kind::Ridge || f.prm[2] == 0) return 0;
    Vec3 pole = f.ax;
    double b = f.prm[1] / R;
    Vec3 q = c - dot(c, pole) * pole;
    double qn = norm(q);
    if (qn > 1e-15) {
        Vec3 crest = (1.0 / qn) * q;
        along(pole, crest);                                 // the crest line
        if (toward(crest, c, b, p)) along(pole, p);         // the foot on c's side
    }
    Vec3 tip = angle(c, f.c) <= angle(c, f.c1) ? f.c : f.c1;
    if (n < kMaxCreasePoints) out[n++] = tip;               // the cone tip at the nearer end
    if (toward(tip, c, b, p)) along(tip, p);                // the foot around it
    return n;
}

bool Field::same_feature(std::size_t i, const Field& other, std::size_t j) const {
    const Feature& a = features_[i];
    const Feature& b = other.features_[j];
    auto eq = [](Vec3 u, Vec3 v) { return u.x == v.x && u.y == v.y && u.z == v.z; };
    return a.kind == b.kind && a.blend == b.blend && a.k == b.k && eq(a.c, b.c) && eq(a.c1, b.c1) &&
           std::equal(std::begin(a.prm), std::end(a.prm), std::begin(b.prm));
}

double Field::reach_angle(std::size_t i) const {
    const Feature& f = features_[i];
    return f.step ? f.cap_angle + std::fabs(f.amp_m) / radius_ : f.cap_angle;
}

double Field::wall_distance(Vec3 p) const {
    Vec3 q;
    return wall_point(p, q);
}

// the direction of step feature f's rim point nearest direction u (false: none, at a mesa's very
// centre or on a block's far side)
bool Field::rim_direction(const Feature& f, Vec3 u, Vec3& w) const {
    const double R = radius_;
    if (f.kind == Kind::Mesa) {
        Vec3 t = u - dot(u, f.c) * f.c;
        double tn = norm(t);
        if (tn < 1e-15) return false;  // at the very centre the rim is far
        double a = f.prm[1] / R;
        w = std::cos(a) * f.c + (std::sin(a) / tn) * t;
        return true;
    }
    if (dot(u, f.c) <= 0) return false;
    Vec3 gx, gy;
    double x = local_coord(u, f.ax, f.c, R, gx);
    double y = local_coord(u, f.ay, f.c, R, gy);
    double hx = f.prm[1], hy = f.prm[2], r = f.prm[3];
    double sx = x < 0 ? -1.0 : 1.0, sy = y < 0 ? -1.0 : 1.0;
    double qx = std::fabs(x) - (hx - r), qy = std::fabs(y) - (hy - r);
    double mx = std::max(qx, 0.0), my = std::max(qy, 0.0);
    double out = std::sqrt(mx * mx + my * my);
    double xs, ys;
    if (out > 0) {
        // closest point on the corner arc or straight side
        double s = out - r;
        xs = x - sx * s * mx / out;
        ys = y - sy * s * my / out;
    } else if (qx > qy) {
        xs = sx * hx;
        ys = y;
    } else {
        xs = x;
        ys = sy * hy;
    }
    w = normalize(f.c + std::tan(xs / R) * f.ax + std::tan(ys / R) * f.ay);
    return true;
}

double Field::wall_point(Vec3 p, Vec3& q, double* foot, double* top) const {
    double best = std::numeric_limits<double>::infinity();
    q = p;
    if (foot) *foot = norm(p);
    if (top) *top = norm(p);
    const double R = radius_;
    Vec3 u = normalize(p);
    for (std::uint32_t fi : steps_) {
        const Feature& f = features_[fi];
        if (f.cap_angle < kPi && angle(u, f.cap_c) > reach_angle(fi)) continue;
        Vec3 w;  // direction of the closest rim point
        if (!rim_direction(f, u, w)) continue;
        // the wall segment at rim direction x and p's distance to it
        auto segment = [&](Vec3 x, double& lo, double& hi) {
            const std::uint32_t* cl;
            std::size_t cc;
            candidates(x, cl, cc);
            double h_in = eval(x, cl, cc, nullptr, static_cast<int>(fi), 1.0);
            double h_out = eval(x, cl, cc, nullptr, static_cast<int>(fi), 0.0);
            lo = R + std::min(h_in, h_out);
            hi = R + std::max(h_in, h_out);
            return norm(p - std::min(std::max(dot(p, x), lo), hi) * x);
        };
        auto take = [&](Vec3 x, double d, double lo, double hi) {
            if (d < best) {
                best = d;
                q = std::min(std::max(dot(p, x), lo), hi) * x;
                if (foot) *foot = lo;
                if (top) *top = hi;
            }
        };
        double lo, hi;
        double d = segment(w, lo, hi);
        take(w, d, lo, hi);
        // where another step feature's rim crosses this one, the segment's span changes along the
        // rim (one side of the crossing inside the other feature, the other side outside): rim
        // points up to the distance found away along the rim, each with its own span, in rounds
        // that narrow with it. only where another step feature reaches the rim point: a function
        // of the features near p alone
        bool crossed = false;
        for (std::uint32_t fj : steps_)
            if (fj != fi && (features_[fj].cap_angle >= kPi || angle(w, features_[fj].cap_c) <= reach_angle(fj))) {
                crossed = true;
                break;
            }
        if (!crossed) continue;
        Vec3 along = cross(w, tangent(u - w, w));
        if (!(norm(along) > 1e-15)) along = cross(w, tangent(f.c, w));
        if (!(norm(along) > 1e-15)) continue;
        along = normalize(along);
        double reach = d;
        for (int round = 0; round < kCrossRounds; ++round) {
            const double before = reach;
            for (int k = -kCrossSteps; k <= kCrossSteps; ++k) {
                if (k == 0) continue;
                Vec3 x;
                if (!rim_direction(f, normalize(w + (before * k / (kCrossSteps * R)) * along), x)) continue;
                const double dx = segment(x, lo, hi);
                take(x, dx, lo, hi);
                reach = std::min(reach, dx);
            }
            if (!(reach < 0.5 * before)) break;
        }
    }
    return best;
}

}  // namespace gm
