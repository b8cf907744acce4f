// ear clipping: Meisters 1975, "Polygons have ears" (every simple polygon with more than three
// vertices has two non-overlapping ears). an ear is clipped at a time; of all the ears, the one
// whose triangle has the best shape (area over the sum of squared edge lengths), so the result
// has fewer slivers than taking the first ear found.
#include "ear_clip.hpp"

#include <algorithm>
#include <cmath>
#include <cstddef>

namespace gm {

namespace {

class Clipper {
public:
    Clipper(const std::vector<std::uint32_t>& ids, const std::vector<double>& x, const std::vector<double>& y,
            const std::vector<OnEdges>& on)
        : ids_(ids), x_(x), y_(y), on_(on), v_(ids.size()) {
        for (std::size_t i = 0; i < v_.size(); ++i) v_[i] = static_cast<int>(i);
        double scale = 0;
        for (std::size_t i = 0; i < ids.size(); ++i)
            scale = std::max({scale, std::fabs(x[i] - x[0]), std::fabs(y[i] - y[0])});
        eps_ = 1e-12 * scale * scale;
    }

    bool run(std::vector<std::uint32_t>& out) {
        while (v_.size() > 3) {
            const int best = best_ear();
            if (best < 0) return false;
            const std::size_t i = static_cast<std::size_t>(best), n = v_.size();
            emit(v_[(i + n - 1) % n], v_[i], v_[(i + 1) % n], out);
            v_.erase(v_.begin() + static_cast<std::ptrdiff_t>(i));
        }
        if (v_.size() == 3) {
            if (cross(v_[0], v_[1], v_[2]) <= eps_ || blocked(v_[0], v_[1], v_[2])) return false;
            emit(v_[0], v_[1], v_[2], out);
        }
        return true;
    }

private:
    double cross(int a, int b, int c) const {
        return (x_[b] - x_[a]) * (y_[c] - y_[a]) - (y_[b] - y_[a]) * (x_[c] - x_[a]);
    }
    const OnEdges& on(int p) const { return on_[static_cast<std::size_t>(p)]; }

    // a diagonal a-c along a chunk edge must not pass over another polygon vertex on that edge,
    // and three vertices on one chunk edge never make an ear
    bool blocked(int a, int b, int c) const {
        const OnEdges& A = on(a);
        for (int i = 0; i < A.n; ++i) {
            double tc, tb;
            if (!on(c).find(A.e[i], tc)) continue;
            if (on(b).find(A.e[i], tb)) return true;
            const double lo = std::min(A.t[i], tc), hi = std::max(A.t[i], tc);
            for (int p : v_) {
                double tp;
                if (p != a && p != c && on(p).find(A.e[i], tp) && tp > lo && tp < hi) return true;
            }
        }
        return false;
    }

    // no other polygon vertex inside or on the triangle a, b, c
    bool empty(int a, int b, int c) const {
        for (int p : v_) {
            if (p == a || p == b || p == c) continue;
            if (cross(a, b, p) >= -eps_ && cross(b, c, p) >= -eps_ && cross(c, a, p) >= -eps_) return false;
        }
        return true;
    }

    // proportional to the shape quality of the triangle: area over the sum of squared edges
    double quality(int a, int b, int c, double area) const {
        const double l = (x_[b] - x_[a]) * (x_[b] - x_[a]) + (y_[b] - y_[a]) * (y_[b] - y_[a]) +
                         (x_[c] - x_[b]) * (x_[c] - x_[b]) + (y_[c] - y_[b]) * (y_[c] - y_[b]) +
                         (x_[a] - x_[c]) * (x_[a] - x_[c]) + (y_[a] - y_[c]) * (y_[a] - y_[c]);
        return area / l;
    }

    // the position in v_ of the best-shaped ear (-1: none)
    int best_ear() const {
        int best = -1;
        double best_q = -1;
        const std::size_t n = v_.size();
        for (std::size_t i = 0; i < n; ++i) {
            const int a = v_[(i + n - 1) % n], b = v_[i], c = v_[(i + 1) % n];
            const double area = cross(a, b, c);
            if (area <= eps_ || blocked(a, b, c) || !empty(a, b, c)) continue;
            const double q = quality(a, b, c, area);
            if (q > best_q) {
                best_q = q;
                best = static_cast<int>(i);
            }
        }
        return best;
    }

    void emit(int a, int b, int c, std::vector<std::uint32_t>& out) const {
        out.insert(out.end(), {ids_[static_cast<std::size_t>(a)], ids_[static_cast<std::size_t>(b)],
                               ids_[static_cast<std::size_t>(c)]});
    }

    const std::vector<std::uint32_t>& ids_;
    const std::vector<double>& x_;
    const std::vector<double>& y_;
    const std::vector<OnEdges>& on_;
    std::vector<int> v_;  // the polygon's remaining vertices (positions in ids), in order
    double eps_ = 0;
};

}  // namespace

bool ear_clip(const std::vector<std::uint32_t>& ids, const std::vector<double>& x, const std::vector<double>& y,
              const std::vector<OnEdges>& on, std::vector<std::uint32_t>& out) {
    return Clipper(ids, x, y, on).run(out);
}

}  // namespace gm
