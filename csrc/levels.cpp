// levels of detail from one newest-vertex bisection hierarchy (Mitchell 1989). a level at
// tolerance e is the coarsest conforming mesh of the hierarchy that splits every node whose
// critical tolerance exceeds e: the smallest node set closed under "parent" and "pair" (the node
// bisected together with it), which is exactly what conforming bisection needs. each level is
// verified a posteriori like the finest one: a leaf measured beyond the tolerance is split (with
// its closure) and its children are measured in turn.
#include "levels.hpp"

#include <algorithm>
#include <limits>

#include "measure.hpp"
#include "refine.hpp"

namespace gm {

namespace {

// add the nodes on the stack, and everything conforming bisection needs with them, to the split
// set (every node taken off the stack, the starting ones too, is appended to `added` when given)
void close_set(const LevelLinks& h, std::vector<std::uint8_t>& in, std::vector<std::uint32_t>& stack,
               std::vector<std::uint32_t>* added = nullptr) {
    while (!stack.empty()) {
        const std::uint32_t x = stack.back();
        stack.pop_back();
        if (added) added->push_back(x);
        for (std::uint32_t y : {h.parent[x], h.pair[x]}) {
            if (y != kNone && !in[y]) {
                in[y] = 1;
                stack.push_back(y);
            }
        }
    }
}

// the closure at tolerance eps, in one pass from the last node down (a parent comes before its
// children, so it is reached after them); a pair already passed goes through close_set. 2 marks
// nodes new to this level (the coarser level's set is closed already).
void close_at(const LevelLinks& h, double eps, std::vector<std::uint8_t>& in) {
    std::vector<std::uint32_t> stack;
    for (std::uint32_t i = static_cast<std::uint32_t>(h.parent.size()); i-- > 0;) {
        if (!in[i]) {
            if (!(h.split_below[i] > eps)) continue;
            in[i] = 2;
        }
        if (in[i] != 2) continue;
        const std::uint32_t parent = h.parent[i], pair = h.pair[i];
        if (parent != kNone && !in[parent]) in[parent] = 2;
        if (pair != kNone && !in[pair]) {
            in[pair] = 2;
            if (pair > i) stack.push_back(pair);
        }
    }
    close_set(h, in, stack);
    for (std::uint8_t& x : in) x = x ? 1 : 0;
}

// the leaves of a split set, in node order
void leaves_of(const LevelLinks& h, const std::vector<std::uint8_t>& in, std::vector<std::uint32_t>& out) {
    out.clear();
    for (std::uint32_t i = 0; i < h.parent.size(); ++i) {
        const std::uint32_t parent = h.parent[i];
        if (!in[i] && (parent == kNone || in[parent])) out.push_back(i);
    }
}

// a node's measurement at one level: the hierarchy's own for a leaf of the hierarchy (denser,
// whatever level it is a leaf of), else the one at the sampling order this level asks for (the
// same sampling rule as the hierarchy's verification, at the level's own tolerance)
struct Measured {
    float err = -1, m2s = 0, s2m = 0;
};
int level_order(const Hierarchy& h, const Node& t, int order, double spacing) {
    return sampling_order(h.pos(t.v[0]), h.pos(t.v[1]), h.pos(t.v[2]), order, spacing);
}
Measured measured_at(const Hierarchy& h, const Node& t, int order, double spacing) {
    if (t.child == kNone && t.err >= 0) return {t.err, t.m2s, t.s2m};
    const int need = level_order(h, t, order, spacing);
    if (t.err >= 0 && t.err_order == need) return {t.err, t.m2s, t.s2m};
    for (int k = 0; k < kAltSlots; ++k)
        if (t.alt_order[k] != 0 && t.alt_order[k] == need)
            return {std::max(t.alt_m2s[k], t.alt_s2m[k]), t.alt_m2s[k], t.alt_s2m[k]};
    return {};
}

float loose_err(const Hierarchy& h, const Node& t, int order, double spacing) {
    return measured_at(h, t, order, spacing).err;
}

// measure the nodes not measured yet at this level's sampling. a node keeps up to 1 + kAltSlots
// measurements (at as many sampling orders) so that one that is a leaf of several levels is
// measured once per order, in a bake and across the edits of a session. each value is a function
// of the node and the order alone (err = max(m2s, s2m) exactly, float rounding being monotonic),
// so which slot holds it does not matter and an edit that keeps a node keeps its numbers
// (errs[k]: node ids[k]'s deviation at this level, measured now or before)
void measure_nodes(const Field& field, Hierarchy& h, const std::vector<std::uint32_t>& ids, int order,
                   double spacing, int threads, std::vector<float>& errs) {
    errs.resize(ids.size());
    parallel_for(ids.size(), threads, [&](std::size_t b, std::size_t e) {
        for (std::size_t k = b; k < e; ++k) {
            Node& t = h.nodes[ids[k]];
            if ((errs[k] = measured_at(h, t, order, spacing).err) >= 0) continue;
            const int need = level_order(h, t, order, spacing);
            double m2s, s2m;
            const double w =
                triangle_deviation(field, h.pos(t.v[0]), h.pos(t.v[1]), h.pos(t.v[2]), need, m2s, s2m);
            errs[k] = static_cast<float>(w);
            if (t.err < 0) {
                t.err = static_cast<float>(w);
                t.err_order = static_cast<std::uint8_t>(need);
                t.m2s = static_cast<float>(m2s);
                t.s2m = static_cast<float>(s2m);
            } else {
                // the first free slot, else the last one (a node needs more orders than it keeps
                // only with more levels than usual: it is then measured again, same numbers)
                int a = 0;
                while (a + 1 < kAltSlots && t.alt_order[a] != 0) ++a;
                t.alt_order[a] = static_cast<std::uint8_t>(need);
                t.alt_m2s[a] = static_cast<float>(m2s);
                t.alt_s2m[a] = static_cast<float>(s2m);
            }
        }
    });
}

// verification: first every leaf, then the new leaves under the nodes each repair adds
void verify_and_repair(const Field& field, Hierarchy& h, const LevelLinks& links, int verify_order,
                       int threads, std::vector<std::uint8_t>& in, Level& lv) {
    const double eps = lv.tolerance_m;
    std::vector<std::uint32_t> check, added, stack;
    std::vector<float> errs;
    leaves_of(links, in, check);
    // the detail a level must resolve is what its own tolerance sees (docs/meshing.md)
    const double spacing = verify_spacing(field, eps);
    while (verify_order > 0 && !check.empty()) {
        measure_nodes(field, h, check, verify_order, spacing, threads, errs);
        for (std::size_t k = 0; k < check.size(); ++k) {
            const std::uint32_t id = check[k];
            const Node& t = h.nodes[id];
            const float err = errs[k];
            if (err > kVerifyMargin * eps / kWallSlack && t.child != kNone && !at_floor(h, t, eps) &&
                err > verify_limit(field, h, t, eps)) {
                in[id] = 1;
                stack.push_back(id);
                ++lv.repaired;
            }
        }
        added.clear();
        close_set(links, in, stack, &added);
        check.clear();
        for (std::uint32_t x : added) {
            const std::uint32_t c = h.nodes[x].child;
            if (c == kNone) continue;
            if (!in[c]) check.push_back(c);
            if (!in[c + 1]) check.push_back(c + 1);
        }
        std::sort(check.begin(), check.end());
    }
}

// the leaves as the level's triangles, grouped by chunk, in node order within a chunk (a
// counting sort)
void collect_triangles(const Hierarchy& h, const std::vector<std::uint32_t>& leaves,
                       const std::vector<std::uint8_t>& tight, int verify_order, double spacing, Level& lv) {
    std::vector<std::uint8_t> is_tight(h.nodes.size(), 0);
    for (std::size_t i = 0; i < leaves.size(); ++i) is_tight[leaves[i]] = tight.empty() ? 0 : tight[i];
    std::vector<std::uint32_t> first(static_cast<std::size_t>(h.chunks) + 1, 0), order(leaves.size());
    for (std::uint32_t id : leaves) ++first[h.nodes[id].chunk + 1];
    for (std::size_t c = 0; c < h.chunks; ++c) first[c + 1] += first[c];
    for (std::uint32_t id : leaves) order[first[h.nodes[id].chunk]++] = id;
    lv.present.assign(h.dir.size(), 0);
    lv.triangles.reserve(order.size() * 3);
    lv.chunk.reserve(order.size());
    lv.errors.reserve(order.size());
    for (std::uint32_t id : order) {
        const Node& t = h.nodes[id];
        Measured m = verify_order > 0 ? measured_at(h, t, verify_order, spacing) : Measured{t.err, t.m2s, t.s2m};
        if (is_tight[id]) m = {std::max(t.tight_m2s, t.tight_s2m), t.tight_m2s, t.tight_s2m};
        lv.triangles.insert(lv.triangles.end(), {t.v[0], t.v[1], t.v[2]});
        lv.chunk.push_back(t.chunk);
        lv.errors.push_back(m.err);
        for (int k = 0; k < 3; ++k) lv.present[t.v[k]] = 1;
        lv.max_error_m = std::max(lv.max_error_m, static_cast<double>(m.err));
        lv.mesh_to_surface_m = std::max(lv.mesh_to_surface_m, static_cast<double>(m.m2s));
        lv.surface_to_mesh_m = std::max(lv.surface_to_mesh_m, static_cast<double>(m.s2m));
    }
}

}  // namespace

LevelLinks level_links(const Hierarchy& h) {
    LevelLinks l;
    const std::size_t n = h.nodes.size();
    l.parent.resize(n);
    l.pair.resize(n);
    l.split_below.resize(n);
    const double inf = std::numeric_limits<double>::infinity();
    for (std::size_t i = 0; i < n; ++i) {
        const Node& t = h.nodes[i];
        l.parent[i] = t.parent;
        l.pair[i] = t.pair;
        l.split_below[i] = t.child == kNone ? -inf : (t.level < h.min_level ? inf : t.tau);
    }
    return l;
}

void cut_level(const Field& field, Hierarchy& h, const LevelLinks& links, int verify_order, int threads,
               std::vector<std::uint8_t>& split, Level& lv) {
    close_at(links, lv.tolerance_m, split);
    const double eps = lv.tolerance_m, spacing = verify_spacing(field, eps);
    std::vector<std::uint32_t> leaves, stack;
    std::vector<std::uint8_t> tight;
    std::vector<float> loose;
    for (;;) {
        verify_and_repair(field, h, links, verify_order, threads, split, lv);
        leaves_of(links, split, leaves);
        loose.resize(leaves.size());
        for (std::size_t i = 0; i < leaves.size(); ++i) loose[i] = loose_err(h, h.nodes[leaves[i]], verify_order, spacing);
        if (verify_order > 0) publish_tight(field, h, leaves, loose, threads, tight);
        else tight.assign(leaves.size(), 0);
        // a leaf whose tight figure is beyond kTightLimit of the tolerance is split too, and
        // the new leaves verified in turn
        for (std::size_t i = 0; i < leaves.size(); ++i) {
            const std::uint32_t id = leaves[i];
            const Node& t = h.nodes[id];
            if (!tight[i] || !(std::max(t.tight_m2s, t.tight_s2m) > kTightLimit * eps)) continue;
            if (t.child == kNone || at_floor(h, t, eps)) continue;
            split[id] = 1;
            stack.push_back(id);
            ++lv.repaired;
        }
        if (stack.empty()) break;
        close_set(links, split, stack);
    }
    collect_triangles(h, leaves, tight, verify_order, spacing, lv);
}

}  // namespace gm
