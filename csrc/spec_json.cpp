// world specs from JSON text: a strict JSON reader (RFC 8259: no comments, trailing commas, NaN or
// Infinity literals, duplicate keys, byte order mark or lone surrogates; depth, size and value
// count limits) and a validator that mirrors src/globemill/spec.py field by field, including the
// text of its problem lines (`path: what (allowed: range), got value`, values written the way
// Python's json.dumps / repr write them), so a host sees the same messages as a Python user.
#include "spec_json.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <locale>
#include <sstream>
#include <unordered_set>
#include <utility>

namespace gm {
namespace {

constexpr double kPi = 3.14159265358979323846;  // the same double as Python's math.pi
constexpr std::size_t kMaxLayers = 255;  // WorldSpec.layers max_length (the 8-bit layer index)

// ---------------------------------------------------------------------------------------------
// JSON values

enum class JT : std::uint8_t { Null, Bool, Number, String, Array, Object };

struct JMember;

struct JValue {
    JT type = JT::Null;
    bool boolean = false;
    bool is_int = false;  // a number literal without fraction or exponent
    double number = 0;
    std::string text;  // a string's value, or a number's literal
    std::vector<JValue> items;
    std::vector<JMember> members;
};

struct JMember {
    std::string key;
    JValue value;
};

// ---------------------------------------------------------------------------------------------
// number text, locale-independent

bool read_double(const char* b, const char* e, double& out) {
#if defined(__cpp_lib_to_chars)
    auto r = std::from_chars(b, e, out);
    if (r.ec == std::errc() && r.ptr == e) return true;
    if (r.ec != std::errc::result_out_of_range) return false;
#else
    std::istringstream in(std::string(b, e));
    in.imbue(std::locale::classic());
    in >> out;
    if (!in.fail()) return true;
#endif
    // out of range: decide between overflow (infinity) and underflow (zero) from the decimal
    // exponent of the first non-zero digit, as float() does
    bool neg = *b == '-';
    const char* p = b + (neg ? 1 : 0);
    long lead = 0;  // position of the decimal point relative to the first non-zero digit
    bool seen = false, frac = false;
    for (; p < e && *p != 'e' && *p != 'E'; ++p) {
        if (*p == '.') {
            frac = true;
            continue;
        }
        if (!seen && *p == '0') {
            if (frac) --lead;
            continue;
        }
        if (!seen) {
            seen = true;
            if (frac) --lead;
            continue;
        }
        if (!frac) ++lead;
    }
    long ex = 0;
    if (p < e) {
        ++p;
        bool eneg = *p == '-';
        if (*p == '-' || *p == '+') ++p;
        for (; p < e; ++p) ex = std::min(ex * 10 + (*p - '0'), 100000L);
        if (eneg) ex = -ex;
    }
    double mag = (seen && ex + lead > 0) ? HUGE_VAL : 0.0;
    out = neg ? -mag : mag;
    return true;
}

// shortest round-trip digits and decimal exponent of a finite double
void shortest(double x, std::string& digits, int& exp10, bool& neg) {
    char buf[64];
#if defined(__cpp_lib_to_chars)
    auto r = std::to_chars(buf, buf + sizeof buf, x, std::chars_format::scientific);
    std::string s(buf, r.ptr);
#else
    std::string s;
    for (int p = 0; p <= 17; ++p) {
        std::ostringstream o;
        o.imbue(std::locale::classic());
        o.precision(p);
        o << std::scientific << x;
        s = o.str();
        double back = 0;
        std::istringstream in(s);
        in.imbue(std::locale::classic());
        in >> back;
        if (back == x) break;
    }
#endif
    neg = s[0] == '-';
    std::size_t i = neg ? 1 : 0;
    digits.clear();
    for (; i < s.size() && s[i] != 'e'; ++i)
        if (s[i] != '.') digits += s[i];
    exp10 = std::atoi(s.c_str() + i + 1);
    while (digits.size() > 1 && digits.back() == '0') digits.pop_back();
}

// Python's repr(float)
std::string py_repr(double x) {
    if (std::isnan(x)) return "nan";
    if (std::isinf(x)) return x > 0 ? "inf" : "-inf";
    std::string d;
    int e;
    bool neg;
    shortest(x, d, e, neg);
    std::string out = neg ? "-" : "";
    const int n = static_cast<int>(d.size());
    if (e >= -5 + 1 && e < 16) {
        const int decpt = e + 1;
        if (decpt <= 0) {
            out += "0." + std::string(static_cast<std::size_t>(-decpt), '0') + d;
        } else if (decpt >= n) {
            out += d + std::string(static_cast<std::size_t>(decpt - n), '0') + ".0";
        } else {
            out += d.substr(0, static_cast<std::size_t>(decpt)) + "." + d.substr(static_cast<std::size_t>(decpt));
        }
    } else {
        out += d.substr(0, 1);
        if (n > 1) out += "." + d.substr(1);
        char eb[16];
        std::snprintf(eb, sizeof eb, "e%c%02d", e < 0 ? '-' : '+', e < 0 ? -e : e);
        out += eb;
    }
    return out;
}

// Python's format(x, ".{prec}g")
std::string py_g(double x, int prec) {
    if (std::isnan(x)) return "nan";
    if (std::isinf(x)) return x > 0 ? "inf" : "-inf";
    char buf[64];
#if defined(__cpp_lib_to_chars)
    auto r = std::to_chars(buf, buf + sizeof buf, x, std::chars_format::general, prec);
    return std::string(buf, r.ptr);
#else
    std::ostringstream o;
    o.imbue(std::locale::classic());
    o.precision(prec);
    o << x;
    return o.str();
#endif
}

// spec.py's _num: a limit the way a person writes it
std::string num(double v) {
    if (std::isfinite(v) && v == std::trunc(v) && std::fabs(v) < 1e16) {
        char buf[32];
        std::snprintf(buf, sizeof buf, "%lld", static_cast<long long>(v));
        return buf;
    }
    return std::isfinite(v) ? py_g(v, 6) : py_repr(v);
}

// Python's str(int) of an integer literal
std::string int_text(const std::string& lit) {
    if (lit.find_first_not_of("-0") == std::string::npos) return "0";
    return lit;
}

// output that stops growing once it is longer than the 80 characters a message shows
struct Out {
    std::string s;
    bool full() const { return s.size() > 81; }
    void put(const std::string& t) {
        if (!full()) s += t;
    }
    void put(char c) {
        if (!full()) s += c;
    }
};

void hex4(Out& o, unsigned v) {
    char b[8];
    std::snprintf(b, sizeof b, "\\u%04x", v & 0xFFFFu);
    o.put(b);
}

// decode one UTF-8 sequence at s[i] (already validated by the reader)
unsigned utf8_at(const std::string& s, std::size_t& i) {
    unsigned char c = static_cast<unsigned char>(s[i++]);
    if (c < 0x80) return c;
    int extra = c >= 0xF0 ? 3 : c >= 0xE0 ? 2 : 1;
    unsigned cp = c & (0x3Fu >> extra);
    for (int k = 0; k < extra && i < s.size(); ++k) cp = (cp << 6) | (static_cast<unsigned char>(s[i++]) & 0x3Fu);
    return cp;
}

// json.dumps(str) with ensure_ascii
void dumps_str(Out& o, const std::string& s) {
    o.put('"');
    for (std::size_t i = 0; i < s.size() && !o.full();) {
        unsigned cp = utf8_at(s, i);
        switch (cp) {
            case '"': o.put("\\\""); break;
            case '\\': o.put("\\\\"); break;
            case '\n': o.put("\\n"); break;
            case '\r': o.put("\\r"); break;
            case '\t': o.put("\\t"); break;
            case '\b': o.put("\\b"); break;
            case '\f': o.put("\\f"); break;
            default:
                if (cp < 0x20 || cp > 0x7E) {
                    if (cp > 0xFFFF) {
                        cp -= 0x10000;
                        hex4(o, 0xD800 + (cp >> 10));
                        hex4(o, 0xDC00 + (cp & 0x3FF));
                    } else {
                        hex4(o, cp);
                    }
                } else {
                    o.put(static_cast<char>(cp));
                }
        }
    }
    o.put('"');
}

// json.dumps(value, allow_nan=True)
void dumps(Out& o, const JValue& v) {
    if (o.full()) return;
    switch (v.type) {
        case JT::Null: o.put("null"); break;
        case JT::Bool: o.put(v.boolean ? "true" : "false"); break;
        case JT::Number:
            if (v.is_int) o.put(int_text(v.text));
            else if (std::isinf(v.number)) o.put(v.number > 0 ? "Infinity" : "-Infinity");
            else o.put(py_repr(v.number));
            break;
        case JT::String: dumps_str(o, v.text); break;
        case JT::Array:
            o.put('[');
            for (std::size_t i = 0; i < v.items.size() && !o.full(); ++i) {
                if (i) o.put(", ");
                dumps(o, v.items[i]);
            }
            o.put(']');
            break;
        case JT::Object:
            o.put('{');
            for (std::size_t i = 0; i < v.members.size() && !o.full(); ++i) {
                if (i) o.put(", ");
                dumps_str(o, v.members[i].key);
                o.put(": ");
                dumps(o, v.members[i].value);
            }
            o.put('}');
            break;
    }
}

// Python's repr(str)
void repr_str(Out& o, const std::string& s) {
    const bool dq = s.find('\'') != std::string::npos && s.find('"') == std::string::npos;
    const char q = dq ? '"' : '\'';
    o.put(q);
    for (std::size_t i = 0; i < s.size() && !o.full();) {
        std::size_t start = i;
        unsigned cp = utf8_at(s, i);
        if (cp == '\\') o.put("\\\\");
        else if (cp == static_cast<unsigned>(q)) { o.put('\\'); o.put(q); }
        else if (cp == '\n') o.put("\\n");
        else if (cp == '\r') o.put("\\r");
        else if (cp == '\t') o.put("\\t");
        else if (cp < 0x20 || (cp >= 0x7F && cp <= 0xA0)) {
            char b[8];
            std::snprintf(b, sizeof b, "\\x%02x", cp);
            o.put(b);
        } else {
            o.put(s.substr(start, i - start));
        }
    }
    o.put(q);
}

// Python's str(value) of a parsed JSON value (containers use repr of their items)
void py_str(Out& o, const JValue& v, bool top) {
    if (o.full()) return;
    switch (v.type) {
        case JT::Null: o.put("None"); break;
        case JT::Bool: o.put(v.boolean ? "True" : "False"); break;
        case JT::Number: o.put(v.is_int ? int_text(v.text) : py_repr(v.number)); break;
        case JT::String:
            if (top) o.put(v.text);
            else repr_str(o, v.text);
            break;
        case JT::Array:
            o.put('[');
            for (std::size_t i = 0; i < v.items.size() && !o.full(); ++i) {
                if (i) o.put(", ");
                py_str(o, v.items[i], false);
            }
            o.put(']');
            break;
        case JT::Object:
            o.put('{');
            for (std::size_t i = 0; i < v.members.size() && !o.full(); ++i) {
                if (i) o.put(", ");
                repr_str(o, v.members[i].key);
                o.put(": ");
                py_str(o, v.members[i].value, false);
            }
            o.put('}');
            break;
    }
}

std::string clip80(std::string t) {
    if (t.size() > 80) t = t.substr(0, 77) + "...";
    return t;
}

// spec.py's _got: an offending input value for a message
std::string got(const JValue& v) {
    if (v.type == JT::Number && !v.is_int) return clip80(py_repr(v.number));
    Out o;
    dumps(o, v);
    return clip80(o.s);
}

std::string got_float(double x) { return clip80(py_repr(x)); }

std::string got_text(const std::string& s) {
    Out o;
    dumps_str(o, s);
    return clip80(o.s);
}

// ---------------------------------------------------------------------------------------------
// the reader

class Reader {
public:
    Reader(const char* s, std::size_t n, const SpecLimits& lim) : s_(s), n_(n), lim_(lim) {}

