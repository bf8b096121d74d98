// The sampler's inner-loop kernels; see sampler_kernels.hpp.
#include "sampler_kernels.hpp"

#include <algorithm>
#include <atomic>
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
void add_column(std::int32_t* __restrict y, const std::int32_t* __restrict x, std::int64_t n) {
  for (std::int64_t j = 0; j < n; ++j) y[j] += x[j];
}

SPINFER_WIDE_CLONES
std::int64_t count_equal(const double* x, double value, std::int64_t n) {
  std::int64_t count = 0;
  for (std::int64_t j = 0; j < n; ++j) count += x[j] == value;
  return count;
}

SPINFER_WIDE_CLONES
void mark_unequal(const double* __restrict x, double value, std::uint8_t* __restrict out, std::int64_t n) {
  for (std::int64_t j = 0; j < n; ++j) out[j] = x[j] != value;
}

SPINFER_WIDE_CLONES
std::int64_t count_equal(const std::int8_t* x, std::int8_t value, std::int64_t n) {
  // 16-bit partial counts (one widening of the byte compares instead of three).
  std::int64_t count = 0;
  for (std::int64_t begin = 0; begin < n; begin += 32768) {
    const std::int64_t end = std::min(n, begin + 32768);
    std::uint16_t part = 0;
    for (std::int64_t j = begin; j < end; ++j) part = std::uint16_t(part + (x[j] == value));
    count += part;
  }
  return count;
}

SPINFER_WIDE_CLONES
void mark_unequal(const std::int8_t* __restrict x, std::int8_t value, const std::int32_t* order,
                  std::uint8_t* __restrict out, std::int64_t n) {
  if (order) {
    for (std::int64_t j = 0; j < n; ++j) out[order[j]] = x[j] != value;
  } else {
    for (std::int64_t j = 0; j < n; ++j) out[j] = x[j] != value;
  }
}

