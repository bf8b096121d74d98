// Internal: lock-step groups of up to 16 chains on dense couplings with integer fields
// (integer_fields.hpp); sampler.cpp forms the groups. AVX-512 only: on other CPUs these chains
// run alone (group_integer_available() is false).
//
// Every chain of a group updates the same scan position at the same time. Each chain keeps its
// own fields (Hq by position, int32); the group holds the values as int8 [position][lane] (one
// 16-byte row per position; a chain's own values by unit are rewritten from there when read). A
// sweep runs in blocks of 16 positions:
// * the block's fields of all lanes come in as one 16 x 16 transposition (a vector per position);
// * each position decides for all lanes at once (integer bounds by the draw's cell, exactly as
//   integer_decide: the rare undecided lanes take their tie stream and the exact test lane by
//   lane, in position order), and each flip is added at once to the block's later fields;
// * at the block's end each lane's flips are added to its whole field row: the row is read once
//   into registers, every flipped column is added, and it is written back once (integer sums:
//   the order of the additions does not matter, so the bits are those of the single-chain
//   kernel's flip-by-flip additions). Energies are integers too: each lane sums +-H of its flips.
// Bits: chain c's generators and tie stream are its own, stepped only for its updates (the
// generators of a group's lanes are stepped together, as in sampler_groups.hpp), so its samples
// are the same bits alone or in any group, lane, thread or rank (tests/cpp/test_sampler_groups.cpp).
#pragma once

#include <cstdint>

#include "sampler_kernels.hpp"

namespace spinfer::detail {

/// Chains per integer-field group (int32 fields of 16 chains: one AVX-512 register).
constexpr std::int64_t kIntegerWidth = 16;

/// The generators of a group's lanes: [state word][generator][lane] (Lanes of each lane).
struct alignas(64) IntegerLanes {
  std::uint64_t s[4][Lanes::kWidth][kIntegerWidth];
};

// Raw pointers and numbers only: the kernel's file is compiled for AVX-512 and must not
// instantiate any inline library code another file could share.
struct GroupInteger {
  std::int64_t N = 0, NP = 0;              ///< IntegerModel's sizes
  std::int8_t lo = -1, hi = 1;             ///< the values as integers
  const std::int32_t* columns = nullptr;   ///< IntegerModel::columns
  const std::int32_t* unit = nullptr;      ///< IntegerModel::unit
  const std::int32_t* pass = nullptr;      ///< IntegerBounds of the temperature
  const std::int32_t* fail = nullptr;
  double c = 0;
  bool gibbs = true;
  std::int32_t* H[kIntegerWidth] = {};     ///< each lane's fields by position (NP int32, 64-byte
                                           ///< aligned); lanes outside `active` may point at any
                                           ///< NP readable int32
  std::int8_t* V = nullptr;                ///< [N][16] the lanes' values by position (lo / hi);
                                           ///< the chains' own values are read from here
                                           ///< (Engine::values)
  std::int64_t E2[kIntegerWidth] = {};     ///< energies in units of 2^-(s+1), added to
  std::int64_t flips[kIntegerWidth] = {};  ///< added to
  unsigned active = 0;                     ///< lanes that update (bit l)
  IntegerLanes* lanes = nullptr;           ///< all 16 lanes' generators are stepped
  std::uint64_t (*ties)[4] = nullptr;      ///< [lane] tie streams
  std::uint64_t* draws = nullptr;          ///< scratch: kIntegerChunk / 4 x 16 words
};

/// Positions whose draws are generated in one batch (a multiple of 32: one step of a chain's
/// eight generators gives 32 updates).
constexpr std::int64_t kIntegerChunk = 64;

/// The exact test of an undecided update (integer_decide after the bounds): 37 bits from the tie
/// stream, then the heat-bath or Metropolis test with argument c w.
bool integer_exact(double c, bool gibbs, std::int32_t w, std::uint32_t d, std::uint64_t* tie);

/// The lanes' values by lane: out[l stride + p] = V[p 16 + l] for l < 16, p < n (stride >= n
/// rounded up to a multiple of 16). Once per kept sample for all of a group's chains.
void group_integer_unpack(const std::int8_t* V, std::int64_t n, std::int8_t* out, std::int64_t stride);

/// Whether this CPU runs the kernel (and group_kernel_isa() is "avx512").
bool group_integer_available();

/// One sweep of the group's active lanes.
void group_integer_sweep(GroupInteger& a);

}  // namespace spinfer::detail
