// The sampler's inner-loop kernels; see sampler_kernels.hpp.
#include "sampler_kernels.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>

namespace spinfer::detail {

#if defined(__x86_64__) && defined(__GNUC__)
#define SPINFER_WIDE_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define SPINFER_WIDE_CLONES
#endif

SPINFER_WIDE_CLONES
void add_scaled(double* __restrict y, const double* __restrict x, double a, std::int64_t n) {
  for (std::int64_t j = 0; j < n; ++j) y[j] += a * x[j];
}

SPINFER_WIDE_CLONES
void draw_four_lanes(FourLanes& g, std::uint64_t* out, std::int64_t n) {
  typedef std::uint64_t v4 __attribute__((vector_size(32)));
  v4 s0, s1, s2, s3;
  std::memcpy(&s0, g.s[0], 32);
  std::memcpy(&s1, g.s[1], 32);
  std::memcpy(&s2, g.s[2], 32);
  std::memcpy(&s3, g.s[3], 32);
  for (std::int64_t i = 0; i < n; i += 4) {
    const v4 x = s1 * 5;
    const v4 result = ((x << 7) | (x >> 57)) * 9;
    const v4 t = s1 << 17;
    s2 ^= s0;
    s3 ^= s1;
    s1 ^= s2;
    s0 ^= s3;
    s2 ^= t;
    s3 = (s3 << 45) | (s3 >> 19);
    std::memcpy(out + i, &result, 32);
  }
  std::memcpy(g.s[0], &s0, 32);
  std::memcpy(g.s[1], &s1, 32);
  std::memcpy(g.s[2], &s2, 32);
  std::memcpy(g.s[3], &s3, 32);
}

bool AcceptanceTable::exact_heat_bath(double x, std::uint64_t m) {
  return double(m) * 0x1.0p-53 * (1.0 + std::exp(-x)) < 1.0;
}

bool AcceptanceTable::exact_metropolis(double y, std::uint64_t m) {
  return y <= 0.0 || double(m) * 0x1.0p-53 < std::exp(-y);
}

AcceptanceTable::AcceptanceTable() {
  // Relative widening of every bound: far beyond the exact tests' rounding (a few 2^-53) and the
  // rounding of the cell index, far below anything a draw resolves in practice.
  constexpr double widen = 0x1.0p-40;
  auto logistic = [](std::int64_t i) { return 1.0 / (1.0 + std::exp(-(-kRange + double(i) / kPerUnit))); };
  auto decay = [](std::int64_t i) { return std::exp(-double(i) / kPerUnit); };
  // Heat bath: cell 0 is x < -kRange, cell c in [1, kCells] is [x_(c-1), x_c), cell kCells + 1
  // is x >= kRange, with x_i = -kRange + i / kPerUnit.
  // A probability bound p as a draw count: u = m 2^-53 < p iff m < ceil(p 2^53).
  auto count = [](double p) { return std::uint64_t(std::ceil(std::min(p, 1.0) * 0x1.0p53)); };
  auto bracket = [&](double lower, double upper) {
    return Bracket{count(lower * (1 - widen)), count(upper * (1 + widen))};
  };
  logistic_.push_back(bracket(0.0, logistic(0)));
  for (std::int64_t c = 1; c <= kCells; ++c) logistic_.push_back(bracket(logistic(c - 1), logistic(c)));
  logistic_.push_back(bracket(logistic(kCells), 1.0));
  // Metropolis: cell c in [0, kCells) is [y_c, y_(c+1)), cell kCells is y >= 2 kRange, with
  // y_i = i / kPerUnit; exp(-y) decreases, so the lower value comes from the cell's right end.
  for (std::int64_t c = 0; c < kCells; ++c) decay_.push_back(bracket(decay(c + 1), decay(c)));
  decay_.push_back(bracket(0.0, decay(kCells)));
}

const AcceptanceTable& acceptance_table() {
  static const AcceptanceTable table;
  return table;
}

// ---- integer thresholds --------------------------------------------------------------------------

namespace {

constexpr std::uint64_t kTwo53 = std::uint64_t(1) << 53;

/// Smallest m in [0, 2^53] at which `pass(m)` stops holding; `pass` is true then false in m.
template <typename Pass>
std::uint64_t boundary(double guess, Pass pass) {
  std::uint64_t m = guess <= 0 ? 0 : guess >= double(kTwo53) ? kTwo53 : std::uint64_t(guess);
  while (m > 0 && !pass(m - 1)) --m;
  while (m < kTwo53 && pass(m)) ++m;
  return m;
}

}  // namespace

std::uint64_t heat_bath_threshold(double x) {
  const double e = std::exp(-x);
  return boundary(0x1.0p53 / (1.0 + e),
                  [&](std::uint64_t m) { return double(m) * 0x1.0p-53 * (1.0 + e) < 1.0; });
}

std::uint64_t metropolis_threshold(double y) {
  if (y <= 0) return kTwo53;
  const double p = std::exp(-y);
  return boundary(p * 0x1.0p53, [&](std::uint64_t m) { return double(m) * 0x1.0p-53 < p; });
}

}  // namespace spinfer::detail
