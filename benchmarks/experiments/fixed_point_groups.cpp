// Design prototype (not part of the library or its build): the dense lock-step group with
// integer fields, measured for the next step of the sampler's speed goal (DEVELOPERS.md,
// "Sampler: latest run and what limits it", "Next step for dense models").
//
// Idea. The library's dense kernels hold fields as doubles, so a chain's bits depend on the
// order of its field additions and every kernel must repeat the single-chain kernel's order. Here
// couplings are rounded once to integers in units of 2^-s (s the largest with every row's
// |h_k| + span sum_j |J_kj| below 2^30) and fields are exact int32 sums: any order gives the same
// field, so a block's flips can be added in whatever order is fastest, 16 chains fit one AVX-512
// register, and a field row is half the bytes. Decisions: the draw's top 10 bits pick a cell of the
// library's DrawBrackets (argument bounds), turned into integer field bounds (one unit further
// out); they decide unless the field lies between them, and then the library's exact test
// AcceptanceTable::exact_heat_bath (x = beta span H 2^-s) decides.
//
// Build and run (AVX-512 machine; from the repository root, after the build of DEVELOPERS.md
// "Build", which makes build/dev/libspinfer_core.a):
//   g++ -O3 -march=native -std=c++17 -ffp-contract=off -I lib/include -I lib/src
//       benchmarks/experiments/fixed_point_groups.cpp build/dev/libspinfer_core.a
//       -o /tmp/fixed_point_groups   (one line)
//   /tmp/fixed_point_groups [sweeps] [draw16]
// It first checks 20 sweeps of the 16 chains against a plain one-chain-at-a-time reference on the
// same draws (64-bit draws; every field and value must agree), then prints JSON lines of updates
// per second for SK N = 200, T = 1 (the benchmark's dense model; couplings from std::mt19937_64,
// not the benchmark's numpy draws). "draw16" uses 16 bits of a 64-bit word per update (four
// updates per word, as the lattice kernels do; the exact test's other 37 bits would come from a
// per-chain tie stream), speed only.
// GCC 12's AVX-512 headers start some intrinsics from an "undefined" register and then warn that
// it may be used uninitialised (as in lib/src/sampler_groups.inc); it is fully overwritten.
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#include <immintrin.h>

#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <new>
#include <random>
#include <string>
#include <vector>

#include "draw_brackets.hpp"
#include "sampler_kernels.hpp"
#include "spinfer/rng.hpp"

