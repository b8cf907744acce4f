// world specs from JSON text for the C ABI: the strict reader of json.hpp, then a validator
// driven by the rule table (spec_rules.hpp, the same src/globemill/spec_rules.json spec.py
// builds its models from). Problem lines have spec.py's layout, `path: what (allowed: range),
// got value`, with the same paths and allowed ranges; numbers are written the C++ way
// (format_number: shortest round-trip text), so the words around them may differ from Python's.
#include "spec_json.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <utility>

#include "json.hpp"
#include "spec_rules.hpp"

namespace gm {
namespace {

constexpr double kPi = 3.14159265358979323846;  // the same double as Python's math.pi

// ---------------------------------------------------------------------------------------------
// values in messages

void got_into(std::string& o, const JValue& v) {
    if (o.size() > 81) return;
    switch (v.type) {
        case JT::Null: o += "null"; break;
        case JT::Bool: o += v.boolean ? "true" : "false"; break;
        case JT::Number: o += v.is_int ? v.text : format_number(v.number); break;
        case JT::String: o += quote_text(v.text, 82); break;
        case JT::Array:
            o += '[';
            for (std::size_t i = 0; i < v.items.size() && o.size() <= 81; ++i) {
                if (i) o += ", ";
                got_into(o, v.items[i]);
            }
            o += ']';
            break;
        case JT::Object:
            o += '{';
            for (std::size_t i = 0; i < v.members.size() && o.size() <= 81; ++i) {
                if (i) o += ", ";
                o += quote_text(v.members[i].key, 82);
                o += ": ";
                got_into(o, v.members[i].value);
            }
            o += '}';
            break;
    }
}

// an offending input value: JSON-like, at most 80 characters
std::string got(const JValue& v) {
    std::string o;
    got_into(o, v);
    if (o.size() <= 80) return o;
    std::size_t cut = 77;
    while (cut > 0 && (static_cast<unsigned char>(o[cut]) & 0xC0) == 0x80) --cut;  // whole characters
    return o.substr(0, cut) + "...";
}

bool is_control(unsigned cp) { return cp < 0x20 || (cp >= 0x7F && cp <= 0x9F); }

// a key in a problem path: as is, or quoted like spec.py's _path_key
std::string path_key(const std::string& key) {
    bool plain = true;
    for (std::size_t i = 0; i < key.size();) {
        unsigned cp = utf8_next(key, i);
        if (is_control(cp) || cp == '"' || cp == '\\') plain = false;
    }
    return plain ? key : quote_text(key, static_cast<std::size_t>(-1));
}

std::string join_path(const std::string& path, const std::string& key) {
    return path.empty() ? path_key(key) : path + "." + path_key(key);
}

std::string hex_code(unsigned cp) {
    char b[16];
    std::snprintf(b, sizeof b, "U+%04X", cp);
    return b;
}

// ---------------------------------------------------------------------------------------------
// the validator

class Checker {
public:
    explicit Checker(std::size_t cap) : cap_(cap) {}
    void add(const std::string& line) {
        if (lines.size() < cap_) lines.push_back(line);
        else ++more;
    }
    std::size_t count() const { return lines.size() + more; }
    std::vector<std::string> lines;
    std::size_t more = 0;

private:
    std::size_t cap_;
};

// the checked value of one field
struct Val {
    bool present = false;  // given (not null) or defaulted
    double num[4] = {0, 0, 0, 0};  // Number, Integer; Numbers; Choice: index
    std::string text;
    const JValue* raw = nullptr;  // Table, List
};

// the fields of one table, checked against the rules of one or two sections (common + kind)
struct Model {
    const JValue& obj;
    std::string path;
    std::vector<const SectionRules*> rules;
    std::vector<std::pair<const FieldRule*, Val>> vals;
    bool ok = true;

