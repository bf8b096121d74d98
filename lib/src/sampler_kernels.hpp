// Internal: the sampler's inner-loop kernels (sampler.cpp runs the chains).
//
// * add_scaled: the dense field update y += a x after a flip.
// * Lanes / draw_lanes: eight xoshiro256** generators stepped together, so a sweep's random
//   bits come in one vectorised batch.
// * AcceptanceTable: the heat-bath and Metropolis tests without exp on almost every update.
// * Integer thresholds and the 16-bit draw of the uniform-coupling kernels.
// The wide kernels are built for AVX-512 and AVX2 as well as the baseline and chosen at load time
// (GCC target_clones), so portable binaries still use wide vectors.
#pragma once

#include <algorithm>
#include <cstdint>
#include <vector>

#include "spinfer/rng.hpp"

namespace spinfer::detail {

/// y[j] += a x[j] for j in [0, n).
void add_scaled(double* __restrict y, const double* __restrict x, double a, std::int64_t n);

/// y[j] += x[j] for j in [0, n) (integer fields, integer_fields.hpp).
void add_column(std::int32_t* __restrict y, const std::int32_t* __restrict x, std::int64_t n);

/// The number of j in [0, n) with x[j] == value.
std::int64_t count_equal(const double* x, double value, std::int64_t n);

/// out[j] = (x[j] != value) for j in [0, n) (a kept sample's active bits).
void mark_unequal(const double* __restrict x, double value, std::uint8_t* __restrict out, std::int64_t n);

/// The same for int8 values; out[order[j]] (order null: out[j]) = (x[j] != value).
std::int64_t count_equal(const std::int8_t* x, std::int8_t value, std::int64_t n);
void mark_unequal(const std::int8_t* __restrict x, std::int8_t value, const std::int32_t* order,
                  std::uint8_t* __restrict out, std::int64_t n);

/// Eight xoshiro256** generators (the algorithm of rng.hpp) stepped together (one AVX-512
/// register per state word). Lane l of step t gives out[8t + l]. Seeded from a chain's own
/// stream, so the bits depend only on that chain.
struct Lanes {
  static constexpr std::int64_t kWidth = 8;
  std::uint64_t s[4][kWidth];  // s[word][lane]
};

/// Fills out[0, n) (n rounded up to a multiple of 8: `out` needs room for that) with random bits.
void draw_lanes(Lanes& g, std::uint64_t* out, std::int64_t n);

/// The acceptance tests of the single-unit updates, decided by brackets from a table:
///   heat bath   active iff u (1 + exp(-x)) < 1        (x = beta (hi - lo) H_k)
///   Metropolis  accept iff y <= 0 or u < exp(-y)      (y = beta dE)
/// The argument's table cell [t_c, t_c+1) gives p(t_c) and p(t_c+1), between which p(x) lies as
/// p is monotone (held as draw counts: u = m 2^-53 < p iff m < ceil(p 2^53)); a draw below the
/// lower value passes, one at or above the upper value fails, and
/// only a draw between them (probability <= cell width x max |p'|, under 1/64 here) evaluates the
/// exact test. The bounds are widened by 2^-40 relative, far beyond the rounding of the exact
/// test, so every decision is the exact test's decision: the chain is the same as with exp.
class AcceptanceTable {
 public:
  AcceptanceTable();

  // The draw is given as its top 53 bits m (u = m 2^-53) and the bracket ends as integers in
  // the same units, so both comparisons are integer sign bits combined without branches (their
  // outcome is as unpredictable as the update itself); only the rare draw inside the bracket
  // branches off to the exact test.
  bool heat_bath(double x, std::uint64_t m) const {
    const double t = std::min(std::max((x + kRange) * kPerUnit, -1.0), kCells + 0.5);
    const int r = decide(logistic_[std::size_t(std::int64_t(t + 1.0))], m);
    return r == 0 ? exact_heat_bath(x, m) : r == 1;
  }

  /// Metropolis for any y: y <= 0 accepts.
  bool metropolis(double y, std::uint64_t m) const {
    const double t = std::min(std::max(y * kPerUnit, 0.0), kCells + 0.5);
    const Bracket& b = decay_[std::size_t(std::int64_t(t))];
    const int r = decide(b, m) | int(y <= 0.0);  // 1 or 3 (y <= 0 with m >= upper) pass
    return r == 0 ? exact_metropolis(y, m) : (r & 1) != 0;
  }

  /// The tests with exp, for a draw m (53 bits): u = m 2^-53.
  static bool exact_heat_bath(double x, std::uint64_t m);
  static bool exact_metropolis(double y, std::uint64_t m);

  static constexpr double kRange = 20.0;   // logistic table over x in [-20, 20]; decay over [0, 40]
  static constexpr double kPerUnit = 16.0; // cells per unit of the argument
  static constexpr std::int64_t kCells = 640;
  /// Draws m < lower pass for every argument in the cell, draws m >= upper fail (both <= 2^53).
  struct Bracket {
    std::uint64_t lower, upper;
  };
  /// The tables the lock-step kernels (sampler_groups.inc) index the same way as above.
  const Bracket* logistic_cells() const { return logistic_.data(); }
  const Bracket* decay_cells() const { return decay_.data(); }