namespace {

constexpr int kLanes = 16, kBlock = 16, kChunk = 64, kCells = spinfer::detail::DrawBrackets::kCells;
typedef std::uint64_t vu8 __attribute__((vector_size(64)));

template <class T>
T* zeros(std::size_t n) {
  T* p = static_cast<T*>(::operator new(n * sizeof(T), std::align_val_t(64)));
  std::memset(p, 0, n * sizeof(T));
  return p;
}

struct Group {
  int N = 0, NP = 0;             // units; row length rounded up to 16
  std::int32_t* H = nullptr;     // [lane][NP] fields, integer units of 2^-s
  std::int8_t* V = nullptr;      // [unit][lane] values -1 / +1
  std::int32_t* J = nullptr;     // [2 N][NP]: column k = span Jq[:, k], then the negated columns
  std::int32_t up[kCells], down[kCells];  // active at or above / inactive at or below
  double c = 0;                  // x = c H
  vu8 s[4][8][2];                // generators [word][generator][8 of the 16 lanes]
  std::uint64_t tie[kLanes][4];  // draw16: tie streams
  std::uint64_t* draws = nullptr;
  long flips = 0, exact = 0;
};

void draw_batch(Group& a, long words) {
  const long steps = (words + 7) / 8;
  for (int g = 0; g < 8; ++g)
    for (int h = 0; h < 2; ++h) {
      vu8 s0 = a.s[0][g][h], s1 = a.s[1][g][h], s2 = a.s[2][g][h], s3 = a.s[3][g][h];
      for (long t = 0; t < steps; ++t) {
        vu8 r;
        spinfer::xoshiro256ss_step(s0, s1, s2, s3, r);
        std::memcpy(a.draws + (8 * t + g) * kLanes + 8 * h, &r, 64);
      }
      a.s[0][g][h] = s0, a.s[1][g][h] = s1, a.s[2][g][h] = s2, a.s[3][g][h] = s3;
    }
}

// One heat-bath sweep of all 16 chains in unit order. `given`: draws of the sweep ([unit][lane],
// 64-bit mode only) instead of the generators.
template <bool kDraw16>
void sweep(Group& a, const std::uint64_t* given) {
  const int N = a.N, NP = a.NP;
  const __m512i lane_id = _mm512_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15);
  const __m512i row_at = _mm512_mullo_epi32(lane_id, _mm512_set1_epi32(NP));
  __m512i P[kBlock];
  alignas(64) std::int32_t up_lane[kBlock * kLanes + 16], up_col[kBlock * kLanes + 16];
  alignas(64) std::int32_t down_lane[kBlock * kLanes + 16], down_col[kBlock * kLanes + 16];
  for (int first = 0; first < N; first += kChunk) {
    const int last = first + kChunk < N ? first + kChunk : N;
    const std::uint64_t* D = a.draws;
    if (given) D = given + long(first) * kLanes;
    else draw_batch(a, kDraw16 ? (last - first + 3) / 4 : last - first);
    for (int b0 = first; b0 < last; b0 += kBlock) {
      const int n = last - b0 < kBlock ? last - b0 : kBlock;
      for (int q = 0; q < n; ++q) P[q] = _mm512_i32gather_epi32(_mm512_add_epi32(row_at, _mm512_set1_epi32(b0 + q)), a.H, 4);
      int ups = 0, downs = 0;
      for (int q = 0; q < n; ++q) {
        const int pos = b0 + q - first;
        const std::uint64_t* d = D + long(kDraw16 ? pos >> 2 : pos) * kLanes;
        const int shift = kDraw16 ? 16 * (pos & 3) + 6 : 54;
        const __m512i d0 = _mm512_loadu_si512(d), d1 = _mm512_loadu_si512(d + 8);
        const __m512i cell = _mm512_and_si512(
            _mm512_inserti64x4(_mm512_castsi256_si512(_mm512_cvtepi64_epi32(_mm512_srli_epi64(d0, shift))),
                               _mm512_cvtepi64_epi32(_mm512_srli_epi64(d1, shift)), 1),
            _mm512_set1_epi32(kCells - 1));
        __mmask16 pass = _mm512_cmpge_epi32_mask(P[q], _mm512_i32gather_epi32(cell, a.up, 4));
        const __mmask16 fail = _mm512_cmple_epi32_mask(P[q], _mm512_i32gather_epi32(cell, a.down, 4));
        const __mmask16 open = _knot_mask16(_kor_mask16(pass, fail));
        if (__builtin_expect(open != 0, 0)) {
          alignas(64) std::int32_t h[kLanes];
          _mm512_store_si512(h, P[q]);
          for (unsigned u = open; u; u &= u - 1) {
            const int l = __builtin_ctz(u);
            ++a.exact;
            const std::uint64_t m = kDraw16 ? ((d[l] >> (16 * (pos & 3))) & 0xffff) << 37 | spinfer::detail::tie_bits(a.tie[l]) : d[l] >> 11;
            if (spinfer::detail::AcceptanceTable::exact_heat_bath(a.c * double(h[l]), m)) pass = __mmask16(pass | (1u << l));
          }
        }
        std::int8_t* v = a.V + long(b0 + q) * kLanes;
        const __m128i old = _mm_load_si128(reinterpret_cast<const __m128i*>(v));
        const __mmask16 was_up = _mm_cmpgt_epi8_mask(old, _mm_setzero_si128());
        const __mmask16 went_up = _kandn_mask16(was_up, pass), went_down = _kandn_mask16(pass, was_up);
        _mm_store_si128(reinterpret_cast<__m128i*>(v), _mm_mask_blend_epi8(pass, _mm_set1_epi8(-1), _mm_set1_epi8(1)));
        // The block's later fields see this flip now.
        const std::int32_t* column = a.J + long(b0 + q) * NP + b0;
        for (int p = q + 1; p < n; ++p) {
          const __m512i cp = _mm512_set1_epi32(column[p]);
          P[p] = _mm512_mask_sub_epi32(_mm512_mask_add_epi32(P[p], went_up, P[p], cp), went_down, P[p], cp);
        }
        // Flat lists of the block's flips (lane, column), one for each direction.
        _mm512_mask_compressstoreu_epi32(up_lane + ups, went_up, lane_id);
        _mm512_mask_compressstoreu_epi32(up_col + ups, went_up, _mm512_set1_epi32((b0 + q) * NP));
        ups += __builtin_popcount(went_up);
        _mm512_mask_compressstoreu_epi32(down_lane + downs, went_down, lane_id);
        _mm512_mask_compressstoreu_epi32(down_col + downs, went_down, _mm512_set1_epi32((N + b0 + q) * NP));
        downs += __builtin_popcount(went_down);
      }
      a.flips += ups + downs;
      // Every flip of the block added to its lane's whole field row: integer sums, any order.
      for (int e = 0; e < ups + downs; ++e) {
        const bool is_up = e < ups;
        std::int32_t* h = a.H + long(is_up ? up_lane[e] : down_lane[e - ups]) * NP;
        const std::int32_t* col = a.J + (is_up ? up_col[e] : down_col[e - ups]);
        for (int i = 0; i < NP; i += 16)
          _mm512_store_si512(h + i, _mm512_add_epi32(_mm512_load_si512(h + i), _mm512_load_si512(col + i)));
      }
    }
  }
}

