// Order-free sums (lib/src/order_free_sum.hpp). Reference: the exact sum, formed in 128-bit
// integers from addends that are integer multiples of 2^-60 (so every addend and the sum are
// exactly representable there).
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <limits>
#include <random>
#include <vector>

#include "../../lib/src/order_free_sum.hpp"

using namespace spinfer::detail;

namespace {

// Sums `x` in the order `order`, cut into `parts` groups whose level sums are then added.
double grouped_sum(const std::vector<double>& x, const std::vector<std::size_t>& order, int parts,
                   const SplitGrid& g) {
  double total[3] = {0, 0, 0};
  const std::size_t n = x.size();
  for (int p = 0; p < parts; ++p) {
    double s0 = 0, s1 = 0, s2 = 0;
    for (std::size_t k = n * std::size_t(p) / std::size_t(parts); k < n * std::size_t(p + 1) / std::size_t(parts); ++k)
      split_add(g, &x[order[k]], &s0, &s1, &s2, 1);
    total[0] += s0;
    total[1] += s1;
    total[2] += s2;
  }
  return split_value(total[0], total[1], total[2]);
}

}  // namespace

TEST_CASE("order-free sums: the same bits for any order and grouping, within two ulps of exact") {
  std::mt19937_64 rng(12);
  for (int trial = 0; trial < 20; ++trial) {
    const std::size_t n = 1 + rng() % 3000;
    std::vector<double> x(n);
    __extension__ __int128 exact = 0;
    double bound = 0;
    for (auto& v : x) {
      // |m| < 2^50 shifted by 0..49 bits: magnitudes from 2^-60 to 2^-10, both signs (cancellation).
      const std::int64_t m = std::int64_t(rng() >> 14) >> (rng() % 50);
      const std::int64_t signed_m = (rng() & 1) ? m : -m;
      v = std::ldexp(double(signed_m), -60);  // exact: |m| < 2^53
      exact += signed_m;
      bound = std::max(bound, std::abs(v));
    }
    const double reference = std::ldexp(double(exact), -60);  // exact to one rounding
    const SplitGrid g = SplitGrid::for_bound(bound, std::int64_t(n));
    REQUIRE(g.ok);
    std::vector<std::size_t> order(n);
    for (std::size_t k = 0; k < n; ++k) order[k] = k;
    const double first = grouped_sum(x, order, 1, g);
    const double ulp = std::nextafter(std::abs(reference), std::numeric_limits<double>::infinity()) - std::abs(reference);
    // The level sums are exact (Demmel & Nguyen 2015, see order_free_sum.hpp); what remains is
    // the rounding of the reference (half an ulp) and split_value's two additions of levels.
    CHECK(std::abs(first - reference) <= 2 * ulp);
    for (int parts : {2, 3, 7, 64}) {
      std::shuffle(order.begin(), order.end(), rng);
      CHECK(grouped_sum(x, order, parts, g) == first);
    }
  }
  CHECK_FALSE(SplitGrid::for_bound(std::numeric_limits<double>::infinity(), 10).ok);
  CHECK_FALSE(SplitGrid::for_bound(0x1p1020, 10).ok);
}
