// the rule table of world specs (src/globemill/spec_rules.json, embedded at build time): field
// names, types, ranges, defaults, cross-field checks and the core feature row of every kind.
// spec.py builds its models from the same file; here the C ABI's validator (spec_json.cpp) and
// Field::init (field.cpp) read it.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace gm {

enum class RuleType { Number, Integer, Choice, Text, Numbers, Table, List, Kind };

// an interval with open or closed ends (either may be absent); integers: whole numbers only
struct Bounds {
    bool has_lo = false, lo_open = false;
    double lo = 0;
    bool has_hi = false, hi_open = false;
    double hi = 0;
    bool integer = false;
    bool nonzero = false;
    // the first bound x breaks: "> 0", "<= 12", "!= 0"; empty when x is inside
    std::string broken(double x) const;
    bool holds(double x) const { return broken(x).empty(); }
    // the range in words, as spec.py's _bounds_text writes it: "integer 1 to 12", "> 0 and <= 1"
    std::string describe() const;
};

struct FieldRule {
    std::string key;
    RuleType type = RuleType::Number;
    bool required = false;
    bool nullable = false;
    Bounds bounds;  // Number, Integer; Numbers: of each item
    bool has_default = false;
    double defaults[4] = {0, 0, 0, 0};  // Number, Integer (one), Numbers (count); Choice: index
    std::vector<std::string> values;    // Choice
    bool identifier = false;            // Text: [A-Za-z0-9_-] (else printable)
    std::size_t min_length = 0, max_length = 0;  // Text, in characters
    int count = 0;                      // Numbers
    bool ordered = false;               // Numbers: lo <= hi
    std::string section;                // Table: the section; List: "feature" or "layer"
    std::size_t max_items = static_cast<std::size_t>(-1);  // List
    std::string allowed;                // what it accepts, in words (the "(allowed: ...)")
    int choice(const std::string& v) const;  // index of v in values, or -1
};

struct CheckRule {
    std::string rule;  // required_if, at_most_min, arc, at_most_fraction, block_footprint, amplitude_sum
    std::string key, when, of;
    std::vector<std::string> in, of_keys, from, to;
    double divisor = 1, min_deg = 0, max_deg = 0, below_fraction = 0;
    std::string allowed;
};

// one column (or three, for a direction) of the core feature row
struct RowEntry {
    enum What { Code, Value, Direction } what = Value;
    int col = 0;
    std::string key, key2;  // Value: key; Direction: lat key, lon key
    bool radians = false;
    bool from_bearing = false;  // the column holds heading_of_bearing(value) (docs/terrain.md, block)
    std::string only_if_key;  // Value written only when this choice is one of only_if_in
    std::vector<std::string> only_if_in;
};

struct SectionRules {
    std::string name, model;
    std::vector<FieldRule> fields;
    std::vector<CheckRule> checks;
    std::vector<RowEntry> row;
    const FieldRule* field(const std::string& key) const;
    const CheckRule* check(const std::string& rule) const;
};

// a key renamed in the table: the old spelling is still read for one release (docs/spec.md)
struct Renamed {
    std::string from, to;
    bool heading_to_bearing = false;  // the old value is a heading: convert it
    // the deprecation message: the table's renamed_messages entry for this conversion, with
    // the placeholders {feature}, {from}, {to} and {value} (spec.py fills the same ones)
    std::string message;
};

struct KindRules : SectionRules {
    int code = 0;
    std::vector<Renamed> renamed;
    bool has_footprint = false;
    std::string fp_half[2], fp_corner, fp_grow;
    enum Amplitude { Abs, Sum, AbsGeometric } amplitude = Abs;
    std::vector<std::string> amplitude_keys;
};

struct SpecRules {
    std::size_t max_bytes = 0, max_values = 0, max_problems = 0;
    int max_depth = 0;
    double angle_slack_deg = 0;
    int core_columns = 0;
    SectionRules world, lod, collision, layer, feature;
    std::vector<KindRules> kinds;
    std::string kind_list;  // "hill, mesa, ..."
    std::string rename_message;  // renamed_messages.rename (also for a value that cannot convert)
    const KindRules* kind(const std::string& name) const;
    const KindRules* kind_by_code(int code) const;
    const SectionRules& section(const std::string& name) const;
};

// a block's bearing (degrees clockwise from north) as the core's heading (degrees counter-
// clockwise from east): 90 - bearing, wrapped into -360..360; and back (spec.py does the same)
double heading_of_bearing(double bearing_deg);
double bearing_of_heading(double heading_deg);

// the table, read once (thread-safe) from the text embedded at build time. A table that does not
// read is a build defect: the process stops with a message (tests read it on every build).
const SpecRules& spec_rules();

// the embedded text itself
const char* spec_rules_text(std::size_t& length);

}  // namespace gm
