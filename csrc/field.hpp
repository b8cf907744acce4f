// the terrain field: height H(u) and its gradient over unit directions, exactly as docs/terrain.md
// writes it, with a spatial index over feature footprints.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include "vec.hpp"

namespace gm {

enum class Kind : int { Hill = 0, Mesa = 1, Block = 2, Crater = 3, Ridge = 4, Noise = 5 };
enum class Blend : int { Add = 0, Max = 1, Min = 2, Set = 3, SmoothMax = 4, SmoothMin = 5 };

constexpr int kFeatureColumns = 16;

struct Feature {
    Kind kind = Kind::Hill;
    Blend blend = Blend::Add;
    double k = 0;          // smooth blend width (m)
    Vec3 c, c1;            // centre (ridge: first end point), ridge second end point
    double prm[7] = {};    // kind parameters, columns 9..15 of the feature array
    // derived at construction
    Vec3 ax, ay;           // block local axes; ridge: ax = great-circle pole
    Vec3 cap_c;            // footprint cap centre
    double cap_angle = 0;  // footprint cap angular radius (rad); >= pi means everywhere
    double cap_cos = 1, cap_sin = 0;  // of cap_angle
    // a point with dot(u, cap_c) below this lies surely outside the footprint (the margin keeps
    // the test conservative against rounding); -2 for a feature that covers the world
    double outside_cos = -2;
    double scale_m = 0;    // smallest length a probe grid must resolve to see the feature
    double amp_m = 0;      // largest change of H the feature can make (m), blends included
    bool step = false;     // wall of width zero: H jumps across the rim
    int noise_table = -1;  // index into Field::perms_
};

// per-point result of one feature: profile value p and weight m with their gradients
struct Contribution {
    double p = 0, m = 0;
    Vec3 gp, gm;
};

// a spherical cap, used to bound triangles and footprints
struct Cap {
    Vec3 c;
    double angle = 0;
};

// a running count of field evaluations on this thread: points evaluated and point x feature terms.
// parallel_for hands its workers' counts back to the calling thread, so a caller that reads its
// tally before and after a call learns what the call cost, whatever the thread count.
struct EvalTally {
    std::uint64_t points = 0, terms = 0;
};
inline thread_local EvalTally tl_eval_tally;
inline EvalTally& eval_tally() { return tl_eval_tally; }

enum class Status : int {
    Ok = 0,
    InvalidArgument = 1,
    BudgetExceeded = 2,
    NonFinite = 3,
    Internal = 4,
    ToleranceMissed = 5,  // a level measured beyond its tolerance (the mesher's size floor)
    Stopped = 6,          // the caller stopped the bake (RefineOptions::estimated returned false)
};

class Field {
public:
    // features: n rows of kFeatureColumns doubles (layout in docs/terrain.md / spec.py)
    Status init(double radius_m, const double* features, std::size_t n, std::string& error);

    double radius() const { return radius_; }
    std::size_t size() const { return features_.size(); }
    const Feature& feature(std::size_t i) const { return features_[i]; }

    // evaluate H (and the tangent gradient when grad != nullptr) at unit direction u using only
    // the features listed (ascending indices). features not listed must not reach u.
    // force >= 0 evaluates as if feature `force` had weight force_m (used for wall limits).
    double eval(Vec3 u, const std::uint32_t* list, std::size_t count, Vec3* grad,
                int force = -1, double force_m = 0) const;
    // the same using the spatial index to find candidate features
    double eval(Vec3 u, Vec3* grad) const;

    // candidate features for a point (ascending indices): every feature whose footprint cap
    // reaches u, and maybe a few that do not (those change nothing). no allocation; cost is the
    // depth of the footprint index, at most kIndexMaxDepth steps.
    void candidates(Vec3 u, const std::uint32_t*& list, std::size_t& count) const;

    // the footprint index: a quadtree on each face of the cube map, a leaf listing (ascending)
    // every feature whose footprint cap touches the leaf's bounding cap. a cell is split while it
    // lists more than kIndexLeafItems features, most of them with footprints smaller than half
    // the cell, it is less than kIndexMaxDepth levels deep, and the index stays within its
    // memory bound: index_bound_bytes(n) = max(16 MiB, 128 bytes per feature).
    static constexpr int kIndexMaxDepth = 24;
    static constexpr std::size_t kIndexLeafItems = 8;
    static std::size_t index_bound_bytes(std::size_t features);
    struct IndexStats {
        std::size_t nodes = 0, leaves = 0, items = 0;  // items: sum of the leaves' list lengths
        std::size_t bytes = 0;                         // memory of nodes and lists
        std::size_t longest = 0;                       // the longest leaf list
        int depth = 0;                                 // the deepest leaf
    };
    IndexStats index_stats() const;
    bool touches(std::size_t f, const Cap& cap) const;
    // the same for many features against one cap: cap_cos, cap_sin are cos and sin of cap.angle
    bool touches(std::size_t f, const Cap& cap, double cap_cos, double cap_sin) const;