// The same sweep for one lane, one unit at a time, straight from the definition.
void reference_sweep(const Group& a, std::int32_t* H, std::int8_t* v, const std::uint64_t* draws, int l) {
  for (int k = 0; k < a.N; ++k) {
    const std::int8_t next = spinfer::detail::AcceptanceTable::exact_heat_bath(a.c * double(H[k]), draws[long(k) * kLanes + l] >> 11) ? 1 : -1;
    if (next == v[k]) continue;
    const std::int32_t* col = a.J + long(next > 0 ? k : a.N + k) * a.NP;
    for (int i = 0; i < a.NP; ++i) H[i] += col[i];
    v[k] = next;
  }
}

}  // namespace

int main(int argc, char** argv) {
  const long sweeps = argc > 1 ? std::atol(argv[1]) : 20000;
  const bool draw16 = argc > 2 && std::string(argv[2]) == "draw16";
  const int N = 200;
  const double beta = 1.0, span = 2.0;
  std::mt19937_64 gen(0);
  std::normal_distribution<double> normal(0.0, 1.0 / std::sqrt(double(N)));
  std::vector<double> J(std::size_t(N) * N, 0.0);
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) J[std::size_t(i) * N + j] = J[std::size_t(j) * N + i] = normal(gen);
  double row = 0;
  for (int i = 0; i < N; ++i) {
    double s = 0;
    for (int j = 0; j < N; ++j) s += std::fabs(J[std::size_t(i) * N + j]);
    row = std::max(row, s);
  }
  int scale = 0;
  while (std::ldexp(row * span, scale + 1) <= std::ldexp(1.0, 30)) ++scale;

  Group a;
  a.N = N;
  a.NP = (N + 15) / 16 * 16;
  a.H = zeros<std::int32_t>(std::size_t(kLanes) * a.NP);
  a.V = zeros<std::int8_t>(std::size_t(N) * kLanes);
  a.J = zeros<std::int32_t>(2 * std::size_t(N) * a.NP);
  a.draws = zeros<std::uint64_t>(std::size_t(kChunk) * kLanes);
  std::vector<std::int32_t> Jq(std::size_t(N) * N);
  for (int k = 0; k < N; ++k)
    for (int i = 0; i < N; ++i) {
      Jq[std::size_t(k) * N + i] = std::int32_t(std::lround(std::ldexp(J[std::size_t(k) * N + i], scale)));
      a.J[std::size_t(k) * a.NP + i] = std::int32_t(span) * Jq[std::size_t(k) * N + i];
      a.J[std::size_t(N + k) * a.NP + i] = -a.J[std::size_t(k) * a.NP + i];
    }
  a.c = beta * span * std::ldexp(1.0, -scale);
  // Argument bounds x >= active / x <= inactive of each draw cell, as field bounds; a field in
  // between takes the exact test.
  const auto& brackets = spinfer::detail::draw_brackets().heat_bath;
  for (int cell = 0; cell < kCells; ++cell) {
    double active, inactive;
    spinfer::detail::unpack_bracket(brackets[std::size_t(cell)], &active, &inactive);
    a.up[cell] = std::isinf(active) ? INT32_MAX : std::int32_t(std::ceil(active / a.c)) + 1;
    a.down[cell] = std::isinf(inactive) ? INT32_MIN : std::int32_t(std::floor(inactive / a.c)) - 1;
  }
  spinfer::Rng rng(42);
  for (auto& word : a.s)
    for (auto& g : word)
      for (auto& half : g)
        for (int i = 0; i < 8; ++i) half[i] = rng.next();
  for (auto& t : a.tie)
    for (auto& w : t) w = rng.next();
  for (int k = 0; k < N; ++k)
    for (int l = 0; l < kLanes; ++l) a.V[std::size_t(k) * kLanes + l] = (rng.next() >> 63) ? 1 : -1;
  for (int l = 0; l < kLanes; ++l)
    for (int i = 0; i < N; ++i) {
      std::int64_t t = 0;
      for (int j = 0; j < N; ++j) t += std::int64_t(Jq[std::size_t(j) * N + i]) * a.V[std::size_t(j) * kLanes + l];
      a.H[std::size_t(l) * a.NP + i] = std::int32_t(std::int64_t(span / 2) * t);
    }

  // Check: 20 sweeps on given draws against the reference, every lane.
  const int S = 20;
  std::vector<std::uint64_t> given(std::size_t(S) * N * kLanes);
  for (auto& x : given) x = rng.next();
  std::vector<std::vector<std::int32_t>> rh(kLanes);
  std::vector<std::vector<std::int8_t>> rv(kLanes);
  for (int l = 0; l < kLanes; ++l) {
    rh[l].assign(a.H + std::size_t(l) * a.NP, a.H + std::size_t(l + 1) * a.NP);
    for (int k = 0; k < N; ++k) rv[l].push_back(a.V[std::size_t(k) * kLanes + l]);
  }
  for (int s = 0; s < S; ++s) {
    sweep<false>(a, given.data() + std::size_t(s) * N * kLanes);
    for (int l = 0; l < kLanes; ++l) reference_sweep(a, rh[l].data(), rv[l].data(), given.data() + std::size_t(s) * N * kLanes, l);
  }
  long mismatches = 0;
  for (int l = 0; l < kLanes; ++l) {
    for (int i = 0; i < a.NP; ++i) mismatches += rh[l][i] != a.H[std::size_t(l) * a.NP + i];
    for (int k = 0; k < N; ++k) mismatches += rv[l][k] != a.V[std::size_t(k) * kLanes + l];
  }
  std::printf("{\"check\": \"16 lanes vs one lane at a time, %d sweeps\", \"mismatches\": %ld, \"scale_bits\": %d}\n", S, mismatches, scale);
  if (mismatches) return 1;

  for (int rep = 0; rep < 3; ++rep) {
    a.flips = a.exact = 0;
    const auto t0 = std::chrono::steady_clock::now();
    for (long s = 0; s < sweeps; ++s) draw16 ? sweep<true>(a, nullptr) : sweep<false>(a, nullptr);
    const double sec = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double updates = double(sweeps) * N * kLanes;
    std::printf("{\"name\": \"dense N=200 integer fields, 16 chains, %s draws\", \"updates_per_second\": %.0f, "
                "\"flip_rate\": %.3f, \"exact_tests\": %.5f}\n",
                draw16 ? "16-bit" : "64-bit", updates / sec, a.flips / updates, a.exact / updates);
  }
}
