// world specs from JSON text for the C ABI: the strict JSON reader of json.hpp and a validator
// driven by the rule table (spec_rules.hpp: src/globemill/spec_rules.json, which spec.py reads
// too), flattening a spec into the same (n, 16) feature rows as WorldSpec.core_features().
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace gm {

struct SpecLayer {
    std::string name;
    double color[3] = {0, 0, 0};
    double slope_deg[2] = {0.0, 90.0};
    double altitude_m[2] = {-1e9, 1e9};
};

// a validated world spec, defaults filled in
struct SpecData {
    std::string name;
    double radius_m = 0;
    double tolerance_m = 0;
    int offset = 1;  // 0 radial, 1 normal, 2 exact
    std::uint64_t max_triangles = 8000000;
    int levels = 4;
    double ratio = 2.0;
    int chunk_level = 1;
    bool skirt = false;  // lod.seams == "skirt"
    double skirt_depth_m = 0;
    bool has_collision_tolerance = false;
    double collision_tolerance_m = 0;
    bool collision_centered = true;  // collision.bias == "centered"
    std::uint64_t max_triangles_per_chunk = 65535;
    std::vector<double> features;  // 16 per feature, as WorldSpec.core_features()
    std::vector<SpecLayer> layers;
    // deprecation messages, one per renamed key the spec gave in its old spelling (the lines of
    // Python's SpecDeprecationWarning, without the source)
    std::vector<std::string> warnings;
    std::size_t feature_count() const { return features.size() / 16; }
};

enum class SpecStatus { Ok, Malformed, Invalid };

// reader limits; the defaults are the rule table's "limits" (the same as the Python loader's)
struct SpecLimits {
    SpecLimits();
    std::size_t max_bytes;
    int max_depth;
    std::size_t max_values;
    std::size_t max_problems;
};

// read and validate. On failure `message` is the whole message:
//   Malformed: "cannot read world spec: malformed JSON at line L, column C: ..."
//   Invalid:   "invalid world spec: <problem>" or "invalid world spec (N problems):\n  - ..."
// Throws only std::bad_alloc.
SpecStatus load_spec_json(const char* text, std::size_t length, const SpecLimits& limits,
                          SpecData& out, std::string& message);

// unit direction u(lat, lon) of docs/terrain.md, computed exactly as spec.unit_vector
void unit_vector(double lat_deg, double lon_deg, double out[3]);


}  // namespace gm
