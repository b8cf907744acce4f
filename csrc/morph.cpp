// morph targets from the bisection hierarchy: a vertex the next coarser level lacks sits, there,
// at the midpoint of its parent edge's morph positions (recursively: its parents may be missing
// too), which lies on the coarser level's triangle; a vertex the coarser level keeps stays put.
// geomorphing between levels this way is common practice in terrain rendering.
#include "morph.hpp"

namespace gm {

void morph_targets(const Hierarchy& h, const std::vector<std::uint8_t>* coarser_present, std::vector<double>& morph) {
    const std::size_t nv = h.dir.size();
    morph.assign(3 * nv, 0.0);
    // a vertex comes after its parents, so theirs are known when it is reached
    for (std::uint32_t v = 0; v < nv; ++v) {
        Vec3 p;
        if (!coarser_present || (*coarser_present)[v] || h.vparent[2 * v] == kNone) {
            p = h.pos(v);
        } else {
            const std::size_t a = h.vparent[2 * v], b = h.vparent[2 * v + 1];
            p = 0.5 * (Vec3{morph[3 * a], morph[3 * a + 1], morph[3 * a + 2]} +
                       Vec3{morph[3 * b], morph[3 * b + 1], morph[3 * b + 2]});
        }
        morph[3 * v] = p.x;
        morph[3 * v + 1] = p.y;
        morph[3 * v + 2] = p.z;
    }
}

}  // namespace gm
