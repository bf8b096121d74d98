#include "npy_header.hpp"

#include <cctype>
#include <limits>

#include "spinfer/errors.hpp"

namespace spinfer::detail {
namespace {

static_assert(__BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__,
              "the .npy reader assumes a little-endian host");

// Recursive-descent reader of the tiny subset of Python literals a .npy header uses.
class HeaderParser {
 public:
  HeaderParser(std::string_view text, const std::string& source) : s_(text), source_(source) {}

  NpyHeader parse() {
    NpyHeader h;
    bool have_descr = false, have_order = false, have_shape = false;
    expect('{');
    while (true) {
      skip_space();
      if (peek() == '}') break;
      const std::string key = string_literal();
      expect(':');
      if (key == "descr") {
        h.descr = descr_value();
        have_descr = true;
      } else if (key == "fortran_order") {
        h.fortran = bool_literal();
        have_order = true;
      } else if (key == "shape") {
        h.shape = int_tuple();
        have_shape = true;
      } else {
        fail("unexpected key '" + key + "'");
      }
      skip_space();
      if (peek() == ',') {
        ++pos_;
        continue;
      }
      if (peek() != '}') fail("expected ',' or '}'");
    }
    ++pos_;
    skip_space();
    if (pos_ != s_.size()) fail("unexpected text after the header dictionary");
    if (!have_descr || !have_order || !have_shape)
      fail("the header must have the keys 'descr', 'fortran_order' and 'shape'");
    return h;
  }

 private:
  [[noreturn]] void fail(const std::string& what) const {
    throw InputError(source_ + ": corrupt .npy header (" + what + " at header byte " +
                     std::to_string(pos_ + 1) + ")");
  }
  char peek() const { return pos_ < s_.size() ? s_[pos_] : '\0'; }
  void skip_space() {
    while (pos_ < s_.size() && std::isspace(static_cast<unsigned char>(s_[pos_]))) ++pos_;
  }
  void expect(char c) {
    skip_space();
    if (peek() != c) fail(std::string("expected '") + c + "'");
    ++pos_;
  }
  std::string string_literal() {
    skip_space();
    const char quote = peek();
    if (quote != '\'' && quote != '"') fail("expected a quoted string");
    const std::size_t end = s_.find(quote, pos_ + 1);
    if (end == std::string_view::npos) fail("unterminated string");
    std::string out(s_.substr(pos_ + 1, end - pos_ - 1));
    pos_ = end + 1;
    return out;
  }
  std::string descr_value() {
    skip_space();
    if (peek() == '[' || peek() == '{' || peek() == '(')
      throw InputError(source_ + ": structured (record) dtypes are not supported; save a plain "
                                 "numeric 2-D array");
    return string_literal();
  }
  bool bool_literal() {
    skip_space();
    if (s_.substr(pos_, 4) == "True") {
      pos_ += 4;
      return true;
    }
    if (s_.substr(pos_, 5) == "False") {
      pos_ += 5;
      return false;
    }
    fail("expected True or False");
  }
  std::int64_t int_literal() {
    skip_space();
    if (!std::isdigit(static_cast<unsigned char>(peek()))) fail("expected a non-negative integer");
    std::int64_t v = 0;
    while (std::isdigit(static_cast<unsigned char>(peek()))) {
      const int d = s_[pos_++] - '0';
      if (v > (std::numeric_limits<std::int64_t>::max() - d) / 10) fail("dimension too large");
      v = v * 10 + d;
    }
    if (peek() == 'L') ++pos_;  // Python 2 long suffix in old files
    return v;
  }
  std::vector<std::int64_t> int_tuple() {
    expect('(');
    std::vector<std::int64_t> out;
    while (true) {
      skip_space();
      if (peek() == ')') break;
      out.push_back(int_literal());
      skip_space();
      if (peek() == ',') {
        ++pos_;
        continue;
      }
      if (peek() != ')') fail("expected ',' or ')' in the shape");
    }
    ++pos_;
    return out;
  }

  std::string_view s_;
  const std::string& source_;
  std::size_t pos_ = 0;
};

std::int64_t parse_count(const std::string& digits, const std::string& descr,
                         const std::string& source) {
  if (digits.empty() || digits.size() > 9 ||
      digits.find_first_not_of("0123456789") != std::string::npos)
    throw InputError(source + ": unsupported dtype '" + descr + "'");
  return std::stoll(digits);
}

}  // namespace

NpyHeader parse_npy_header(std::string_view text, const std::string& source) {
  return HeaderParser(text, source).parse();
}

std::string format_npy_header(const std::string& descr, bool fortran,
                              const std::vector<std::int64_t>& shape) {
  std::string s = "{'descr': '" + descr + "', 'fortran_order': " + (fortran ? "True" : "False") +
                  ", 'shape': (";
  for (std::size_t k = 0; k < shape.size(); ++k) {
    if (k) s += ", ";
    s += std::to_string(shape[k]);
  }
  if (shape.size() == 1) s += ",";
  return s + "), }";
}

Dtype parse_descr(const std::string& descr, const std::string& source) {
  const auto unsupported = [&](const std::string& why) {
    return InputError(source + ": unsupported dtype '" + descr + "' (" + why +
                      "); expected bool, integers, float32 or float64");
  };
  if (descr.size() < 2) throw unsupported("too short");
  Dtype d;
  d.order = descr[0] == '=' ? '<' : descr[0];
  if (d.order != '<' && d.order != '>' && d.order != '|') {
    // numpy always writes a byte-order character; a bare code is not a dtype it produces.
    throw unsupported("missing byte-order character");
  }
  d.kind = descr[1];
  const std::string rest = descr.substr(2);
  switch (d.kind) {
    case 'O': throw unsupported("object arrays hold pickled Python objects");
    case 'V': throw unsupported("structured or void data");
    case 'M':
    case 'm': throw unsupported("dates and times");
    case 'c': throw unsupported("complex numbers");
    case 'U':
      d.item_size = 4 * parse_count(rest, descr, source);
      d.swap_unit = 4;
      return d;
    case 'S':
    case 'a':
      d.kind = 'S';
      d.item_size = parse_count(rest, descr, source);
      return d;
    case 'b':
      if (rest != "1") throw unsupported("bool must be 1 byte");
      return d;
    case 'u':
    case 'i':
      if (rest != "1" && rest != "2" && rest != "4" && rest != "8") throw unsupported("integer size");
      break;
    case 'f':
      if (rest != "4" && rest != "8") throw unsupported("only float32 and float64 are read");
      break;
    default: throw unsupported("unknown type code");
  }
  d.item_size = rest[0] - '0';
  d.swap_unit = d.item_size;
  if (d.item_size == 1) d.order = '|';
  return d;
}

}  // namespace spinfer::detail