 private:
  /// 1: m < lower (pass), 2: m >= upper (fail), 0: in between. Sign bits of differences of
  /// numbers below 2^54, so no comparison becomes a branch.
  static int decide(const Bracket& b, std::uint64_t m) {
    return int((m - b.lower) >> 63) | int(((b.upper - 1) - m) >> 63) << 1;
  }
  std::vector<Bracket> logistic_, decay_;
};

/// The process-wide table (built once, read-only afterwards).
const AcceptanceTable& acceptance_table();

// ---- exact integer thresholds for the uniform-coupling kernel ------------------------------------
// A uniform u = m 2^-53 (m the top 53 bits of a draw) passes a test "u < p" exactly when m < T for
// one integer T, as the test (rounding included) is monotone in m. With one coupling value and one
// field value the local field takes only 2 dmax + 1 values, so T is tabulated once per value.

/// Heat bath: active iff u (1 + exp(-x)) < 1, the exact test of AcceptanceTable.
std::uint64_t heat_bath_threshold(double x);

/// Metropolis: accept iff y <= 0 or u < exp(-y).
std::uint64_t metropolis_threshold(double y);

// ---- the uniform-coupling draw: 16 bits per update, 37 more on a tie ------------------------------
// The uniform-coupling kernels (Engine::sweep_uniform, update_uniform_colour and the lock-step
// groups of sampler_uniform_groups.hpp) decide "m < T" for a 53-bit uniform m = d 2^37 + e with
// d the update's 16 bits from the chain's main stream and e 37 bits from its tie stream. With
// T = high 2^37 + low (high = min(T >> 37, 2^16 - 1), so low is in [0, 2^37]; T = 2^53 gives
// high = 2^16 - 1, low = 2^37): d < high passes, d > high fails, and only d == high (probability
// 2^-16) draws e and passes iff e < low. Every decision has exactly the probability T 2^-53 of
// the 53-bit test, at a quarter of the main stream's bits.
//
// Main stream: the chain's eight generators (Lanes); a batch of n updates (a sweep for the
// sequential scan, a colour for the coloured scan) takes ceil(n / 32) steps of them (draw_lanes:
// word 8t + l is step t of generator l), and update j of the batch uses bits [16 (j % 4),
// 16 (j % 4) + 16) of word j / 4; the rest of the last step is discarded.
// Tie stream: one more xoshiro256** generator per chain (state words filled by splitmix64 from
// one output of the chain's stream after the eight generators were seeded); each tie takes the
// top 37 bits of its next output, in update order.

/// Top 37 bits of the next output of the xoshiro256** generator with state s[0..3] (rng.hpp).
inline std::uint64_t tie_bits(std::uint64_t* s) {
  std::uint64_t out;
  xoshiro256ss_step(s[0], s[1], s[2], s[3], out);
  return out >> 27;
}

/// Ties settled so far by any uniform-coupling kernel in this process (relaxed counter, touched
/// only on the rare tie path; tests check that ties happen and alike alone and in groups).
std::int64_t uniform_ties();
void count_uniform_tie();

/// The decision for the update's 16 bits d and the threshold's parts (high, low); draws from the
/// tie stream `tie` only when d == high.
inline bool uniform_pass(std::uint32_t d, std::uint32_t high, std::uint64_t low, std::uint64_t* tie) {
  if (d != high) return d < high;
  count_uniform_tie();
  return tie_bits(tie) < low;
}

/// Splits 53-bit thresholds T (each <= 2^53) into their (high, low) parts.
void split_thresholds(const std::vector<std::uint64_t>& t, std::vector<std::uint32_t>* high,
                      std::vector<std::uint64_t>* low);

/// Update j's 16 bits, as above, from word j / 4 of the batch: bits [16 (j % 4), 16 (j % 4) + 16).
inline std::uint16_t draw_piece(std::uint64_t word, std::int64_t j) { return std::uint16_t(word >> (16 * (j & 3))); }

/// pieces[j] = draw_piece(words[j / 4], j) for j in [0, n).
void split_pieces(const std::uint64_t* words, std::uint16_t* pieces, std::int64_t n);

// ---- uniform couplings, one colour at a time ---------------------------------------------------
// The state is held as int32 values by scan position (x[N] = 0 pads short neighbour rows); the
// neighbour positions of scan position i are nb[j * stride + i], j < degree. Level L = S + degree
// (+ 2 degree + 1 when the old value is high, Metropolis) picks the threshold parts.

struct UniformColour {
  std::int32_t* x = nullptr;
  const std::int32_t* nb = nullptr;
  std::int64_t stride = 0, degree = 0;
  std::int64_t begin = 0, end = 0;       ///< scan positions of the colour (units not coupled)
  const std::uint16_t* pieces = nullptr; ///< 16 bits per update, from the colour's first update
  const std::uint32_t* th = nullptr;     ///< threshold high parts [row][S + degree]
  const std::uint64_t* tl = nullptr;     ///< threshold low parts
  std::uint64_t* tie = nullptr;          ///< the chain's tie stream (4 state words)
  std::int32_t lo = 0, hi = 1;
  bool gibbs = true;
};

struct UniformSums {
  std::int64_t dv = 0, dv_S = 0, flips = 0;  ///< sum of value changes, of change x S, changes
};

/// Updates every position of the colour; adds to `sums`. Vectorised for degrees 2, 3, 4, 6, 8
/// (ties, one update in 2^16, are settled afterwards in position order).
void update_uniform_colour(const UniformColour& a, UniformSums& sums);

}  // namespace spinfer::detail