namespace {

[[gnu::always_inline]] inline void step_lanes(Lanes& g, std::uint64_t* out, std::int64_t n) {
  typedef std::uint64_t v8 __attribute__((vector_size(64)));
  v8 s0, s1, s2, s3;
  std::memcpy(&s0, g.s[0], 64);
  std::memcpy(&s1, g.s[1], 64);
  std::memcpy(&s2, g.s[2], 64);
  std::memcpy(&s3, g.s[3], 64);
  for (std::int64_t i = 0; i < n; i += 8) {
    v8 result;
    xoshiro256ss_step(s0, s1, s2, s3, result);
    std::memcpy(out + i, &result, 64);
  }
  std::memcpy(g.s[0], &s0, 64);
  std::memcpy(g.s[1], &s1, 64);
  std::memcpy(g.s[2], &s2, 64);
  std::memcpy(g.s[3], &s3, 64);
}

// The update of scan position i of a colour with the tie settled: the scalar path of the kernels
// below (other degrees, and ties after a block's vector pass left them unchanged).
[[gnu::always_inline]] inline void uniform_update(const UniformColour& a, std::int64_t i, UniformSums& sums) {
  std::int64_t S = 0;
  for (std::int64_t j = 0; j < a.degree; ++j) S += a.x[a.nb[j * a.stride + i]];
  const std::int32_t old = a.x[i];
  const std::int64_t levels = 2 * a.degree + 1;
  const std::int64_t level = (a.gibbs ? 0 : levels * std::int64_t(old == a.hi)) + S + a.degree;
  const bool pass = uniform_pass(a.pieces[i - a.begin], a.th[level], a.tl[level], a.tie);
  const std::int32_t next = a.gibbs ? (pass ? a.hi : a.lo) : (pass ? a.lo + a.hi - old : old);
  a.x[i] = next;
  sums.dv += next - old;
  sums.dv_S += (next - old) * S;
  sums.flips += next != old;
}

// One colour of the uniform kernel. The positions of a colour are not coupled, so the iterations
// are independent (ivdep): gathers of the neighbours' values, a branch-free 32-bit test, and
// 32-bit sums over blocks short enough not to overflow (|dv S| <= 2 x 8 per update here). A
// position whose 16 bits tie with its threshold keeps its value in the vector pass; the block's
// ties are then settled in position order (their tie-stream draws come in update order).
template <bool kGibbs, int D>
[[gnu::always_inline]] inline void colour_loop(const UniformColour& a, UniformSums& sums) {
  std::int32_t* __restrict x = a.x;
  const std::int32_t* __restrict nb = a.nb;
  const std::uint16_t* __restrict p = a.pieces;
  const std::uint32_t* __restrict th = a.th;
  const std::int64_t stride = a.stride;
  const std::int32_t lo = a.lo, hi = a.hi, both = lo + hi, levels = 2 * D + 1;
  constexpr std::int64_t kBlock = 1024;
  for (std::int64_t begin = a.begin; begin < a.end; begin += kBlock) {
    const std::int64_t end = std::min(a.end, begin + kBlock);
    std::int32_t dv_sum = 0, dvS_sum = 0, flip_sum = 0, ties = 0;
#pragma GCC ivdep
    for (std::int64_t i = begin; i < end; ++i) {
      std::int32_t S = 0;
      for (int j = 0; j < D; ++j) S += x[nb[j * stride + i]];
      const std::int32_t old = x[i];
      const std::uint32_t d = p[i - a.begin];
      const std::int32_t level = (kGibbs ? 0 : levels * std::int32_t(old == hi)) + S + D;
      const std::int32_t pass = std::int32_t(d < th[level]), tie = std::int32_t(d == th[level]);
      const std::int32_t next = tie ? old : kGibbs ? lo + pass * (hi - lo) : old + pass * (both - 2 * old);
      const std::int32_t dv = next - old;
      x[i] = next;
      dv_sum += dv;
      dvS_sum += dv * S;
      flip_sum += std::int32_t(dv != 0);
      ties |= tie;
    }
    sums.dv += dv_sum;
    sums.dv_S += dvS_sum;
    sums.flips += flip_sum;
    if (ties) {
      for (std::int64_t i = begin; i < end; ++i) {
        std::int32_t S = 0;
        for (int j = 0; j < D; ++j) S += x[nb[j * stride + i]];
        const std::int32_t level = (kGibbs ? 0 : levels * std::int32_t(x[i] == hi)) + S + D;
        if (p[i - a.begin] == th[level]) uniform_update(a, i, sums);
      }
    }
  }
}

template <bool kGibbs>
[[gnu::always_inline]] inline bool colour_by_degree(const UniformColour& a, UniformSums& sums) {
  switch (a.degree) {
    case 2: colour_loop<kGibbs, 2>(a, sums); return true;
    case 3: colour_loop<kGibbs, 3>(a, sums); return true;
    case 4: colour_loop<kGibbs, 4>(a, sums); return true;
    case 6: colour_loop<kGibbs, 6>(a, sums); return true;
    case 8: colour_loop<kGibbs, 8>(a, sums); return true;
    default: return false;
  }
}

}  // namespace

SPINFER_WIDE_CLONES
void draw_lanes(Lanes& g, std::uint64_t* out, std::int64_t n) { step_lanes(g, out, n); }

SPINFER_WIDE_CLONES
void update_uniform_colour(const UniformColour& a, UniformSums& sums) {
  if (a.gibbs ? colour_by_degree<true>(a, sums) : colour_by_degree<false>(a, sums)) return;
  // Other degrees: the same decisions, one position at a time.
  for (std::int64_t i = a.begin; i < a.end; ++i) uniform_update(a, i, sums);
}

void split_thresholds(const std::vector<std::uint64_t>& t, std::vector<std::uint32_t>* high,
                      std::vector<std::uint64_t>* low) {
  high->clear();
  low->clear();
  for (std::uint64_t T : t) {
    const std::uint64_t h = std::min<std::uint64_t>(T >> 37, 0xffff);
    high->push_back(std::uint32_t(h));
    low->push_back(T - (h << 37));  // <= 2^37
  }
}

namespace {
std::atomic<std::int64_t> ties_settled{0};
}  // namespace

std::int64_t uniform_ties() { return ties_settled.load(std::memory_order_relaxed); }
void count_uniform_tie() { ties_settled.fetch_add(1, std::memory_order_relaxed); }

void split_pieces(const std::uint64_t* words, std::uint16_t* pieces, std::int64_t n) {
  for (std::int64_t j = 0; j < n; ++j) pieces[j] = draw_piece(words[j >> 2], j);
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
