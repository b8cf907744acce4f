// the strict JSON reader of json.hpp, and the number and text formatting of messages
#include "json.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <locale>
#include <sstream>
#include <unordered_set>
#include <utility>

namespace gm {
namespace {

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

class Reader {
public:
    Reader(const char* s, std::size_t n, const JsonLimits& lim) : s_(s), n_(n), lim_(lim) {}

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
                return fail("duplicate key " + quote_text(m.key, 80), at);
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
    const JsonLimits& lim_;
    int depth_ = 0;
    std::size_t values_ = 0;
    std::string err_;
    std::size_t err_pos_ = 0;
};

}  // namespace

const JValue* JValue::find(const char* key) const {
    for (const JMember& m : members)
        if (m.key == key) return &m.value;
    return nullptr;
}

bool parse_json(const char* text, std::size_t length, const JsonLimits& limits, JValue& out,
                std::string& message) {
    Reader reader(text, length, limits);
    return reader.parse(out, message);
}

std::string format_number(double x) {
    if (std::isnan(x)) return "nan";
    if (std::isinf(x)) return x > 0 ? "inf" : "-inf";
    char buf[64];
    if (x == std::trunc(x) && std::fabs(x) < 1e16) {
        std::snprintf(buf, sizeof buf, "%lld", static_cast<long long>(x));
        return buf;
    }
    // the shortest digits that read back as the same double, in scientific form: [-]d[.ddd]e<exp>
    std::string sci;
#if defined(__cpp_lib_to_chars) && __cpp_lib_to_chars >= 201611L
    auto r = std::to_chars(buf, buf + sizeof buf, x, std::chars_format::scientific);
    sci.assign(buf, r.ptr);
#else
    for (int p = 0; p <= 16; ++p) {
        std::ostringstream o;
        o.imbue(std::locale::classic());
        o << std::scientific;
        o.precision(p);
        o << x;
        sci = o.str();
        std::istringstream in(sci);
        in.imbue(std::locale::classic());
        double back = 0;
        in >> back;
        if (back == x) break;
    }
#endif
    const bool negative = sci[0] == '-';
    const std::size_t e = sci.find_first_of("eE");
    std::string digits;
    for (std::size_t i = negative ? 1 : 0; i < e; ++i)
        if (sci[i] != '.') digits += sci[i];
    while (digits.size() > 1 && digits.back() == '0') digits.pop_back();
    const int exp10 = std::atoi(sci.c_str() + e + 1);
    // laid out as Python's repr: positional for exponents -4 .. 15, else d.ddde+XX
    std::string out = negative ? "-" : "";
    const int n = static_cast<int>(digits.size());
    if (exp10 >= -4 && exp10 < 16) {
        if (exp10 < 0) {
            out += "0." + std::string(static_cast<std::size_t>(-exp10 - 1), '0') + digits;
        } else if (exp10 + 1 >= n) {
            out += digits + std::string(static_cast<std::size_t>(exp10 + 1 - n), '0') + ".0";
        } else {
            out += digits.substr(0, static_cast<std::size_t>(exp10 + 1)) + "." +
                   digits.substr(static_cast<std::size_t>(exp10 + 1));
        }
        return out;
    }
    out += digits.substr(0, 1);
    if (n > 1) out += "." + digits.substr(1);
    std::snprintf(buf, sizeof buf, "e%c%02d", exp10 < 0 ? '-' : '+', exp10 < 0 ? -exp10 : exp10);
    return out + buf;
}

unsigned utf8_next(const std::string& s, std::size_t& i) {
    unsigned char c = static_cast<unsigned char>(s[i++]);
    if (c < 0x80) return c;
    int extra = c >= 0xF0 ? 3 : c >= 0xE0 ? 2 : 1;
    unsigned cp = c & (0x3Fu >> extra);
    for (int k = 0; k < extra && i < s.size(); ++k) cp = (cp << 6) | (static_cast<unsigned char>(s[i++]) & 0x3Fu);
    return cp;
}

std::string quote_text(const std::string& s, std::size_t max_chars) {
    std::string out = "\"";
    std::size_t chars = 1;
    for (std::size_t i = 0; i < s.size();) {
        const std::size_t start = i;
        const unsigned cp = utf8_next(s, i);
        std::string piece;
        std::size_t n = 1;  // characters the piece shows
        if (cp == '"' || cp == '\\') {
            piece = std::string("\\") + static_cast<char>(cp);
            n = 2;
        } else if (cp < 0x20 || (cp >= 0x7F && cp <= 0x9F)) {
            char b[8];
            std::snprintf(b, sizeof b, "\\u%04x", cp);
            piece = b;
            n = 6;
        } else {
            piece = s.substr(start, i - start);
        }
        if (chars + n + 1 > max_chars) return out + "...";
        out += piece;
        chars += n;
    }
    return out + "\"";
}

}  // namespace gm
