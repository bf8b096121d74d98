// Internal: the single-unit acceptance tests decided from the draw's side, for the lock-step
// dense kernel (sampler_groups.inc).
//
// AcceptanceTable brackets the probability p(x) by the argument's cell and compares the draw; here
// the draw u = m 2^-53 is bracketed instead, by its cell (its top kBits bits), and the argument is
// compared with bounds of the argument at which the test's outcome is certain for every draw of
// the cell:
//   heat bath   active iff u (1 + exp(-x)) < 1, i.e. x > logit(u) = ln(u / (1 - u))
//   Metropolis  accept iff y <= 0 or u < exp(-y), i.e. y < -ln(u)
// For a cell [u_c, u_c+1) the heat bath is certainly active when x >= logit(u_c+1) + margin and
// certainly inactive when x <= logit(u_c) - margin; Metropolis certainly accepts when
// y <= -ln(u_c+1) - margin and certainly rejects when y >= -ln(u_c) + margin. The margin,
// 2^-30 (1 + |bound|), is far beyond the exact tests' rounding (relative 2^-50 in the product,
// worth at most 2^-40 in x for cells with 1 - u >= 2^-10; the last cell, where 1 - u is smaller,
// has no "active" bound) and the bounds are rounded outwards to float. Any other argument (a
// fraction of a percent of updates) takes the exact test, so each decision is the exact test's:
// the chain is the same as with AcceptanceTable or with exp alone.
//
// Why: the argument depends on the previous updates, the draw does not. Bracketing the draw moves
// the table lookup off the chain of dependent updates, leaving one multiply and two compares on it.
#pragma once

#include <cstdint>
#include <vector>

namespace spinfer::detail {

struct DrawBrackets {
  static constexpr int kBits = 10;                     ///< cell of a 64-bit draw: its top kBits
  static constexpr int kShift = 64 - kBits;            ///< cell = draw >> kShift
  static constexpr std::int64_t kCells = std::int64_t(1) << kBits;
  /// Per cell two float bounds in one 64-bit word (bits 0-31: first, 32-63: second), so that one
  /// gather fetches both. heat_bath: first = active at or above, second = inactive at or below.
  /// metropolis: first = accept at or below, second = reject at or above.
  std::vector<std::uint64_t> heat_bath, metropolis;
};

/// The process-wide table (built once, read-only afterwards).
const DrawBrackets& draw_brackets();

/// The bounds of a cell as doubles: {first, second} (tests).
void unpack_bracket(std::uint64_t word, double* first, double* second);

}  // namespace spinfer::detail
