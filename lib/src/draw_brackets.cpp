// The draw-side brackets of the acceptance tests; see draw_brackets.hpp.
#include "draw_brackets.hpp"

#include <cmath>
#include <cstring>
#include <limits>

namespace spinfer::detail {
namespace {

double margin(double bound) { return 0x1.0p-30 * (1.0 + std::abs(bound)); }

// Rounded to float towards -inf or +inf, so the bracket only widens.
float down(double v) {
  float f = float(v);
  if (double(f) > v) f = std::nextafter(f, -std::numeric_limits<float>::infinity());
  return f;
}
float up(double v) {
  float f = float(v);
  if (double(f) < v) f = std::nextafter(f, std::numeric_limits<float>::infinity());
  return f;
}

std::uint64_t pack(float first, float second) {
  std::uint32_t a, b;
  std::memcpy(&a, &first, 4);
  std::memcpy(&b, &second, 4);
  return std::uint64_t(a) | std::uint64_t(b) << 32;
}

DrawBrackets build() {
  constexpr double inf = std::numeric_limits<double>::infinity();
  DrawBrackets t;
  const std::int64_t n = DrawBrackets::kCells;
  for (std::int64_t c = 0; c < n; ++c) {
    const double u0 = double(c) / double(n), u1 = double(c + 1) / double(n);  // exact
    // logit(u) = ln u - ln(1 - u); 1 - u is exact here.
    const double logit0 = c == 0 ? -inf : std::log(u0) - std::log(1.0 - u0);
    const double logit1 = c + 1 == n ? inf : std::log(u1) - std::log(1.0 - u1);
    const double active = c + 1 == n ? inf : logit1 + margin(logit1);
    const double inactive = c == 0 ? -inf : logit0 - margin(logit0);
    t.heat_bath.push_back(pack(up(active), down(inactive)));
    // -ln u over the cell: (-ln u1, -ln u0]; u1 = 1 for the last cell (bound 0 - margin).
    const double accept = -std::log(u1) - margin(std::log(u1));
    const double reject = c == 0 ? inf : -std::log(u0) + margin(std::log(u0));
    t.metropolis.push_back(pack(down(accept), up(reject)));
  }
  return t;
}

}  // namespace

const DrawBrackets& draw_brackets() {
  static const DrawBrackets t = build();
  return t;
}

void unpack_bracket(std::uint64_t word, double* first, double* second) {
  float a, b;
  const std::uint32_t lo = std::uint32_t(word), hi = std::uint32_t(word >> 32);
  std::memcpy(&a, &lo, 4);
  std::memcpy(&b, &hi, 4);
  *first = a;
  *second = b;
}

}  // namespace spinfer::detail
