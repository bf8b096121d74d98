// Private: sums whose value does not depend on the order or grouping of the addends, so a sum
// split over threads or MPI ranks gives the same bits as one pass over everything.
//
// Method: pre-rounding (Demmel & Nguyen, "Parallel reproducible summation", IEEE Trans. Computers
// 64(7):2060-2070, 2015; the extraction step is Rump, Ogita & Oishi, "Accurate floating-point
// summation part I", SIAM J. Sci. Comput. 31(1), 2008). Given a bound M >= |addend| and at most n
// addends, every addend x is split exactly into three parts on fixed power-of-two grids
//   g1 = 2^(E + L - 52), g2 = g1 2^(L - 53), g3 = g2 2^(L - 53),   E = ceil(log2 M),
//   L = ceil(log2 n) + 2,
// q_k = round(r_{k-1} / g_k) g_k, computed exactly as (r + c_k) - c_k with c_k = 1.5 2^52 g_k,
// r_k = r_{k-1} - q_k (exact). Each level's parts are multiples of g_k whose sums stay below
// 2^53 g_k, so the level sums are exact in any order; the value is (S1 + S2) + S3, the same
// however the addends were grouped. What is dropped (|r_3| <= g3 / 2 per addend) is dropped the
// same way everywhere; with n = 2^20 addends the result keeps about 2^-90 M absolute accuracy.
//
// This file must not be compiled with -ffast-math (which would fold (r + c) - c into r).
#pragma once

#include <cmath>
#include <cstdint>

namespace spinfer::detail {

/// The three extraction constants for one bound; ok = false when the bound is not finite or too
/// large for the grids (then the sums are not meaningful and the caller reports non-finite).
struct SplitGrid {
  double c[3] = {0, 0, 0};
  bool ok = false;

  static SplitGrid for_bound(double bound, std::int64_t addends) {
    SplitGrid g;
    if (!(bound > 0) || !std::isfinite(bound)) return g;
    int L = 2;
    while ((std::int64_t(1) << (L - 2)) < addends && L < 62) ++L;
    const int E = std::ilogb(bound) + 1;  // 2^E > bound
    if (E + L > 1000 || E < -900) return g;  // keep c_k and g_3 normal numbers
    for (int k = 0; k < 3; ++k) g.c[k] = 1.5 * std::ldexp(1.0, E + (k + 1) * L - 53 * k);
    g.ok = true;
    return g;
  }
};

/// Adds x[0..n) into the level sums s0, s1, s2 (each n long), all with grid g.
inline void split_add(const SplitGrid& g, const double* x, double* s0, double* s1, double* s2,
                      std::int64_t n) {
  const double c0 = g.c[0], c1 = g.c[1], c2 = g.c[2];
  for (std::int64_t e = 0; e < n; ++e) {
    double r = x[e];
    const double q0 = (r + c0) - c0;
    r -= q0;
    const double q1 = (r + c1) - c1;
    r -= q1;
    s0[e] += q0;
    s1[e] += q1;
    s2[e] += (r + c2) - c2;
  }
}

/// The value of one element's level sums.
inline double split_value(double s0, double s1, double s2) { return (s0 + s1) + s2; }

}  // namespace spinfer::detail