    bool parse(JValue& out, std::string& message) {
        if (n_ >= 3 && static_cast<unsigned char>(s_[0]) == 0xEF &&
            static_cast<unsigned char>(s_[1]) == 0xBB && static_cast<unsigned char>(s_[2]) == 0xBF) {
            fail("unexpected UTF-8 byte order mark", 0);
        } else {
            ws();
            if (value(out)) {
                ws();
                if (i_ < n_) fail("extra data after the value", i_);
            }
        }
        if (err_.empty()) return true;
        // line and column (in characters, counted from 1) like Python's json module
        std::size_t line = 1, col = 1;
        for (std::size_t k = 0; k < err_pos_ && k < n_; ++k) {
            if (s_[k] == '\n') {
                ++line;
                col = 1;
            } else if ((static_cast<unsigned char>(s_[k]) & 0xC0) != 0x80) {
                ++col;
            }
        }
        message = "malformed JSON at line " + std::to_string(line) + ", column " +
                  std::to_string(col) + ": " + err_;
        return false;
    }

private:
    bool fail(const std::string& what, std::size_t pos) {
        if (err_.empty()) {
            err_ = what;
            err_pos_ = pos;
        }
        return false;
    }

    void ws() {
        while (i_ < n_ && (s_[i_] == ' ' || s_[i_] == '\t' || s_[i_] == '\n' || s_[i_] == '\r')) ++i_;
    }

