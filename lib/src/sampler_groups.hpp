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
// * Uniform couplings (lattices): values as int8 by [scan position][chain], position N holding
//   zeros (the padding of short neighbour rows), so a neighbour's values for all chains are one
//   8-byte load.
// * Other models: fields and values stay in each chain's own arrays (a flipped chain updates
//   its whole field vector, N contiguous doubles, as alone; an interleaved layout would touch all
//   chains' fields on every flip); only the decision runs across the chains.
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

/// Uniform couplings (one coupling value, one field value), sequential or coloured scan: the
/// arithmetic of Engine::sweep_uniform per chain.
struct GroupUniform {
  std::int8_t* x = nullptr;             ///< [N + 1][kGroupWidth] values by scan position
  const std::int32_t* nb = nullptr;     ///< neighbour positions nb[j * stride + i], j < degree
  std::int64_t stride = 0, degree = 0;
  const std::int64_t* colour_start = nullptr;  ///< colours' first positions, then N
  std::int64_t colours = 0;             ///< 1 for the sequential scan
  const std::uint64_t* table = nullptr; ///< thresholds [row][S + degree] (row: old value is high,
                                        ///< Metropolis only); m passes iff m < threshold
  std::int8_t lo = 0, hi = 1;
  bool gibbs = true;
  unsigned active = 0;                  ///< lanes that update; the others keep their values
  GroupLanes* lanes = nullptr;
  std::uint64_t* draws = nullptr;       ///< scratch: kGroupChunk x kGroupWidth
  /// Added to, per lane: sum of value changes, of change x neighbour sum, number of changes.
  std::int64_t dv[kGroupWidth] = {}, dv_S[kGroupWidth] = {}, flips[kGroupWidth] = {};
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
  GroupLanes* lanes = nullptr;
  std::uint64_t* draws = nullptr;       ///< scratch: kGroupChunk x kGroupWidth
  const AcceptanceTable::Bracket* cells = nullptr;  ///< set by group_general_sweep
};

/// One sweep of the group (the lanes in `active`).
void group_uniform_sweep(GroupUniform& a);
void group_general_sweep(GroupGeneral& a);

/// The copy group_*_sweep uses: "generic", "avx2" or "avx512" (the widest the CPU runs).
const char* group_kernel_isa();
/// Tests: use the named copy from now on (nullptr: the widest again); false when the CPU cannot
/// run it (nothing changes then).
bool use_group_kernel_isa(const char* name);

}  // namespace spinfer::detail
