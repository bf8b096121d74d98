// The integer-field lock-step kernel of sampler_integer_groups.hpp (compiled with -mavx512f
// -mavx512dq -mavx512bw -mavx512vl; called only when the CPU has all four). Plain loops, raw
// arrays and intrinsics only, no inline library templates (see sampler_groups.inc).
#include <cstdint>
#include <cstring>

#ifdef __AVX512BW__
// GCC 12's AVX-512 intrinsics start some results from a deliberately undefined vector, which
// -Wuninitialized reports once inlined (as in sampler_uniform_groups.inc).
#pragma GCC diagnostic ignored "-Wuninitialized"
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#include <immintrin.h>
#endif

#include "draw_brackets.hpp"
#include "sampler_integer_groups.hpp"

namespace spinfer::detail {

#ifdef __AVX512BW__

namespace {

constexpr std::int64_t L = kIntegerWidth;
constexpr std::int64_t kBlock = 16;  // positions decided before their flips reach the field rows
typedef std::uint64_t vu8 __attribute__((vector_size(64)));

// `words` words of every lane's batch (rounded up to a multiple of 8, as draw_lanes does):
// generator g's step t gives word 8 t + g of each lane, stored at out[(8 t + g) 16 + lane].
void draw_batch(IntegerLanes& g, std::uint64_t* out, std::int64_t words) {
  const std::int64_t steps = (words + 7) / 8;
  for (std::int64_t l = 0; l < Lanes::kWidth; ++l)
    for (std::int64_t half = 0; half < 2; ++half) {
      vu8 s0, s1, s2, s3;
      std::memcpy(&s0, &g.s[0][l][8 * half], 64);
      std::memcpy(&s1, &g.s[1][l][8 * half], 64);
      std::memcpy(&s2, &g.s[2][l][8 * half], 64);
      std::memcpy(&s3, &g.s[3][l][8 * half], 64);
      for (std::int64_t t = 0; t < steps; ++t) {
        vu8 r;
        xoshiro256ss_step(s0, s1, s2, s3, r);
        std::memcpy(out + (8 * t + l) * L + 8 * half, &r, 64);
      }
      std::memcpy(&g.s[0][l][8 * half], &s0, 64);
      std::memcpy(&g.s[1][l][8 * half], &s1, 64);
      std::memcpy(&g.s[2][l][8 * half], &s2, 64);
      std::memcpy(&g.s[3][l][8 * half], &s3, 64);
    }
}

// r[i] = row i (16 int32) -> r[j] = column j.
[[gnu::always_inline]] inline void transpose16(__m512i r[16]) {
  __m512i t[16];
  for (int i = 0; i < 8; ++i) {
    t[2 * i] = _mm512_unpacklo_epi32(r[2 * i], r[2 * i + 1]);
    t[2 * i + 1] = _mm512_unpackhi_epi32(r[2 * i], r[2 * i + 1]);
  }
  // u[4 g + c]: rows 4g..4g+3 of columns 4 k + c, in 128-bit lane k.
  __m512i u[16];
  for (int g = 0; g < 4; ++g) {
    u[4 * g + 0] = _mm512_unpacklo_epi64(t[4 * g], t[4 * g + 2]);
    u[4 * g + 1] = _mm512_unpackhi_epi64(t[4 * g], t[4 * g + 2]);
    u[4 * g + 2] = _mm512_unpacklo_epi64(t[4 * g + 1], t[4 * g + 3]);
    u[4 * g + 3] = _mm512_unpackhi_epi64(t[4 * g + 1], t[4 * g + 3]);
  }
  for (int c = 0; c < 4; ++c) {
    const __m512i x0 = _mm512_shuffle_i32x4(u[c], u[4 + c], 0x44), x1 = _mm512_shuffle_i32x4(u[c], u[4 + c], 0xEE);
    const __m512i y0 = _mm512_shuffle_i32x4(u[8 + c], u[12 + c], 0x44), y1 = _mm512_shuffle_i32x4(u[8 + c], u[12 + c], 0xEE);
    r[c] = _mm512_shuffle_i32x4(x0, y0, 0x88);
    r[4 + c] = _mm512_shuffle_i32x4(x0, y0, 0xDD);
    r[8 + c] = _mm512_shuffle_i32x4(x1, y1, 0x88);
    r[12 + c] = _mm512_shuffle_i32x4(x1, y1, 0xDD);
  }
}

// Adds the columns of the set bits of `flips` (column[bit] + offset) to the K vectors of one lane's
// field row at h: the row is read and written once, whatever the number of flips.
template <int K>
[[gnu::always_inline]] inline void add_flips(std::int32_t* h, const std::int32_t* const* column, std::uint32_t flips,
                                             std::int64_t offset) {
  __m512i acc[K];
#pragma GCC unroll 16
  for (int i = 0; i < K; ++i) acc[i] = _mm512_load_si512(h + 16 * i);
  do {
    const std::int32_t* c = column[__builtin_ctz(flips)] + offset;
#pragma GCC unroll 16
    for (int i = 0; i < K; ++i) acc[i] = _mm512_add_epi32(acc[i], _mm512_load_si512(c + 16 * i));
    flips &= flips - 1;
  } while (flips);
#pragma GCC unroll 16
  for (int i = 0; i < K; ++i) _mm512_store_si512(h + 16 * i, acc[i]);
}

void add_row_flips(std::int32_t* h, const std::int32_t* const* column, std::uint32_t flips, std::int64_t NP) {
  for (std::int64_t i0 = 0; i0 < NP; i0 += 256) {
    const std::int64_t vectors = (NP - i0) / 16;
    std::int32_t* at = h + i0;
    switch (vectors < 16 ? vectors : 16) {
      case 1: add_flips<1>(at, column, flips, i0); break;
      case 2: add_flips<2>(at, column, flips, i0); break;
      case 3: add_flips<3>(at, column, flips, i0); break;
      case 4: add_flips<4>(at, column, flips, i0); break;
      case 5: add_flips<5>(at, column, flips, i0); break;
      case 6: add_flips<6>(at, column, flips, i0); break;
      case 7: add_flips<7>(at, column, flips, i0); break;
      case 8: add_flips<8>(at, column, flips, i0); break;
      case 9: add_flips<9>(at, column, flips, i0); break;
      case 10: add_flips<10>(at, column, flips, i0); break;
      case 11: add_flips<11>(at, column, flips, i0); break;
      case 12: add_flips<12>(at, column, flips, i0); break;
      case 13: add_flips<13>(at, column, flips, i0); break;
      case 14: add_flips<14>(at, column, flips, i0); break;
      case 15: add_flips<15>(at, column, flips, i0); break;
      default: add_flips<16>(at, column, flips, i0); break;
    }
  }
}

// What a sweep adds up per lane: the sum of +-H over its flips (up: +, down: -; int64, lanes
// 0-7 and 8-15) and the number of flips.
struct SweepSums {
  __m512i moved_lo, moved_hi, flips;
};

// One block of n positions from b0 (n = 16 when kFull: the loops are then unrolled and the
// block's fields stay in registers). `d0`: the draw words of the block's first position.
template <bool kGibbs, bool kFull>
[[gnu::always_inline]] inline void run_block(GroupInteger& a, std::int64_t b0, std::int64_t n_, const std::uint64_t* d0,
                                             SweepSums& sums) {
  const std::int64_t n = kFull ? kBlock : n_, NP = a.NP;
  // Locals, so the stores below do not make the compiler reload them.
  const std::int32_t* __restrict pass_at = a.pass;
  const std::int32_t* __restrict fail_at = a.fail;
  const std::int32_t* __restrict columns = a.columns;
  std::int8_t* __restrict values = a.V;
  const __mmask16 active = __mmask16(a.active);
  const __m512i zero = _mm512_setzero_si512(), one = _mm512_set1_epi32(1), low16 = _mm512_set1_epi32(0xffff);
  const __m128i hi8 = _mm_set1_epi8(a.hi), lo8 = _mm_set1_epi8(a.lo);
  __m512i P[kBlock];
#pragma GCC unroll 16
  for (std::int64_t l = 0; l < L; ++l) P[l] = _mm512_load_si512(a.H[l] + b0);
  transpose16(P);
  // Per lane: bit q for a flip up at position b0 + q, bit 16 + q for a flip down.
  __m512i flips = zero;
  __m512i low_words = zero, high_words = zero;  // the 32-bit halves of the current draw words
#pragma GCC unroll 16
  for (std::int64_t q = 0; q < n; ++q) {
    if ((q & 3) == 0) {
      // Four positions' 16-bit pieces from one draw word per lane (bits 16 (q % 4) upwards).
      const __m512i w0 = _mm512_loadu_si512(d0 + (q >> 2) * L), w1 = _mm512_loadu_si512(d0 + (q >> 2) * L + 8);
      low_words = _mm512_inserti64x4(_mm512_castsi256_si512(_mm512_cvtepi64_epi32(w0)), _mm512_cvtepi64_epi32(w1), 1);
      high_words = _mm512_inserti64x4(_mm512_castsi256_si512(_mm512_cvtepi64_epi32(_mm512_srli_epi64(w0, 32))),
                                      _mm512_cvtepi64_epi32(_mm512_srli_epi64(w1, 32)), 1);
    }
    const __m512i word = (q & 2) ? high_words : low_words;
    const __m512i piece = (q & 1) ? _mm512_srli_epi32(word, 16) : _mm512_and_si512(word, low16);
    const __m512i cell = _mm512_srli_epi32(piece, 16 - DrawBrackets::kBits);
    std::int8_t* row = values + (b0 + q) * L;
    const __m128i old = _mm_load_si128(reinterpret_cast<const __m128i*>(row));
    const __mmask16 was_high = _mm_cmpeq_epi8_mask(old, hi8);
    // Metropolis: w = -H where the unit is high (w >= 0: the flip lowers the energy).
    const __m512i w = kGibbs ? P[q] : _mm512_mask_sub_epi32(P[q], was_high, zero, P[q]);
    __mmask16 pass = _mm512_cmpge_epi32_mask(w, _mm512_i32gather_epi32(cell, pass_at, 4));
    const __mmask16 fail = _mm512_cmple_epi32_mask(w, _mm512_i32gather_epi32(cell, fail_at, 4));
    const __mmask16 open_lanes = _kandn_mask16(_kor_mask16(pass, fail), active);
    if (__builtin_expect(!_ktestz_mask16_u8(open_lanes, open_lanes), 0)) {
      const unsigned open = _cvtmask16_u32(open_lanes);
      alignas(64) std::int32_t w_lanes[L];
      alignas(64) std::uint32_t d_lanes[L];
      _mm512_store_si512(w_lanes, w);
      _mm512_store_si512(d_lanes, piece);
      for (unsigned u = open; u; u &= u - 1) {
        const int l = __builtin_ctz(u);
        if (integer_exact(a.c, kGibbs, w_lanes[l], d_lanes[l], a.ties[l])) pass = __mmask16(pass | (1u << l));
      }
    }
    const __mmask16 high = kGibbs ? pass : __mmask16(pass ^ was_high);
    const __mmask16 up = __mmask16(active & high & ~was_high), down = __mmask16(active & ~high & was_high);
    _mm_store_si128(reinterpret_cast<__m128i*>(row), _mm_mask_mov_epi8(_mm_mask_mov_epi8(old, up, hi8), down, lo8));
    const __m512i moved = _mm512_mask_sub_epi32(_mm512_maskz_mov_epi32(up, P[q]), down, zero, P[q]);
    sums.moved_lo = _mm512_add_epi64(sums.moved_lo, _mm512_cvtepi32_epi64(_mm512_castsi512_si256(moved)));
    sums.moved_hi = _mm512_add_epi64(sums.moved_hi, _mm512_cvtepi32_epi64(_mm512_extracti64x4_epi64(moved, 1)));
    sums.flips = _mm512_mask_add_epi32(sums.flips, __mmask16(up | down), sums.flips, one);
    // The block's later fields see this flip now.
    const std::int32_t* col = columns + (b0 + q) * NP + b0;
#pragma GCC unroll 16
    for (std::int64_t p = q + 1; p < n; ++p) {
      const __m512i c = _mm512_set1_epi32(col[p]);
      P[p] = _mm512_mask_sub_epi32(_mm512_mask_add_epi32(P[p], up, P[p], c), down, P[p], c);
    }
    flips = _mm512_mask_or_epi32(flips, up, flips, _mm512_set1_epi32(int(1u << q)));
    flips = _mm512_mask_or_epi32(flips, down, flips, _mm512_set1_epi32(int(1u << (16 + q))));
  }
  // Each lane's flips added to its whole field row at once.
  alignas(64) std::uint32_t lane_flips[L];
  _mm512_store_si512(lane_flips, flips);
  const std::int32_t* column[2 * kBlock];
  for (std::int64_t q = 0; q < n; ++q) {
    column[q] = a.columns + (b0 + q) * NP;
    column[kBlock + q] = a.columns + (a.N + b0 + q) * NP;
  }
  for (std::int64_t l = 0; l < L; ++l)
    if (lane_flips[l]) add_row_flips(a.H[l], column, lane_flips[l], NP);
}

template <bool kGibbs>
void sweep(GroupInteger& a) {
  const std::int64_t N = a.N;
  SweepSums sums{_mm512_setzero_si512(), _mm512_setzero_si512(), _mm512_setzero_si512()};
  for (std::int64_t first = 0; first < N; first += kIntegerChunk) {
    const std::int64_t last = first + kIntegerChunk < N ? first + kIntegerChunk : N;
    draw_batch(*a.lanes, a.draws, (last - first + 3) / 4);
    for (std::int64_t b0 = first; b0 < last; b0 += kBlock) {
      const std::uint64_t* d0 = a.draws + (b0 - first) / 4 * L;
      if (last - b0 >= kBlock)
        run_block<kGibbs, true>(a, b0, kBlock, d0, sums);
      else
        run_block<kGibbs, false>(a, b0, last - b0, d0, sums);
    }
  }
  // A flip of the unit at p by +-span changes the energy by -+span H_p: E2 by -+2 span Hq_p.
  const std::int64_t span = std::int64_t(a.hi) - std::int64_t(a.lo);
  alignas(64) std::int64_t moved_by_lane[L];
  alignas(64) std::int32_t count_by_lane[L];
  _mm512_store_si512(moved_by_lane, sums.moved_lo);
  _mm512_store_si512(moved_by_lane + 8, sums.moved_hi);
  _mm512_store_si512(count_by_lane, sums.flips);
  for (std::int64_t l = 0; l < L; ++l) {
    a.E2[l] -= 2 * span * moved_by_lane[l];
    a.flips[l] += count_by_lane[l];
  }
}

}  // namespace

void group_integer_sweep_avx512(GroupInteger& a) { a.gibbs ? sweep<true>(a) : sweep<false>(a); }

void group_integer_unpack_avx512(const std::int8_t* V, std::int64_t n, std::int8_t* out, std::int64_t stride) {
  // 16 x 16 byte transpositions: rows of 16 lanes at 16 positions -> 16 positions of each lane.
  for (std::int64_t p0 = 0; p0 < n; p0 += 16) {
    __m128i r[16];
    for (int i = 0; i < 16; ++i)
      r[i] = p0 + i < n ? _mm_load_si128(reinterpret_cast<const __m128i*>(V + (p0 + i) * L)) : _mm_setzero_si128();
    // Four perfect shuffles (byte unpacks of rows i and i + 8 into rows 2i and 2i + 1) transpose.
    for (int round = 0; round < 4; ++round) {
      __m128i t[16];
      for (int i = 0; i < 8; ++i) {
        t[2 * i] = _mm_unpacklo_epi8(r[i], r[i + 8]);
        t[2 * i + 1] = _mm_unpackhi_epi8(r[i], r[i + 8]);
      }
      for (int i = 0; i < 16; ++i) r[i] = t[i];
    }
    for (int l = 0; l < 16; ++l) _mm_storeu_si128(reinterpret_cast<__m128i*>(out + l * stride + p0), r[l]);
  }
}

#endif

}  // namespace spinfer::detail