    bool lit(const char* word) {
        std::size_t L = std::strlen(word);
        if (n_ - i_ >= L && std::memcmp(s_ + i_, word, L) == 0) {
            i_ += L;
            return true;
        }
        return false;
    }

    bool value(JValue& v) {
        if (++values_ > lim_.max_values)
            return fail("more than " + std::to_string(lim_.max_values) + " values", i_);
        if (i_ >= n_) return fail("expecting a value, got the end of the text", i_);
        const char c = s_[i_];
        if (c == '{' || c == '[') {
            if (++depth_ > lim_.max_depth)
                return fail("nested deeper than " + std::to_string(lim_.max_depth) + " levels", i_);
            bool ok = c == '{' ? object(v) : array(v);
            --depth_;
            return ok;
        }
        if (c == '"') {
            v.type = JT::String;
            return string(v.text);
        }
        if (c == '-' || (c >= '0' && c <= '9')) return number(v);
        if (lit("true")) {
            v.type = JT::Bool;
            v.boolean = true;
            return true;
        }
        if (lit("false")) {
            v.type = JT::Bool;
            return true;
        }
        if (lit("null")) return true;
        if (lit("NaN") || lit("Infinity"))
            return fail("NaN and Infinity are not JSON numbers", i_);
        return fail("expecting a value", i_);
    }

    bool object(JValue& v) {
        v.type = JT::Object;
        ++i_;
        ws();
        if (i_ < n_ && s_[i_] == '}') {
            ++i_;
            return true;
        }
        std::unordered_set<std::string> keys;
        for (;;) {
            ws();
            if (i_ >= n_ || s_[i_] != '"')
                return fail("expecting a property name enclosed in double quotes", i_);
            const std::size_t at = i_;
            JMember m;
            if (!string(m.key)) return false;
            if (!keys.insert(m.key).second) {
                Out o;
                dumps_str(o, m.key);
                return fail("duplicate key " + clip80(o.s), at);
            }
            ws();
            if (i_ >= n_ || s_[i_] != ':') return fail("expecting ':' delimiter", i_);
            ++i_;
            ws();
            if (!value(m.value)) return false;
            v.members.push_back(std::move(m));
            ws();
            if (i_ < n_ && s_[i_] == ',') {
                ++i_;
                continue;
            }
            if (i_ < n_ && s_[i_] == '}') {
                ++i_;
                return true;
            }
            return fail("expecting ',' or '}'", i_);
        }
    }

    bool array(JValue& v) {
        v.type = JT::Array;
        ++i_;
        ws();
        if (i_ < n_ && s_[i_] == ']') {
            ++i_;
            return true;
        }
        for (;;) {
            ws();
            v.items.emplace_back();
            if (!value(v.items.back())) return false;
            ws();
            if (i_ < n_ && s_[i_] == ',') {
                ++i_;
                continue;
            }
            if (i_ < n_ && s_[i_] == ']') {
                ++i_;
                return true;
            }
            return fail("expecting ',' or ']'", i_);
        }
    }

    bool number(JValue& v) {
        const std::size_t b = i_;
        if (s_[i_] == '-') ++i_;
        if (lit("Infinity")) return fail("NaN and Infinity are not JSON numbers", b);
        if (i_ >= n_ || !(s_[i_] >= '0' && s_[i_] <= '9')) return fail("invalid number", b);
        if (s_[i_] == '0') {
            ++i_;
        } else {
            while (i_ < n_ && s_[i_] >= '0' && s_[i_] <= '9') ++i_;
        }
        bool is_int = true;
        if (i_ < n_ && s_[i_] == '.') {
            is_int = false;
            ++i_;
            if (i_ >= n_ || !(s_[i_] >= '0' && s_[i_] <= '9')) return fail("invalid number", b);
            while (i_ < n_ && s_[i_] >= '0' && s_[i_] <= '9') ++i_;
        }
        if (i_ < n_ && (s_[i_] == 'e' || s_[i_] == 'E')) {
            is_int = false;
            ++i_;
            if (i_ < n_ && (s_[i_] == '+' || s_[i_] == '-')) ++i_;
            if (i_ >= n_ || !(s_[i_] >= '0' && s_[i_] <= '9')) return fail("invalid number", b);
            while (i_ < n_ && s_[i_] >= '0' && s_[i_] <= '9') ++i_;
        }
        v.type = JT::Number;
        v.is_int = is_int;
        v.text.assign(s_ + b, i_ - b);
        if (!read_double(s_ + b, s_ + i_, v.number)) return fail("invalid number", b);
        return true;
    }

