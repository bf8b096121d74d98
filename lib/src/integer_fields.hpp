// Internal: exact integer local fields for dense couplings ("integer fields"), and the
// single-chain sweep that uses them (sampler.cpp runs the chains; the lock-step groups of 16
// chains are in sampler_integer_groups.hpp).
//
// Why. With double fields a chain's bits depend on the order of its field additions, so every
// kernel must repeat the single-chain kernel's order, which fixes the shape of the work. Here the
// couplings and fields are rounded once to multiples of 2^-s and the fields are held as int32 in
// units of 2^-s: integer sums do not depend on their order, so a lock-step kernel may add a block
// of flips in whatever order is fastest and still give every chain the bits it gives alone.
//
// The rounded model. Jq_ij = round(J_ij 2^s), hq_i = round(h_i 2^s) (ties away from zero), with
// s the largest integer <= kMaxScale such that every |hq_i| + sum_j |Jq_ij| stays below 2^30
// (so no field, whatever the state, leaves int32; fields H = h + sum_j J_ij v_j with |v_j| <= 1).
// The sampled model is the rounded one: each coupling and field moves by at most 2^-(s+1). When
// s would fall below kMinScale (a resolution coarser than 2^-20, about 1e-6: fields or coupling
// sums beyond about 1000), the sampler keeps double fields instead (quantise returns nothing).
//
// Layout by scan position p (sequential scan: p is the unit; coloured scan: the unit order[p]):
// column p of `columns` is span Jq[., unit p] by position (the change of every field when the
// unit at p goes from low to high), column N + p its negation; rows are NP int32 (N rounded up
// to 16, zero padded; 64-byte aligned). Energies are int64 in units of 2^-(s+1):
// E2 = -sum_p v_p (Hq_p + hq_p) for E = -1/2 sum_i v_i (H_i + h_i).
//
// Decisions, for an update of the unit at p with field w (heat bath: w = Hq_p; Metropolis:
// w = Hq_p when the unit is low, -Hq_p when high, so w >= 0 means dE <= 0) and 16 random bits d:
//   heat bath   active iff x > logit(u), x = c w, c = beta span 2^-s (AcceptanceTable's test)
//   Metropolis  accept iff y <= 0 or u < exp(-y), y = -(c w)
// with u = m 2^-53, m = d 2^37 + e. The top 10 bits of d pick a cell of DrawBrackets; its argument
// bounds become integer bounds on w, one unit further out (IntegerBounds): w >= pass[cell] passes
// and w <= fail[cell] fails for every m of the cell, and only a w in between (about 0.1% of
// updates) takes 37 more bits e from the chain's tie stream (tie_bits, sampler_kernels.hpp) and
// the exact test. Every decision is the exact test's on the 53-bit uniform m 2^-53, and the tie
// stream is stepped on exactly the same updates in every kernel (the bounds are one table).
// Draws: 16 bits per update as in the uniform-coupling kernels (sampler_kernels.hpp): update i of
// a sweep uses bits [16 (i % 4), 16 (i % 4) + 16) of word i / 4 of the sweep's batch from the
// chain's eight generators (draw_lanes with ceil(N / 4) words).
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

#include <Eigen/Dense>

#include "aligned_vector.hpp"
#include "draw_brackets.hpp"
#include "spinfer/rng.hpp"

namespace spinfer::detail {

struct IntegerModel {
  static constexpr int kMinScale = 20;
  static constexpr int kMaxScale = 40;
  int scale = 0;                        ///< s: fields in units of 2^-s
  std::int64_t N = 0, NP = 0;           ///< units; row length (N rounded up to 16)
  std::int32_t lo = -1, hi = 1;         ///< the two values as integers (span = hi - lo)
  std::vector<std::int32_t> unit;       ///< unit of scan position p
  AlignedVector<std::int32_t> columns;  ///< [2 N][NP], see above
  std::vector<std::int32_t> fields;     ///< hq by position
  double resolution() const;            ///< 2^-s
  double energy(std::int64_t E2) const; ///< E2 2^-(s+1)
};

/// The rounded model of (h, J) (J column-major N x N, symmetric, zero diagonal) in the scan order
/// `order` (empty: units in order), or nothing when the resolution would be coarser than
/// 2^-kMinScale or a value is not finite.
std::optional<IntegerModel> quantise(const Eigen::VectorXd& h, const double* J, std::int64_t N,
                                     std::int32_t lo, std::int32_t hi,
                                     const std::vector<std::int32_t>& order);

/// Integer decision bounds at one temperature (see above): w >= pass[cell] passes, w <= fail[cell]
/// fails, anything between takes the exact test with argument c w.
struct IntegerBounds {
  static constexpr std::int64_t kCells = DrawBrackets::kCells;
  double c = 0;  ///< beta span 2^-s
  bool gibbs = true;
  alignas(64) std::int32_t pass[kCells];
  alignas(64) std::int32_t fail[kCells];
};

IntegerBounds integer_bounds(const IntegerModel& m, double beta, bool gibbs);

/// The decision for field w (see above), 16 bits d and the chain's tie stream.
bool integer_decide(const IntegerBounds& b, std::int32_t w, std::uint32_t d, std::uint64_t* tie);

/// Fields Hq (NP entries, padding zeroed) and energy E2 of the values v (by unit, lo or hi).
void integer_fields(const IntegerModel& m, const double* v, std::int32_t* Hq, std::int64_t* E2);

/// One sweep of one chain: N updates at scan positions 0..N-1 in order, or (random scan) at the
/// positions rng.below(N) (units in order: order is the identity then). `words`: the sweep's
/// ceil(N / 4) draw words. v (by unit, doubles lo / hi), Hq and E2 are updated. Returns the flips.
std::int64_t integer_sweep(const IntegerModel& m, const IntegerBounds& b, double* v, std::int32_t* Hq,
                           std::int64_t* E2, const std::uint64_t* words, std::uint64_t* tie, Rng* random_scan);

}  // namespace spinfer::detail