    const Val* val(const std::string& key) const {
        for (const auto& fv : vals)
            if (fv.first->key == key) return &fv.second;
        return nullptr;
    }
    double num(const std::string& key) const {
        const Val* v = val(key);
        return v ? v->num[0] : 0.0;
    }
    const FieldRule* rule(const std::string& key) const {
        for (const SectionRules* s : rules)
            if (const FieldRule* f = s->field(key)) return f;
        return nullptr;
    }
    void problem(Checker& ck, const std::string& key, const std::string& text) {
        ck.add((key.empty() ? path : join_path(path, key)) + ": " + text);
        ok = false;
    }
};

// a number at `path` within the bounds; false after adding a problem
bool number_value(Checker& ck, const JValue& v, const std::string& path, const Bounds& b,
                  const std::string& allowed, double& out) {
    const std::string tail = " (allowed: " + allowed + "), got ";
    if (b.integer && (v.type != JT::Number || !v.is_int)) {
        ck.add(path + ": must be an integer" + tail + got(v));
        return false;
    }
    if (v.type != JT::Number || (v.is_int && !b.integer && std::isinf(v.number))) {
        ck.add(path + ": must be a number" + tail + got(v));
        return false;
    }
    if (!std::isfinite(v.number) && !b.integer) {
        ck.add(path + ": must be a finite number" + tail + got(v));
        return false;
    }
    const std::string broken = b.broken(v.number);
    if (!broken.empty()) {
        ck.add(path + (broken == "!= 0" ? ": must not be 0" : ": must be " + broken) + tail + got(v));
        return false;
    }
    out = v.number;
    return true;
}

// a text field of the table's character classes; false after adding a problem
bool text_value(Checker& ck, const JValue& v, const std::string& path, const FieldRule& f) {
    const std::string tail = " (allowed: " + f.allowed + "), got " + got(v);
    if (v.type != JT::String) {
        ck.add(path + ": must be a string" + tail);
        return false;
    }
    std::size_t chars = 0;
    unsigned bad = 0;
    std::size_t bad_at = 0;
    bool bad_found = false, outside = false;
    for (std::size_t i = 0; i < v.text.size(); ++chars) {
        const unsigned cp = utf8_next(v.text, i);
        const bool id = (cp >= 'A' && cp <= 'Z') || (cp >= 'a' && cp <= 'z') || (cp >= '0' && cp <= '9') ||
                        cp == '_' || cp == '-';
        if (!id) outside = true;
        if (is_control(cp) && !bad_found) bad_found = true, bad = cp, bad_at = chars;
    }
    if (f.identifier) {
        if (outside || chars < f.min_length || chars > f.max_length) {
            ck.add(path + ": does not match the allowed pattern" + tail);
            return false;
        }
        return true;
    }
    if (chars < f.min_length) {
        ck.add(path + ": string should have at least " + std::to_string(f.min_length) +
               (f.min_length == 1 ? " character" : " characters") + tail);
        return false;
    }
    if (chars > f.max_length) {
        ck.add(path + ": string should have at most " + std::to_string(f.max_length) +
               (f.max_length == 1 ? " character" : " characters") + tail);
        return false;
    }
    if (bad_found) {
        ck.add(path + ": has the control character " + hex_code(bad) + " at position " +
               std::to_string(bad_at) + tail);
        return false;
    }
    return true;
}

// one field of a model: checked, stored in m.vals (defaults filled in)
void check_field(Checker& ck, Model& m, const FieldRule& f) {
    Val val;
    const JValue* v = m.obj.find(f.key.c_str());
    const std::string path = join_path(m.path, f.key);
    if (f.has_default) {
        val.present = true;
        std::copy(f.defaults, f.defaults + 4, val.num);
    }
    if (!v) {
        if (f.required) m.problem(ck, f.key, "is required (allowed: " + f.allowed + ")");
        m.vals.emplace_back(&f, val);
        return;
    }
    if (f.nullable && v->type == JT::Null) {
        m.vals.emplace_back(&f, val);
        return;
    }
    bool ok = true;
    switch (f.type) {
        case RuleType::Number:
        case RuleType::Integer:
            ok = number_value(ck, *v, path, f.bounds, f.allowed, val.num[0]);
            break;
        case RuleType::Choice: {
            const int i = v->type == JT::String ? f.choice(v->text) : -1;
            if (i < 0) {
                ck.add(path + ": unknown value (allowed: " + f.allowed + "), got " + got(*v));
                ok = false;
            }
            val.num[0] = i;
            break;
        }
        case RuleType::Text:
            ok = text_value(ck, *v, path, f);
            val.text = v->text;
            break;
        case RuleType::Numbers: {
            const std::string item_allowed = f.bounds.describe();
            const std::size_t want = static_cast<std::size_t>(f.count);
            if (v->type != JT::Array) {
                ck.add(path + ": must be a list (allowed: " + f.allowed + "), got " + got(*v));
                ok = false;
            } else if (v->items.size() > want) {
                ck.add(path + ": must have " + std::to_string(want) + " items (allowed: " + f.allowed +
                       "), got " + got(*v));
                ok = false;
            } else {
                for (std::size_t i = 0; i < v->items.size(); ++i)
                    if (!number_value(ck, v->items[i], path + "[" + std::to_string(i) + "]", f.bounds,
                                      item_allowed, val.num[i]))
                        ok = false;
                // one line per missing item; the allowed text is the list's own (not a band's)
                const std::string whole = "a list of " + std::to_string(want) + " numbers, each " + item_allowed;
                for (std::size_t i = v->items.size(); i < want; ++i) {
                    ck.add(path + ": must have " + std::to_string(want) + " items (allowed: " + whole +
                           "), got " + got(*v));
                    ok = false;
                }
            }
            break;
        }
        case RuleType::Table:
            if (v->type != JT::Object) {
                ck.add(path + ": must be a table (allowed: a table), got " + got(*v));
                ok = false;
            }
            val.raw = v;
            break;
        case RuleType::List:
            if (v->type != JT::Array) {
                ck.add(path + ": must be a list (allowed: " + f.allowed + "), got " + got(*v));
                ok = false;
            } else if (v->items.size() > f.max_items) {
                ck.add(path + ": must have at most " + std::to_string(f.max_items) + " items (allowed: " +
                       f.allowed + "), got " + got(*v));
                ok = false;
            }
            val.raw = v;
            break;
        case RuleType::Kind:
            break;  // read by check_feature
    }
    if (!ok) {
        m.ok = false;
        val.present = false;
        val.raw = nullptr;
    } else {
        val.present = true;
    }
    m.vals.emplace_back(&f, val);
}

// unknown keys, after the fields, in input order
void check_extras(Checker& ck, Model& m) {
    std::string known;
    for (const auto& fv : m.vals) known += (known.empty() ? "" : ", ") + fv.first->key;
    for (const JMember& mem : m.obj.members)
        if (!m.rule(mem.key))
            m.problem(ck, mem.key, "unknown key (allowed keys: " + known + "), got " + got(mem.value));
}

// the cross-field checks a model can make alone (the table's rules of its sections)
void check_model_rules(Checker& ck, Model& m);

// sin and cos of an angle in degrees, exact at multiples of 90 degrees (spec._sin_cos_deg)
void sin_cos_deg(double a, double& s, double& c) {
    if (std::fmod(a, 90.0) == 0.0) {
        long long q = static_cast<long long>(std::floor(a / 90.0));
        int quadrant = static_cast<int>(((q % 4) + 4) % 4);
        static const double table[4][2] = {{0.0, 1.0}, {1.0, 0.0}, {0.0, -1.0}, {-1.0, 0.0}};
        s = table[quadrant][0];
        c = table[quadrant][1];
        return;
    }
    const double rad = a * (kPi / 180.0);  // math.radians
    s = std::sin(rad);
    c = std::cos(rad);
}
double degrees(double rad) { return rad * (180.0 / kPi); }  // math.degrees

// the footprint angle of spec.py's footprint_angle_deg (numpy.linspace(0, pi/2, 1025) samples)
double block_reach_deg(double R, double hx, double hy, double r, double wall) {
    const double grown = r + wall;
    const int N = 1025;
    const double step = (0.5 * kPi) / (N - 1);  // numpy.linspace(0, pi/2, 1025)
    double reach = -HUGE_VAL, tan2 = -HUGE_VAL;
    for (int i = 0; i < N; ++i) {
        const double t = i == N - 1 ? 0.5 * kPi : i * step;
        const double x = (hx - r + grown * std::cos(t)) / R;
        const double y = (hy - r + grown * std::sin(t)) / R;
        reach = std::max(reach, std::max(x, y));
        const double tx = std::tan(x), ty = std::tan(y);
        tan2 = std::max(tan2, tx * tx + ty * ty);
    }
    if (reach >= 0.5 * kPi) return degrees(reach);
    return degrees(std::atan(std::sqrt(tan2)));
}

void check_model_rules(Checker& ck, Model& m) {
    for (const SectionRules* s : m.rules) {
        for (const FieldRule& f : s->fields) {
            if (!f.ordered) continue;
            const Val* v = m.val(f.key);
            if (v && v->num[0] > v->num[1])
                m.problem(ck, f.key, "lo must be <= hi (allowed: [lo, hi] with lo <= hi), got [" +
                                         format_number(v->num[0]) + ", " + format_number(v->num[1]) + "]");
        }
        for (const CheckRule& c : s->checks) {
            if (c.rule == "required_if") {
                const FieldRule* when = m.rule(c.when);
                const Val* wv = m.val(c.when);
                const Val* kv = m.val(c.key);
                if (!when || !wv || !kv) continue;
                const std::string& value = when->values[static_cast<std::size_t>(wv->num[0])];
                if (std::find(c.in.begin(), c.in.end(), value) != c.in.end() && !kv->present)
                    m.problem(ck, c.key, "is required when " + c.when + " is '" + value + "' (allowed: " +
                                             c.allowed + ")");
            } else if (c.rule == "at_most_min") {
                double limit = HUGE_VAL;
                std::string names;
                for (const std::string& k : c.of_keys) {
                    limit = std::min(limit, m.num(k));
                    names += (names.empty() ? "" : ", ") + k;
                }
                const double value = m.num(c.key);
                const FieldRule* f = m.rule(c.key);
                const double lower = f && f->bounds.has_lo ? f->bounds.lo : 0.0;
                if (value > limit)
                    m.problem(ck, c.key, "must be <= min(" + names + ") = " + format_number(limit) +
                                             " (allowed: " + format_number(lower) + " to " +
                                             format_number(limit) + "), got " + format_number(value));
            } else if (c.rule == "arc" && c.from.size() == 2 && c.to.size() == 2) {
                double c0[3], c1[3];
                unit_vector(m.num(c.from[0]), m.num(c.from[1]), c0);
                unit_vector(m.num(c.to[0]), m.num(c.to[1]), c1);
                const double cx = c0[1] * c1[2] - c0[2] * c1[1], cy = c0[2] * c1[0] - c0[0] * c1[2],
                             cz = c0[0] * c1[1] - c0[1] * c1[0];
                const double arc = degrees(std::atan2(std::sqrt(cx * cx + cy * cy + cz * cz),
                                                      c0[0] * c1[0] + c0[1] * c1[1] + c0[2] * c1[2]));
                const std::string allowed = "arc angle in (0°, " + format_number(c.max_deg) + "°]";
                if (arc < c.min_deg)
                    m.problem(ck, "", "end points must be distinct (allowed: " + allowed + "), got " +
                                          format_number(arc) + "°");
                else if (arc > c.max_deg + spec_rules().angle_slack_deg)
                    m.problem(ck, "", "end points must be at most " + format_number(c.max_deg) +
                                          "° apart (allowed: " + allowed + "), got " + format_number(arc) + "°");
            }
        }
    }
}

// a checked feature: its model (values) and kind
struct FeatureOut {
    const KindRules* kind = nullptr;
    std::vector<std::pair<const FieldRule*, Val>> vals;
    double num(const std::string& key) const {
        for (const auto& fv : vals)
            if (fv.first->key == key) return fv.second.num[0];
        return 0.0;
    }
    const Val* val(const std::string& key) const {
        for (const auto& fv : vals)
            if (fv.first->key == key) return &fv.second;
        return nullptr;
    }
};

bool check_feature(Checker& ck, const JValue& v, std::size_t index, FeatureOut& out) {
    const SpecRules& R = spec_rules();
    const std::string path = "features[" + std::to_string(index) + "]";
    if (v.type != JT::Object) {
        ck.add(path + ": must be a table (allowed: a table whose kind is one of " + R.kind_list +
               "), got " + got(v));
        return false;
    }
    const JValue* kv = v.find("kind");
    if (!kv) {
        ck.add(path + ".kind: is required (allowed: " + R.kind_list + ")");
        return false;
    }
    const KindRules* kind = kv->type == JT::String ? R.kind(kv->text) : nullptr;
    if (!kind) {
        ck.add(path + ".kind: unknown kind (allowed: " + R.kind_list + "), got " + got(*kv));
        return false;
    }
    Model m{v, path, {&R.feature, kind}, {}, true};
    for (const SectionRules* s : m.rules)
        for (const FieldRule& f : s->fields) check_field(ck, m, f);
    check_extras(ck, m);
    if (!m.ok) return false;
    check_model_rules(ck, m);
    out.kind = kind;
    out.vals = std::move(m.vals);
    return m.ok;
}

// the core row of a checked feature (WorldSpec.core_features), from the table's row entries
void feature_row(const FeatureOut& f, double row[16]) {
    const SpecRules& R = spec_rules();
    std::fill(row, row + 16, 0.0);
    for (const SectionRules* s : {static_cast<const SectionRules*>(&R.feature),
                                  static_cast<const SectionRules*>(f.kind)}) {
        for (const RowEntry& e : s->row) {
            const std::size_t col = static_cast<std::size_t>(e.col);
            if (e.what == RowEntry::Code) {
                row[col] = f.kind->code;
            } else if (e.what == RowEntry::Direction) {
                unit_vector(f.num(e.key), f.num(e.key2), row + col);
            } else {
                if (!e.only_if_key.empty()) {
                    const FieldRule* when = s->field(e.only_if_key);
                    const std::size_t i = static_cast<std::size_t>(f.num(e.only_if_key));
                    if (!when || std::find(e.only_if_in.begin(), e.only_if_in.end(), when->values[i]) ==
                                     e.only_if_in.end())
                        continue;
                }
                const Val* v = f.val(e.key);
                if (!v || !v->present) continue;
                const double x = e.from_bearing ? heading_of_bearing(v->num[0]) : v->num[0];
                row[col] = e.radians ? x * (kPi / 180.0) : x;  // math.radians
            }
        }
    }
}

// this feature's term of the amplitude sum (docs/terrain.md, "Validity")
double feature_amplitude(const FeatureOut& f) {
    const KindRules& k = *f.kind;
    double sum = 0;
    if (k.amplitude == KindRules::Abs) {
        for (const std::string& key : k.amplitude_keys) sum += std::fabs(f.num(key));
    } else if (k.amplitude == KindRules::Sum) {
        for (const std::string& key : k.amplitude_keys) sum += f.num(key);
    } else if (k.amplitude_keys.size() == 3) {
        const double a = f.num(k.amplitude_keys[0]), g = f.num(k.amplitude_keys[1]);
        const int n = static_cast<int>(f.num(k.amplitude_keys[2]));
        double s = 0;  // sum(gain**k for k in range(octaves))
        for (int i = 0; i < n; ++i) s += std::pow(g, static_cast<double>(i));
        sum = std::fabs(a) * s;
    }
    return sum;
}

// a nested section (lod, collision) or one layer
bool check_table(Checker& ck, const JValue& v, const std::string& path, const SectionRules& s,
                 Model*& out, std::vector<Model>& store) {
    store.push_back(Model{v, path, {&s}, {}, true});
    Model& m = store.back();
    for (const FieldRule& f : s.fields) check_field(ck, m, f);
    check_extras(ck, m);
    if (m.ok) check_model_rules(ck, m);
    out = &m;
    return m.ok;
}

// a message template of the table with its {name} placeholders filled in
std::string fill(const std::string& tpl, const std::vector<std::pair<const char*, std::string>>& words) {
    std::string out;
    for (std::size_t i = 0; i < tpl.size();) {
        const std::size_t close = tpl[i] == '{' ? tpl.find('}', i) : std::string::npos;
        if (close != std::string::npos) {
            const std::string key = tpl.substr(i + 1, close - i - 1);
            for (const auto& w : words)
                if (key == w.first) out += w.second;
            i = close + 1;
        } else {
            out += tpl[i++];
        }
    }
    return out;
}

// keys renamed in the table, given in their old spelling (and not also in the new one), take the
// new one; a heading becomes a bearing. Each adds its deprecation message to `notes`, worded by
// the table's renamed_messages exactly as spec.py's migrate_renamed words its warnings.
void migrate_renamed(JValue& root, std::vector<std::string>& notes) {
    const SpecRules& R = spec_rules();
    if (root.type != JT::Object) return;
    for (JMember& top : root.members) {
        if (top.key != "features" || top.value.type != JT::Array) continue;
        for (std::size_t i = 0; i < top.value.items.size(); ++i) {
            JValue& f = top.value.items[i];
            if (f.type != JT::Object) continue;
            const JValue* kv = f.find("kind");
            const KindRules* kind = kv && kv->type == JT::String ? R.kind(kv->text) : nullptr;
            if (!kind) continue;
            std::string what = "features[" + std::to_string(i) + "]";
            const JValue* name = f.find("name");
            if (name && name->type == JT::String && !name->text.empty())
                what += " (" + quote_text(name->text, static_cast<std::size_t>(-1)) + ")";
            for (const Renamed& rn : kind->renamed) {
                if (f.find(rn.to.c_str())) continue;
                for (JMember& m : f.members) {
                    if (m.key != rn.from) continue;
                    m.key = rn.to;
                    if (rn.heading_to_bearing && m.value.type == JT::Number && std::isfinite(m.value.number)) {
                        m.value.number = bearing_of_heading(m.value.number);
                        m.value.is_int = false;
                        m.value.text = format_number(m.value.number);
                        notes.push_back(fill(rn.message, {{"feature", what},
                                                          {"from", rn.from},
                                                          {"to", rn.to},
                                                          {"value", m.value.text}}));
                    } else {
                        notes.push_back(fill(R.rename_message, {{"feature", what}, {"from", rn.from}, {"to", rn.to}}));
                    }
                }
            }
        }
    }
}

void validate(Checker& ck, const JValue& root, SpecData& out) {
    const SpecRules& R = spec_rules();
    if (root.type != JT::Object) {
        ck.add("(top level): must be a table (allowed: a table), got " + got(root));
        return;
    }
    Model w{root, "", {&R.world}, {}, true};
    std::vector<Model> tables;
    tables.reserve(2);
    Model* lod = nullptr;
    Model* col = nullptr;
    std::vector<FeatureOut> feats;
    std::vector<Model> layer_models;
    for (const FieldRule& f : R.world.fields) {
        check_field(ck, w, f);
        const Val& v = w.vals.back().second;
        if (!v.raw) continue;
        if (f.type == RuleType::Table) {
            Model*& slot = f.section == "lod" ? lod : col;
            if (!check_table(ck, *v.raw, f.key, R.section(f.section), slot, tables)) w.ok = false;
        } else if (f.type == RuleType::List && f.section == "feature") {
            feats.resize(v.raw->items.size());
            for (std::size_t i = 0; i < v.raw->items.size(); ++i)
                if (!check_feature(ck, v.raw->items[i], i, feats[i])) w.ok = false;
        } else if (f.type == RuleType::List) {
            layer_models.reserve(v.raw->items.size());
            for (std::size_t i = 0; i < v.raw->items.size(); ++i) {
                const std::string path = f.key + "[" + std::to_string(i) + "]";
                const JValue& item = v.raw->items[i];
                if (item.type != JT::Object) {
                    ck.add(path + ": must be a table (allowed: a table), got " + got(item));
                    w.ok = false;
                    continue;
                }
                Model* m = nullptr;
                if (!check_table(ck, item, path, R.layer, m, layer_models)) w.ok = false;
            }
        }
    }
    check_extras(ck, w);
    if (!w.ok) return;

    // the world's checks (they need the radius and every feature)
    const double radius = w.num("radius_m");
    for (const CheckRule& c : R.world.checks) {
        if (c.rule == "at_most_fraction") {
            const double value = w.num(c.key), limit = w.num(c.of) / c.divisor;
            const FieldRule* f = R.world.field(c.key);
            if (value > limit)
                ck.add(c.key + ": must be <= " + c.of + " / " + format_number(c.divisor) + " = " +
                       format_number(limit) + " (allowed: " + (f ? f->bounds.describe() : "") + " and <= " +
                       format_number(limit) + "), got " + format_number(value));
        } else if (c.rule == "block_footprint") {
            for (std::size_t i = 0; i < feats.size(); ++i) {
                const FeatureOut& f = feats[i];
                if (!f.kind->has_footprint) continue;
                const double reach = block_reach_deg(radius, f.num(f.kind->fp_half[0]), f.num(f.kind->fp_half[1]),
                                                     f.num(f.kind->fp_corner), f.num(f.kind->fp_grow));
                if (reach > c.max_deg + R.angle_slack_deg)
                    ck.add("features[" + std::to_string(i) + "]: " + f.kind->name +
                           " footprint (half sizes grown by wall_width_m) must stay within " +
                           format_number(c.max_deg) + "° of its centre (allowed: <= " + format_number(c.max_deg) +
                           "° at radius_m = " + format_number(radius) + "), got " + format_number(reach) + "°");
            }
        } else if (c.rule == "amplitude_sum") {
            double total = 0;
            for (const FeatureOut& f : feats) total += feature_amplitude(f);
            const double cap = c.below_fraction * w.num(c.of);
            if (total >= cap)
                ck.add("features: sum of |amplitudes| (heights, depths, rim heights, noise amplitude · Σ "
                       "gain^k) must be < " + format_number(c.below_fraction) + " · " + c.of + " = " +
                       format_number(cap) + " (allowed: < " + format_number(cap) + " m), got " +
                       format_number(total) + " m");
        }
    }
    if (ck.count()) return;

    // the validated spec, defaults filled in
    auto choice_name = [](const Model& m, const char* key) {
        const FieldRule* f = m.rule(key);
        const Val* v = m.val(key);
        return f && v ? f->values[static_cast<std::size_t>(v->num[0])] : std::string();
    };
    out.name = w.val("name")->text;
    out.radius_m = radius;
    out.tolerance_m = w.num("tolerance_m");
    out.offset = static_cast<int>(w.num("offset"));
    out.max_triangles = static_cast<std::uint64_t>(w.num("max_triangles"));
    // absent sections take their fields' defaults
    Model lod_default{root, "lod", {&R.lod}, {}, true}, col_default{root, "collision", {&R.collision}, {}, true};
    const JValue empty;
    for (Model* d : {&lod_default, &col_default})
        for (const FieldRule& f : d->rules[0]->fields) {
            Val v;
            v.present = f.has_default;
            std::copy(f.defaults, f.defaults + 4, v.num);
            d->vals.emplace_back(&f, v);
        }
    const Model& L = lod ? *lod : lod_default;
    const Model& C = col ? *col : col_default;
    out.levels = static_cast<int>(L.num("levels"));
    out.ratio = L.num("ratio");
    out.chunk_level = static_cast<int>(L.num("chunk_level"));
    out.skirt = choice_name(L, "seams") == "skirt";
    out.skirt_depth_m = L.num("skirt_depth_m");
    const Val* ct = C.val("tolerance_m");
    out.has_collision_tolerance = ct && ct->present;
    out.collision_tolerance_m = out.has_collision_tolerance ? ct->num[0] : 0.0;
    out.collision_centered = choice_name(C, "bias") == "centered";
    out.max_triangles_per_chunk = static_cast<std::uint64_t>(C.num("max_triangles_per_chunk"));
    out.features.assign(feats.size() * 16, 0.0);
    for (std::size_t i = 0; i < feats.size(); ++i) feature_row(feats[i], out.features.data() + 16 * i);
    out.layers.resize(layer_models.size());
    for (std::size_t i = 0; i < layer_models.size(); ++i) {
        const Model& m = layer_models[i];
        SpecLayer& l = out.layers[i];
        l.name = m.val("name")->text;
        const Val* c = m.val("color");
        std::copy(c->num, c->num + 3, l.color);
        const Val* s = m.val("slope_deg");
        std::copy(s->num, s->num + 2, l.slope_deg);
        const Val* a = m.val("altitude_m");
        std::copy(a->num, a->num + 2, l.altitude_m);
    }
}

}  // namespace

void unit_vector(double lat_deg, double lon_deg, double out[3]) {
    double sl, cl, sn, cn;
    sin_cos_deg(lat_deg, sl, cl);
    sin_cos_deg(lon_deg, sn, cn);
    out[0] = cl * sn;
    out[1] = sl;
    out[2] = cl * cn;
}

SpecLimits::SpecLimits()
    : max_bytes(spec_rules().max_bytes),
      max_depth(spec_rules().max_depth),
      max_values(spec_rules().max_values),
      max_problems(spec_rules().max_problems) {}

SpecStatus load_spec_json(const char* text, std::size_t length, const SpecLimits& limits,
                          SpecData& out, std::string& message) {
    out = SpecData{};
    message.clear();
    if (length > limits.max_bytes) {
        message = "cannot read world spec: the text is " + std::to_string(length) +
                  " bytes, more than the limit of " + std::to_string(limits.max_bytes);
        return SpecStatus::Malformed;
    }
    JValue root;
    {
        JsonLimits jl;
        jl.max_depth = limits.max_depth;
        jl.max_values = limits.max_values;
        std::string err;
        if (!parse_json(text, length, jl, root, err)) {
            message = "cannot read world spec: " + err;
            return SpecStatus::Malformed;
        }
    }
    Checker ck(limits.max_problems);
    std::vector<std::string> notes;
    migrate_renamed(root, notes);
    validate(ck, root, out);
    const std::size_t n = ck.count();
    if (n == 0) {
        out.warnings = std::move(notes);
        return SpecStatus::Ok;
    }
    if (n == 1) {
        message = "invalid world spec: " + ck.lines[0];
    } else {
        message = "invalid world spec (" + std::to_string(n) + " problems):";
        for (const std::string& line : ck.lines) message += "\n  - " + line;
        if (ck.more) message += "\n  - ... and " + std::to_string(ck.more) + " more problems";
    }
    out = SpecData{};
    return SpecStatus::Invalid;
}

}  // namespace gm