    unsigned hex(std::size_t at, bool& ok) {
        unsigned cp = 0;
        for (std::size_t k = at; k < at + 4; ++k) {
            if (k >= n_) {
                ok = false;
                return 0;
            }
            char c = s_[k];
            cp <<= 4;
            if (c >= '0' && c <= '9') cp |= static_cast<unsigned>(c - '0');
            else if (c >= 'a' && c <= 'f') cp |= static_cast<unsigned>(c - 'a' + 10);
            else if (c >= 'A' && c <= 'F') cp |= static_cast<unsigned>(c - 'A' + 10);
            else {
                ok = false;
                return 0;
            }
        }
        return cp;
    }

    static void put_utf8(std::string& out, unsigned cp) {
        if (cp < 0x80) {
            out += static_cast<char>(cp);
        } else if (cp < 0x800) {
            out += static_cast<char>(0xC0 | (cp >> 6));
            out += static_cast<char>(0x80 | (cp & 0x3F));
        } else if (cp < 0x10000) {
            out += static_cast<char>(0xE0 | (cp >> 12));
            out += static_cast<char>(0x80 | ((cp >> 6) & 0x3F));
            out += static_cast<char>(0x80 | (cp & 0x3F));
        } else {
            out += static_cast<char>(0xF0 | (cp >> 18));
            out += static_cast<char>(0x80 | ((cp >> 12) & 0x3F));
            out += static_cast<char>(0x80 | ((cp >> 6) & 0x3F));
            out += static_cast<char>(0x80 | (cp & 0x3F));
        }
    }

    bool string(std::string& out) {
        const std::size_t start = i_;
        ++i_;
        for (;;) {
            if (i_ >= n_) return fail("unterminated string", start);
            const unsigned char c = static_cast<unsigned char>(s_[i_]);
            if (c == '"') {
                ++i_;
                return true;
            }
            if (c < 0x20) return fail("invalid control character in a string", i_);
            if (c == '\\') {
                if (i_ + 1 >= n_) return fail("unterminated string", start);
                const char e = s_[i_ + 1];
                const std::size_t at = i_;
                i_ += 2;
                switch (e) {
                    case '"': out += '"'; break;
                    case '\\': out += '\\'; break;
                    case '/': out += '/'; break;
                    case 'b': out += '\b'; break;
                    case 'f': out += '\f'; break;
                    case 'n': out += '\n'; break;
                    case 'r': out += '\r'; break;
                    case 't': out += '\t'; break;
                    case 'u': {
                        bool ok = true;
                        unsigned cp = hex(i_, ok);
                        if (!ok) return fail("invalid \\uXXXX escape", at);
                        i_ += 4;
                        if (cp >= 0xDC00 && cp <= 0xDFFF) return fail("lone UTF-16 surrogate in a \\u escape", at);
                        if (cp >= 0xD800 && cp <= 0xDBFF) {
                            if (!(i_ + 1 < n_ && s_[i_] == '\\' && s_[i_ + 1] == 'u'))
                                return fail("lone UTF-16 surrogate in a \\u escape", at);
                            unsigned lo = hex(i_ + 2, ok);
                            if (!ok) return fail("invalid \\uXXXX escape", i_);
                            if (!(lo >= 0xDC00 && lo <= 0xDFFF))
                                return fail("lone UTF-16 surrogate in a \\u escape", at);
                            i_ += 6;
                            cp = 0x10000 + ((cp - 0xD800) << 10) + (lo - 0xDC00);
                        }
                        put_utf8(out, cp);
                        break;
                    }
                    default:
                        return fail("invalid escape", at);
                }
                continue;
            }
            if (c < 0x80) {
                out += static_cast<char>(c);
                ++i_;
                continue;
            }
            // one UTF-8 sequence: no overlong forms, no surrogates, nothing past U+10FFFF
            int extra;
            unsigned cp, min;
            if (c >= 0xC2 && c <= 0xDF) { extra = 1; cp = c & 0x1Fu; min = 0x80; }
            else if (c >= 0xE0 && c <= 0xEF) { extra = 2; cp = c & 0x0Fu; min = 0x800; }
            else if (c >= 0xF0 && c <= 0xF4) { extra = 3; cp = c & 0x07u; min = 0x10000; }
            else return fail("text is not UTF-8", i_);
            if (n_ - i_ <= static_cast<std::size_t>(extra)) return fail("text is not UTF-8", i_);
            for (int k = 1; k <= extra; ++k) {
                unsigned char cc = static_cast<unsigned char>(s_[i_ + static_cast<std::size_t>(k)]);
                if ((cc & 0xC0) != 0x80) return fail("text is not UTF-8", i_);
                cp = (cp << 6) | (cc & 0x3Fu);
            }
            if (cp < min || cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF))
                return fail("text is not UTF-8", i_);
            out.append(s_ + i_, static_cast<std::size_t>(extra) + 1);
            i_ += static_cast<std::size_t>(extra) + 1;
        }
    }

