// Internal: lock-step groups of up to 64 chains for uniform couplings (one coupling value, one
// field value: lattices), sequential or coloured scan; sampler.cpp forms the groups.
//
// Every chain of a group updates the same scan position at the same time. The values are int8,
// [position][lane] with 64 lanes (one AVX-512 register per position), position N holding zeros
// (the padding of short neighbour rows). Each update decides as the single-chain kernels do
// (sampler_kernels.hpp, "the uniform-coupling draw"): the update's 16 bits from the chain's eight
// generators, split into a high and a low byte so that 64 chains compare at once (d < high iff
// d_hi < high_hi, or d_hi == high_hi and d_lo < high_lo), and on a tie (both bytes equal) the
// chain's tie stream, lane by lane. The neighbour sum, the threshold parts by level (byte
// shuffles) and the counts behind the energy change are byte vectors as well.
//
// Bits: chain c's generators and tie stream are its own, stepped only for its updates, so its
// samples are the same bits alone, in any group, in any lane, on any thread or rank, and with any
// of the three instruction-set copies (sampler_uniform_groups_{generic,avx2,avx512}.cpp, built
// from sampler_uniform_groups.inc; tests/cpp/test_sampler_groups.cpp checks all of them).
//
// Lanes: member m of a group (m < 64) holds byte lane uniform_lane(m). The order is the one in
// which a transposition of the generators' outputs (8 registers of 8 members' 64-bit words into
// 8 registers of one byte of all 64 members) comes out without moves across 128-bit lanes.
#pragma once

#include <cstdint>

#include "sampler_kernels.hpp"

namespace spinfer::detail {

/// Chains per uniform-coupling group (int8 values: one AVX-512 register).
constexpr std::int64_t kUniformWidth = 64;
/// Positions whose draws are generated in one batch (a multiple of 32: one step of a chain's eight
/// generators gives 32 updates, and batches start at a colour's first position).
constexpr std::int64_t kUniformChunk = 128;

/// Byte lane of member m: 16 ((m % 8) / 2) + 2 (m / 8) + m % 2.
constexpr std::int64_t uniform_lane(std::int64_t m) { return 16 * ((m % 8) / 2) + 2 * (m / 8) + m % 2; }

/// The generators of a group's members: [state word][generator][member] (Lanes of each member).
struct alignas(64) UniformLanes {
  std::uint64_t s[4][Lanes::kWidth][kUniformWidth];
};

/// One position's values of all lanes.
struct alignas(64) UniformLine {
  std::int8_t v[kUniformWidth];
};

/// Draw scratch: one generator output for each member (kUniformChunk / 4 of them per batch).
struct alignas(64) UniformWords {
  std::uint64_t w[kUniformWidth];
};

struct GroupUniform {
  UniformLine* x = nullptr;               ///< [N + 1] values by scan position
  const std::int32_t* nb = nullptr;       ///< neighbour positions nb[j * stride + i], j < degree
  std::int64_t stride = 0, degree = 0;
  const std::int64_t* colour_start = nullptr;  ///< colours' first positions, then N
  std::int64_t colours = 0;               ///< 1 for the sequential scan
  const std::uint32_t* high = nullptr;    ///< threshold parts [row][S + degree] (row: old value
  const std::uint64_t* low = nullptr;     ///< is high, Metropolis only; split_thresholds)
  std::int8_t lo = 0, hi = 1;
  bool gibbs = true;
  std::uint64_t active = 0;               ///< members that update (bit m); the others keep their
                                          ///< values and their generators are not to be used
  std::int64_t members = 0;               ///< lanes in use (generators beyond are not stepped)
  UniformLanes* lanes = nullptr;
  std::uint64_t (*ties)[4] = nullptr;     ///< [member] tie streams
  UniformWords* words = nullptr;          ///< scratch: kUniformChunk / 4
  std::uint16_t* pieces = nullptr;        ///< scratch (portable copy): kUniformChunk x 64
  /// Added to, per member: sum of value changes, of change x neighbour sum, number of changes.
  std::int64_t dv[kUniformWidth] = {}, dv_S[kUniformWidth] = {}, flips[kUniformWidth] = {};
};

/// One sweep of the group (the members in `active`); the copy group_kernel_isa() names.
void group_uniform_sweep(GroupUniform& a);

/// The values by lane: out[k stride + i] = x[i].v[k] for every lane k < 64 and position i < n
/// (stride >= n rounded up to a multiple of 8; `out` holds 64 stride bytes). Reads each position
/// once for all the group's chains (kept samples are taken at the same steps for all of them).
void group_uniform_unpack(const UniformLine* x, std::int64_t n, std::int8_t* out, std::int64_t stride);

}  // namespace spinfer::detail
