// Internal: lock-step kernels that advance a group of up to kGroupWidth chains through the same
// scan together (vectors across chains; sampler.cpp forms the groups).
//
// Every chain of a group updates the same unit at the same time, so one vector holds that unit's
// draws, fields or values for all chains, and the accept decisions are computed for all of them
// without a branch. A chain's arithmetic is the one of the single-chain kernels in sampler.cpp,
// operation for operation (same generator bits, same table brackets and exact tests, field
// updates as add_scaled does them (a product, then a sum), same integer sums), and every file involved is compiled with
// -ffp-contract=off, so a chain's samples do not depend on its group, its lane or the CPU's
// vector width: chain c gives the same bits alone, in any group, on any thread or rank.
//
// Layouts:
// * GroupLanes: the eight xoshiro256** generators of each chain (Lanes in sampler_kernels.hpp),
//   held [state word][generator][chain], so stepping generator l of all chains is one vector
//   operation and a batch comes out as draws[position][chain]: draw 8t + l of chain c is the
//   t-th output of its generator l, exactly what draw_lanes gives that chain alone.
// * Uniform couplings (lattices) have their own groups of up to 64 chains
//   (sampler_uniform_groups.hpp).
// * Other models: fields and values stay in each chain's own arrays (an interleaved layout would
//   touch all chains' fields on every flip); the decision runs across the chains. CSR: a flipped
//   chain updates its fields at once, as alone. Dense: the flips of 16 positions are added to
//   each chain's fields together at the block's end, in the same order (sampler_groups.inc).
//
// The kernels are compiled three times (sampler_groups_{generic,avx2,avx512}.cpp) from
// sampler_groups.inc; the group_* functions below pick the widest copy the CPU runs.
#pragma once

#include <cstdint>

#include "sampler_kernels.hpp"

namespace spinfer::detail {

/// Chains per group (one AVX-512 register of doubles; two AVX2 registers).
constexpr std::int64_t kGroupWidth = 8;
/// Positions whose draws are generated in one batch (the batch stays in L1).
constexpr std::int64_t kGroupChunk = 128;

struct GroupLanes {
  std::uint64_t s[4][Lanes::kWidth][kGroupWidth];  ///< [state word][generator][chain]
};

/// Any other model, sequential or coloured scan: the arithmetic of Engine::sweep_t per chain.
struct GroupGeneral {
  double* v[kGroupWidth] = {};          ///< each lane's values by unit (lanes outside `active`
  double* H[kGroupWidth] = {};          ///< may point at any N readable doubles) and fields
  double E[kGroupWidth] = {};           ///< energies, updated in place
  std::int64_t flips[kGroupWidth] = {}; ///< added to
  unsigned active = 0;
  std::int64_t N = 0;
  const std::int32_t* order = nullptr;  ///< unit of each scan position (null: the identity)
  const double* dense = nullptr;        ///< column k at dense + k N, or CSR:
  const std::int64_t* offsets = nullptr;
  const std::int32_t* index = nullptr;
  const double* value = nullptr;
  double lo = -1, hi = 1, beta = 1;
  bool gibbs = true;
  /// Dense: every product dl J_jk of a field update is exact (|dl| = hi - lo is 1 or 2 and no
  /// |J_jk| reaches 2^1000), so fused multiply-adds give the bits of a product then a sum.
  bool fused = false;
  GroupLanes* lanes = nullptr;
  std::uint64_t* draws = nullptr;       ///< scratch: kGroupChunk x kGroupWidth
  const AcceptanceTable::Bracket* cells = nullptr;  ///< set by group_general_sweep (CSR)
  const std::uint64_t* draw_cells = nullptr;        ///< set by group_general_sweep (dense):
                                                    ///< DrawBrackets for the method
};

/// One sweep of the group (the lanes in `active`).
void group_general_sweep(GroupGeneral& a);

/// The copy group_general_sweep and group_uniform_sweep (sampler_uniform_groups.hpp) use:
/// "generic", "avx2" or "avx512" (the widest the CPU runs).
const char* group_kernel_isa();
/// Tests: use the named copy from now on (nullptr: the widest again); false when the CPU cannot
/// run it (nothing changes then).
bool use_group_kernel_isa(const char* name);

}  // namespace spinfer::detail