    const char* s_;
    std::size_t n_, i_ = 0;
    const SpecLimits& lim_;
    int depth_ = 0;
    std::size_t values_ = 0;
    std::string err_;
    std::size_t err_pos_ = 0;
};

// ---------------------------------------------------------------------------------------------
// the validator (mirrors spec.py)

struct Num {
    bool integer = false;
    bool has_lo = false, lo_excl = false;
    double lo = 0;
    bool has_hi = false, hi_excl = false;
    double hi = 0;
    bool nonzero = false;
};

Num any_num() { return Num{}; }
Num gt(double lo) {
    Num n;
    n.has_lo = n.lo_excl = true;
    n.lo = lo;
    return n;
}
Num ge(double lo) {
    Num n;
    n.has_lo = true;
    n.lo = lo;
    return n;
}
Num range(double lo, double hi) {
    Num n = ge(lo);
    n.has_hi = true;
    n.hi = hi;
    return n;
}
Num gt_le(double lo, double hi) {
    Num n = gt(lo);
    n.has_hi = true;
    n.hi = hi;
    return n;
}
Num int_range(double lo, double hi) {
    Num n = range(lo, hi);
    n.integer = true;
    return n;
}

// spec.py's _describe for numbers
std::string describe(const Num& b) {
    const std::string noun = b.integer ? "integer " : "";
    std::string lo = b.lo_excl ? "> " : ">= ", hi = b.hi_excl ? "< " : "<= ";
    std::string t;
    if (b.has_lo && b.has_hi && !b.lo_excl && !b.hi_excl) t = noun + num(b.lo) + " to " + num(b.hi);
    else if (b.has_lo && b.has_hi) t = noun + lo + num(b.lo) + " and " + hi + num(b.hi);
    else if (b.has_lo) t = noun + lo + num(b.lo);
    else if (b.has_hi) t = noun + hi + num(b.hi);
    else t = b.integer ? "any integer" : "any finite number";
    if (b.nonzero) t += " except 0";
    return t;
}

// spec.py's _ALLOWED_OVERRIDES: ranges that depend on other fields
const char* override_for(const std::string& key) {
    if (key == "tolerance_m") return "> 0 and <= radius_m / 10";
    if (key == "corner_m") return "0 to min(half_x_m, half_y_m)";
    if (key == "blend_width_m") return "> 0; required for smooth_max and smooth_min";
    if (key == "slope_deg") return "[lo, hi] with 0 <= lo <= hi <= 90";
    if (key == "altitude_m") return "[lo, hi] of finite numbers with lo <= hi";
    return nullptr;
}

const char* const kKinds[] = {"hill", "mesa", "block", "crater", "ridge", "noise"};
const char* const kBlends[] = {"add", "max", "min", "set", "smooth_max", "smooth_min"};
const char* const kKindList = "hill, mesa, block, crater, ridge, noise";

const JValue* find(const JValue& obj, const char* key) {
    for (const JMember& m : obj.members)
        if (m.key == key) return &m.value;
    return nullptr;
}

std::string join(const std::string& path, const std::string& key) {
    return path.empty() ? key : path + "." + key;
}

class Checker {
public:
    explicit Checker(std::size_t cap) : cap_(cap) {}

    void add(const std::string& line) {
        if (lines.size() < cap_) lines.push_back(line);
        else ++more;
    }
    std::size_t count() const { return lines.size() + more; }

    // one object model: fields are checked in definition order, then unknown keys in input order
    struct Model {
        const JValue& obj;
        std::string path;
        std::vector<const char*> keys;
        bool ok = true;
    };

    void problem(Model& m, const std::string& key, const std::string& text) {
        add(join(m.path, key) + ": " + text);
        m.ok = false;
    }

    static std::string allowed_for(const std::string& key, const std::string& fallback) {
        const char* o = override_for(key);
        return o ? o : fallback;
    }

    // a float (or StrictInt when b.integer) value at `path`; false after adding a problem
    bool number_value(const JValue& v, const std::string& path, const Num& b,
                      const std::string& allowed, double& out) {
        const std::string tail = " (allowed: " + allowed + "), got ";
        if (b.integer) {
            if (v.type != JT::Number || !v.is_int) {
                add(path + ": must be an integer" + tail + got(v));
                return false;
            }
        } else {
            if (v.type != JT::Number || (v.is_int && std::isinf(v.number))) {
                add(path + ": must be a number" + tail + got(v));
                return false;
            }
            if (!std::isfinite(v.number)) {
                add(path + ": must be a finite number" + tail + got(v));
                return false;
            }
        }
        const double x = v.number;
        if (b.has_lo && (b.lo_excl ? !(x > b.lo) : !(x >= b.lo))) {
            add(path + ": must be " + (b.lo_excl ? "> " : ">= ") + num(b.lo) + tail + got(v));
            return false;
        }
        if (b.has_hi && (b.hi_excl ? !(x < b.hi) : !(x <= b.hi))) {
            add(path + ": must be " + (b.hi_excl ? "< " : "<= ") + num(b.hi) + tail + got(v));
            return false;
        }
        if (b.nonzero && x == 0.0) {
            add(path + ": must not be 0" + tail + got(v));
            return false;
        }
        out = x;
        return true;
    }

    // a numeric field; `present` tells whether a value (not null) was given
    void number(Model& m, const char* key, const Num& b, bool required, double& out,
                bool nullable = false, bool* present = nullptr) {
        m.keys.push_back(key);
        const std::string allowed = allowed_for(key, describe(b));
        const JValue* v = find(m.obj, key);
        if (present) *present = false;
        if (!v) {
            if (required) problem(m, key, "is required (allowed: " + allowed + ")");
            return;
        }
        if (nullable && v->type == JT::Null) return;
        if (!number_value(*v, join(m.path, key), b, allowed, out)) {
            m.ok = false;
            return;
        }
        if (present) *present = true;
    }

    // a Literal field: one of `values`; out is the index
    void choice(Model& m, const char* key, const char* const* values, int n, int& out) {
        m.keys.push_back(key);
        const JValue* v = find(m.obj, key);
        if (!v) return;
        if (v->type == JT::String)
            for (int i = 0; i < n; ++i)
                if (v->text == values[i]) {
                    out = i;
                    return;
                }
        std::string allowed;
        for (int i = 0; i < n; ++i) allowed += (i ? ", " : "") + std::string(values[i]);
        problem(m, key, "unknown value (allowed: " + allowed + "), got " + got(*v));
    }

    // a fixed-length list of numbers (a tuple in spec.py)
    void tuple(Model& m, const char* key, int n, const Num& item, bool required, double* out) {
        m.keys.push_back(key);
        const std::string item_allowed = describe(item);
        const std::string whole = "a list of " + std::to_string(n) + " numbers, each " + item_allowed;
        const std::string allowed = allowed_for(key, whole);
        const JValue* v = find(m.obj, key);
        if (!v) {
            if (required) problem(m, key, "is required (allowed: " + allowed + ")");
            return;
        }
        if (v->type != JT::Array) {
            problem(m, key, "must be a list (allowed: " + allowed + "), got " + got(*v));
            return;
        }
        const std::size_t size = v->items.size(), want = static_cast<std::size_t>(n);
        if (size > want) {
            problem(m, key, "must have " + std::to_string(n) + " items (allowed: " + allowed + "), got " + got(*v));
            return;
        }
        double tmp[4] = {0, 0, 0, 0};
        bool ok = true;
        for (std::size_t i = 0; i < size; ++i)
            if (!number_value(v->items[i], join(m.path, key) + "[" + std::to_string(i) + "]", item,
                              item_allowed, tmp[i]))
                ok = false;
        for (std::size_t i = size; i < want; ++i) {
            problem(m, key, "must have " + std::to_string(n) + " items (allowed: " + whole + "), got " + got(*v));
            ok = false;
        }
        if (!ok) {
            m.ok = false;
            return;
        }
        for (std::size_t i = 0; i < want; ++i) out[i] = tmp[i];
    }