    // vertical walls: an upper bound on the distance from point p to the surface through the
    // walls of the step features whose footprint, widened by the wall's height, holds p
    // (infinity when none does). a pure function of p and the features: it does not depend on
    // how the footprint index happens to group them.
    double wall_distance(Vec3 p) const;
    // the same, and in q the nearest point of those walls (p itself when none holds p); lo, hi
    // (optional): that wall's foot and top radius along q's direction (the wall there is the
    // segment from lo to hi times normalize(q); both |p| when none holds p)
    double wall_point(Vec3 p, Vec3& q, double* lo = nullptr, double* hi = nullptr) const;
    // where another step feature's rim crosses a rim, wall_point also takes the rim points up to
    // the distance found away along it (kCrossSteps each way), in up to kCrossRounds rounds
    static constexpr int kCrossSteps = 8;
    static constexpr int kCrossRounds = 3;
    // is feature i of this field defined exactly as feature j of `other` (the same row)?
    bool same_feature(std::size_t i, const Field& other, std::size_t j) const;
    // how far feature i reaches (angle from its footprint centre, radians): its footprint, and
    // for a step feature the wall's height more, where its wall still counts in wall_distance.
    // a feature changes nothing that is computed beyond its reach.
    double reach_angle(std::size_t i) const;

    // an upper bound on how much feature f changes H anywhere in `cap`: its amplitude (amp_m)
    // times its largest weight there (a hill's Gaussian weight at the cap's nearest point to its
    // centre; 1 for the other kinds). every blend moves H by the weight times a change within
    // amp_m, so this bounds the feature's effect on the ground over the cap.
    double max_change_over(std::size_t f, const Cap& cap) const;

    bool has_steps() const { return has_steps_; }
    // the features with creases (has_creases), ascending
    const std::vector<std::uint32_t>& crease_features() const { return creases_; }

    // the shortest wavelength (m) of any noise octave whose amplitude exceeds `amplitude_m`
    // (infinity when none): samples spaced well below it see every bump that matters
    double finest_wavelength(double amplitude_m) const;

    // creases: lines where H is continuous but not differentiable (the crest, tips and foot of
    // a sharp ridge, a crater's rim). writes points of feature f's creases near direction c:
    // on each crease the nearest point and 16 more spread over +-`reach` (radians) along it, up
    // to kMaxCreasePoints; returns how many. sparse samples miss such a line, so meshing and
    // verification probe these points as well.
    static constexpr int kMaxCreasePoints = 72;
    int crease_points(std::size_t f, Vec3 c, double reach, Vec3* out) const;
    bool has_creases(std::size_t f) const;

private:
    void contribution(const Feature& f, Vec3 u, bool want_grad, Contribution& out) const;
    bool rim_direction(const Feature& f, Vec3 u, Vec3& w) const;
    double noise(const Feature& f, Vec3 u, Vec3* grad) const;
    void build_index();
    void widen_blend_amplitudes();  // amp_m of max/min/set features (see field.cpp)
    std::size_t cell_of(Vec3 u) const;  // the index leaf holding u

    double radius_ = 1;
    bool has_steps_ = false;
    std::vector<std::uint32_t> steps_;    // the step features, ascending
    std::vector<std::uint32_t> creases_;  // the features with creases, ascending
    std::vector<Feature> features_;
    std::vector<std::array<std::uint8_t, 512>> perms_;
    // footprint index: nodes 0..5 are the roots of the cube faces; an inner node's four
    // children are consecutive, child + 2 * (upper half in s) + (upper half in t)
    struct IndexNode {
        std::int32_t child = -1;            // first child, -1 for a leaf
        std::uint32_t start = 0, count = 0;  // a leaf's list in index_items_
    };
    std::vector<IndexNode> index_nodes_;
    std::vector<std::uint32_t> index_items_;
};

}  // namespace gm
