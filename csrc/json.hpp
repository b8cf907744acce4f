// a small strict JSON reader (RFC 8259): no comments, trailing commas, NaN or Infinity literals,
// duplicate keys, byte order mark or lone surrogates; limits on nesting depth and value count.
// Used for world specs (spec_json.cpp) and for the embedded rule table (spec_rules.cpp).
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace gm {

enum class JT : std::uint8_t { Null, Bool, Number, String, Array, Object };

struct JMember;

struct JValue {
    JT type = JT::Null;
    bool boolean = false;
    bool is_int = false;  // a number literal without fraction or exponent
    double number = 0;
    std::string text;  // a string's value (UTF-8), or a number's literal
    std::vector<JValue> items;
    std::vector<JMember> members;
    const JValue* find(const char* key) const;  // an object's member, or nullptr
};

struct JMember {
    std::string key;
    JValue value;
};

struct JsonLimits {
    int max_depth = 64;
    std::size_t max_values = 1000000;
};

// parse `length` bytes of `text`. On failure `message` is
// "malformed JSON at line L, column C: what" (line and column counted in characters from 1).
// Throws only std::bad_alloc.
bool parse_json(const char* text, std::size_t length, const JsonLimits& limits, JValue& out,
                std::string& message);

// a number in messages: integral values below 1e16 without a fraction, others in the shortest
// digits that read back as the same double, laid out as Python's repr (positional for decimal
// exponents -4 .. 15, else 1.5e-05 / 1e+16), so messages write numbers as spec.py's _num does;
// "nan", "inf", "-inf"
std::string format_number(double x);

// text in messages: double-quoted, with \", \\ and \uXXXX for control characters; cut to at
// most `max_chars` characters (ending in "...") without splitting a UTF-8 sequence
std::string quote_text(const std::string& s, std::size_t max_chars);

// decode the UTF-8 sequence at s[i] (valid UTF-8, as the reader stores it) and advance i
unsigned utf8_next(const std::string& s, std::size_t& i);

}  // namespace gm