    // a string field
    void text(Model& m, const char* key, bool required, bool nullable, const std::string& allowed,
              std::string& out, bool pattern_name = false, bool nonempty = false) {
        m.keys.push_back(key);
        const JValue* v = find(m.obj, key);
        if (!v) {
            if (required) problem(m, key, "is required (allowed: " + allowed + ")");
            return;
        }
        if (nullable && v->type == JT::Null) return;
        if (v->type != JT::String) {
            problem(m, key, "must be a string (allowed: " + allowed + "), got " + got(*v));
            return;
        }
        if (pattern_name) {
            bool match = !v->text.empty() && v->text.size() <= 64;
            for (char c : v->text)
                if (!((c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '_' || c == '-'))
                    match = false;
            if (!match) {
                problem(m, key, "does not match the allowed pattern (allowed: " + allowed + "), got " + got(*v));
                return;
            }
        }
        if (nonempty && v->text.empty()) {
            problem(m, key, "string should have at least 1 character (allowed: " + allowed + "), got " + got(*v));
            return;
        }
        out = v->text;
    }

    // a nested table; false (after a problem) when the value is there but not a table
    const JValue* table(Model& m, const char* key) {
        m.keys.push_back(key);
        const JValue* v = find(m.obj, key);
        if (!v) return nullptr;
        if (v->type != JT::Object) {
            problem(m, key, "must be a table (allowed: a table), got " + got(*v));
            return nullptr;
        }
        return v;
    }

    const JValue* list(Model& m, const char* key) {
        m.keys.push_back(key);
        const JValue* v = find(m.obj, key);
        if (!v) return nullptr;
        if (v->type != JT::Array) {
            problem(m, key, "must be a list (allowed: a list), got " + got(*v));
            return nullptr;
        }
        return v;
    }

    // unknown keys, after the fields
    void extras(Model& m) {
        std::string known;
        for (std::size_t i = 0; i < m.keys.size(); ++i) known += (i ? ", " : "") + std::string(m.keys[i]);
        for (const JMember& mem : m.obj.members) {
            bool seen = false;
            for (const char* k : m.keys)
                if (mem.key == k) seen = true;
            if (!seen)
                problem(m, mem.key, "unknown key (allowed keys: " + known + "), got " + got(mem.value));
        }
    }

    std::vector<std::string> lines;
    std::size_t more = 0;

private:
    std::size_t cap_;
};

// python: sin and cos of an angle in degrees, exact at multiples of 90 degrees (spec._sin_cos_deg)
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

// Block.footprint_angle_deg of spec.py
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

struct FeatureOut {
    double row[16] = {};
    double amplitude = 0;  // its term of the validity sum
    bool block = false;
    double hx = 0, hy = 0, corner = 0, wall = 0;
};

// one feature table; false when it has problems
bool check_feature(Checker& ck, const JValue& v, std::size_t index, FeatureOut& f) {
    const std::string path = "features[" + std::to_string(index) + "]";
    if (v.type != JT::Object) {
        ck.add(path + ": must be a table (allowed: a table whose kind is one of " + kKindList +
               "), got " + got(v));
        return false;
    }
    const JValue* kv = find(v, "kind");
    if (!kv) {
        ck.add(path + ".kind: is required (allowed: " + kKindList + ")");
        return false;
    }
    int kind = -1;
    if (kv->type == JT::String)
        for (int i = 0; i < 6; ++i)
            if (kv->text == kKinds[i]) kind = i;
    if (kind < 0) {
        Out o;
        py_str(o, *kv, true);
        ck.add(path + ".kind: unknown kind (allowed: " + kKindList + "), got " + got_text(o.s));
        return false;
    }
    Checker::Model m{v, path, {}, true};
    m.keys.push_back("kind");
    int blend = 0;
    ck.choice(m, "blend", kBlends, 6, blend);
    double bw = 0;
    bool has_bw = false;
    ck.number(m, "blend_width_m", gt(0.0), false, bw, true, &has_bw);
    std::string name;
    ck.text(m, "name", false, true, "text", name);
    double* r = f.row;
    r[0] = kind;
    double p[8] = {0, 0, 0, 0, 0, 0, 0, 0};
    switch (kind) {
        case 0:  // hill
        case 1:  // mesa
        case 2:  // block
        case 3:  // crater
            ck.number(m, "lat_deg", range(-90.0, 90.0), true, p[0]);
            ck.number(m, "lon_deg", range(-180.0, 180.0), true, p[1]);
            break;
        default:
            break;
    }
    double noise_oct = 4, noise_gain = 0.5, noise_seed = 0;
    int profile = 0;
    switch (kind) {
        case 0: {
            Num amp = any_num();
            amp.nonzero = true;
            ck.number(m, "amplitude_m", amp, true, p[2]);
            ck.number(m, "sigma_m", gt(0.0), true, p[3]);
            break;
        }
        case 1:
            ck.number(m, "height_m", any_num(), true, p[2]);
            ck.number(m, "radius_m", gt(0.0), true, p[3]);
            ck.number(m, "wall_m", ge(0.0), true, p[4]);
            break;
        case 2:
            ck.number(m, "height_m", any_num(), true, p[2]);
            ck.number(m, "half_x_m", gt(0.0), true, p[3]);
            ck.number(m, "half_y_m", gt(0.0), true, p[4]);
            ck.number(m, "heading_deg", range(-360.0, 360.0), true, p[5]);
            ck.number(m, "corner_m", ge(0.0), true, p[6]);
            ck.number(m, "wall_m", ge(0.0), true, p[7]);
            break;
        case 3:
            ck.number(m, "radius_m", gt(0.0), true, p[2]);
            ck.number(m, "depth_m", ge(0.0), true, p[3]);
            ck.number(m, "rim_height_m", ge(0.0), true, p[4]);
            ck.number(m, "rim_width_m", gt(0.0), true, p[5]);
            break;
        case 4: {
            static const char* const profiles[] = {"round", "sharp"};
            ck.number(m, "lat0_deg", range(-90.0, 90.0), true, p[0]);
            ck.number(m, "lon0_deg", range(-180.0, 180.0), true, p[1]);
            ck.number(m, "lat1_deg", range(-90.0, 90.0), true, p[2]);
            ck.number(m, "lon1_deg", range(-180.0, 180.0), true, p[3]);
            ck.number(m, "height_m", any_num(), true, p[4]);
            ck.number(m, "half_width_m", gt(0.0), true, p[5]);
            ck.choice(m, "profile", profiles, 2, profile);
            break;
        }
        case 5:
            ck.number(m, "amplitude_m", any_num(), true, p[0]);
            ck.number(m, "frequency_per_m", gt(0.0), true, p[1]);
            ck.number(m, "octaves", int_range(1, 12), false, noise_oct);
            ck.number(m, "gain", gt_le(0.0, 1.0), false, noise_gain);
            ck.number(m, "seed", int_range(0, 4294967295.0), false, noise_seed);
            break;
        default:
            break;
    }
    ck.extras(m);
    if (!m.ok) return false;

    // the model validator: a smooth blend needs its width, then the kind's own checks
    const bool smooth = blend == 4 || blend == 5;
    if (smooth && !has_bw) {
        ck.problem(m, "blend_width_m",
                   std::string("is required when blend is '") + kBlends[blend] + "' (allowed: > 0)");
    }
    double c0[3], c1[3];
    if (kind <= 3) unit_vector(p[0], p[1], c0);
    if (kind == 2) {
        const double limit = std::min(p[3], p[4]);
        if (p[6] > limit)
            ck.problem(m, "corner_m", "must be <= min(half_x_m, half_y_m) = " + num(limit) +
                                          " (allowed: 0 to " + num(limit) + "), got " + got_float(p[6]));
    }
    if (kind == 4) {
        unit_vector(p[0], p[1], c0);
        unit_vector(p[2], p[3], c1);
        const double cx = c0[1] * c1[2] - c0[2] * c1[1], cy = c0[2] * c1[0] - c0[0] * c1[2],
                     cz = c0[0] * c1[1] - c0[1] * c1[0];
        const double arc = degrees(std::atan2(std::sqrt(cx * cx + cy * cy + cz * cz),
                                              c0[0] * c1[0] + c0[1] * c1[1] + c0[2] * c1[2]));
        const std::string allowed = "arc angle in (0°, 179°]";
        if (arc < 1e-6) {
            ck.add(path + ": end points must be distinct (allowed: " + allowed + "), got " + py_g(arc, 6) + "°");
            m.ok = false;
        } else if (arc > 179.0 + 1e-9) {
            ck.add(path + ": end points must be at most 179° apart (allowed: " + allowed + "), got " +
                   py_g(arc, 6) + "°");
            m.ok = false;
        }
    }
    if (!m.ok) return false;

    // the core row (WorldSpec.core_features)
    r[1] = blend;
    if (smooth) r[2] = bw;
    switch (kind) {
        case 0:
            r[3] = c0[0], r[4] = c0[1], r[5] = c0[2];
            r[9] = p[2], r[10] = p[3];
            f.amplitude = std::fabs(p[2]);
            break;
        case 1:
            r[3] = c0[0], r[4] = c0[1], r[5] = c0[2];
            r[9] = p[2], r[10] = p[3], r[11] = p[4];
            f.amplitude = std::fabs(p[2]);
            break;
        case 2:
            r[3] = c0[0], r[4] = c0[1], r[5] = c0[2];
            r[9] = p[2], r[10] = p[3], r[11] = p[4], r[12] = p[6], r[13] = p[7];
            r[14] = p[5] * (kPi / 180.0);  // math.radians
            f.amplitude = std::fabs(p[2]);
            f.block = true;
            f.hx = p[3], f.hy = p[4], f.corner = p[6], f.wall = p[7];
            break;
        case 3:
            r[3] = c0[0], r[4] = c0[1], r[5] = c0[2];
            r[9] = p[3], r[10] = p[2], r[11] = p[4], r[12] = p[5];
            f.amplitude = p[3] + p[4];
            break;
        case 4:
            r[3] = c0[0], r[4] = c0[1], r[5] = c0[2];
            r[6] = c1[0], r[7] = c1[1], r[8] = c1[2];
            r[9] = p[4], r[10] = p[5], r[11] = profile;
            f.amplitude = std::fabs(p[4]);
            break;
        case 5: {
            r[9] = p[0], r[10] = p[1], r[11] = noise_oct, r[12] = noise_gain, r[13] = noise_seed;
            double sum = 0;  // sum(gain**k for k in range(octaves))
            for (int k = 0; k < static_cast<int>(noise_oct); ++k) sum += std::pow(noise_gain, static_cast<double>(k));
            f.amplitude = std::fabs(p[0]) * sum;
            break;
        }
        default:
            break;
    }
    return true;
}

bool check_layer(Checker& ck, const JValue& v, std::size_t index, SpecLayer& out) {
    const std::string path = "layers[" + std::to_string(index) + "]";
    if (v.type != JT::Object) {
        ck.add(path + ": must be a table (allowed: a table), got " + got(v));
        return false;
    }
    Checker::Model m{v, path, {}, true};
    ck.text(m, "name", true, false, "non-empty text", out.name, false, true);
    ck.tuple(m, "color", 3, range(0.0, 1.0), true, out.color);
    ck.tuple(m, "slope_deg", 2, range(0.0, 90.0), false, out.slope_deg);
    ck.tuple(m, "altitude_m", 2, any_num(), false, out.altitude_m);
    ck.extras(m);
    if (!m.ok) return false;
    for (const char* key : {"slope_deg", "altitude_m"}) {
        const double* band = std::strcmp(key, "slope_deg") == 0 ? out.slope_deg : out.altitude_m;
        if (band[0] > band[1])
            ck.problem(m, key, "lo must be <= hi (allowed: [lo, hi] with lo <= hi), got [" +
                                   py_repr(band[0]) + ", " + py_repr(band[1]) + "]");
    }
    return m.ok;
}

void validate(Checker& ck, const JValue& root, SpecData& out) {
    if (root.type != JT::Object) {
        ck.add("(top level): must be a table (allowed: a table), got " + got(root));
        return;
    }
    Checker::Model w{root, "", {}, true};
    const std::string pattern = "text matching ^[A-Za-z0-9_-]{1,64}$";
    ck.text(w, "name", true, false, pattern, out.name, true);
    ck.number(w, "radius_m", range(1.0, 1e6), true, out.radius_m);
    ck.number(w, "tolerance_m", gt(0.0), true, out.tolerance_m);
    static const char* const offsets[] = {"radial", "normal", "exact"};
    ck.choice(w, "offset", offsets, 3, out.offset);
    double max_tri = 8000000;
    ck.number(w, "max_triangles", int_range(20, 200000000), false, max_tri);
    if (const JValue* lod = ck.table(w, "lod")) {
        Checker::Model m{*lod, "lod", {}, true};
        double levels = 4, chunk_level = 1;
        ck.number(m, "levels", int_range(1, 12), false, levels);
        ck.number(m, "ratio", gt_le(1.0, 16.0), false, out.ratio);
        ck.number(m, "chunk_level", int_range(0, 5), false, chunk_level);
        static const char* const seams[] = {"stitch", "skirt"};
        int seam = 0;
        ck.choice(m, "seams", seams, 2, seam);
        ck.number(m, "skirt_depth_m", range(0.0, 1e5), false, out.skirt_depth_m);
        ck.extras(m);
        if (!m.ok) w.ok = false;
        out.levels = static_cast<int>(levels);
        out.chunk_level = static_cast<int>(chunk_level);
        out.skirt = seam == 1;
    }
    if (const JValue* col = ck.table(w, "collision")) {
        Checker::Model m{*col, "collision", {}, true};
        ck.number(m, "tolerance_m", gt(0.0), false, out.collision_tolerance_m, true,
                  &out.has_collision_tolerance);
        static const char* const biases[] = {"none", "centered"};
        int bias = 1;
        ck.choice(m, "bias", biases, 2, bias);
        double cap = 65535;
        ck.number(m, "max_triangles_per_chunk", int_range(16, 10000000), false, cap);
        ck.extras(m);
        if (!m.ok) w.ok = false;
        out.collision_centered = bias == 1;
        out.max_triangles_per_chunk = static_cast<std::uint64_t>(cap);
    }
    std::vector<FeatureOut> feats;
    if (const JValue* fl = ck.list(w, "features")) {
        feats.resize(fl->items.size());
        for (std::size_t i = 0; i < fl->items.size(); ++i)
            if (!check_feature(ck, fl->items[i], i, feats[i])) w.ok = false;
    }
    const JValue* ll = ck.list(w, "layers");
    if (ll && ll->items.size() > kMaxLayers) {
        // spec.py's max_length on layers: pydantic reports the length alone
        ck.problem(w, "layers", "must have ? items (allowed: a list), got " + got(*ll));
    } else if (ll) {
        out.layers.resize(ll->items.size());
        for (std::size_t i = 0; i < ll->items.size(); ++i)
            if (!check_layer(ck, ll->items[i], i, out.layers[i])) w.ok = false;
    }
    ck.extras(w);
    if (!w.ok) return;
    out.max_triangles = static_cast<std::uint64_t>(max_tri);

    // the world's model validator
    const double R = out.radius_m;
    const double limit = R / 10.0;
    if (out.tolerance_m > limit)
        ck.add("tolerance_m: must be <= radius_m / 10 = " + num(limit) + " (allowed: > 0 and <= " +
               num(limit) + "), got " + got_float(out.tolerance_m));
    for (std::size_t i = 0; i < feats.size(); ++i) {
        const FeatureOut& f = feats[i];
        if (!f.block) continue;
        const double reach = block_reach_deg(R, f.hx, f.hy, f.corner, f.wall);
        if (reach > 60.0 + 1e-9)
            ck.add("features[" + std::to_string(i) +
                   "]: block footprint (half sizes grown by wall_m) must stay within 60° of its "
                   "centre (allowed: <= 60° at radius_m = " + num(R) + "), got " + py_g(reach, 4) + "°");
    }
    double total = 0;
    for (const FeatureOut& f : feats) total += f.amplitude;
    const double cap = 0.9 * R;
    if (total >= cap)
        ck.add("features: sum of |amplitudes| (heights, depths, rim heights, noise amplitude · Σ "
               "gain^k) must be < 0.9 · radius_m = " + num(cap) + " (allowed: < " + num(cap) +
               " m), got " + num(total) + " m");
    out.features.resize(feats.size() * 16);
    for (std::size_t i = 0; i < feats.size(); ++i)
        std::copy(feats[i].row, feats[i].row + 16, out.features.begin() + static_cast<std::ptrdiff_t>(16 * i));
}

}  // namespace

std::string format_repr(double x) { return py_repr(x); }
std::string format_g(double x, int precision) { return py_g(x, precision); }

void unit_vector(double lat_deg, double lon_deg, double out[3]) {
    double sl, cl, sn, cn;
    sin_cos_deg(lat_deg, sl, cl);
    sin_cos_deg(lon_deg, sn, cn);
    out[0] = cl * sn;
    out[1] = sl;
    out[2] = cl * cn;
}

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
        Reader reader(text, length, limits);
        std::string err;
        if (!reader.parse(root, err)) {
            message = "cannot read world spec: " + err;
            return SpecStatus::Malformed;
        }
    }
    Checker ck(limits.max_problems);
    validate(ck, root, out);
    const std::size_t n = ck.count();
    if (n == 0) return SpecStatus::Ok;
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
