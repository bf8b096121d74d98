// The sampler's table-driven acceptance tests against the formulas they replace: every decision
// must equal the exact test (heat bath: u (1 + exp(-x)) < 1, the logistic probability; Metropolis:
// y <= 0 or u < exp(-y)), including draws a few steps of 2^-53 from the boundary and arguments
// beyond the table.
#include <doctest/doctest.h>

#include <cmath>
#include <cstdint>

#include "../../lib/src/sampler_kernels.hpp"
#include "spinfer/rng.hpp"

using namespace spinfer;
using namespace spinfer::detail;

namespace {

/// Draws m (u = m 2^-53) at and a few steps around p 2^53, and one uniformly drawn m.
template <typename Check>
void around(double p, Rng& rng, Check check) {
  const auto centre = std::int64_t(p * 0x1.0p53);
  for (std::int64_t m = centre - 4; m <= centre + 4; ++m)
    if (m >= 0 && m < (std::int64_t(1) << 53)) check(std::uint64_t(m));
  check(rng.next() >> 11);
}

}  // namespace

TEST_CASE("acceptance table: the same decisions as the exact heat-bath and Metropolis tests") {
  const AcceptanceTable& t = acceptance_table();
  Rng rng(5, 0);
  std::int64_t checked = 0, mismatches = 0;
  for (int i = 0; i < 100000; ++i) {
    // Arguments over the table and beyond it, plus exact cell edges (multiples of 1/16).
    const double x = i % 4 == 0 ? std::round((rng.uniform() * 60 - 30) * 16) / 16 : rng.uniform() * 60 - 30;
    around(1.0 / (1.0 + std::exp(-x)), rng, [&](std::uint64_t m) {
      ++checked;
      mismatches += t.heat_bath(x, m) != AcceptanceTable::exact_heat_bath(x, m);
    });
    // Metropolis arguments include y <= 0 (always accepted) and exact cell edges.
    const double y = i % 4 == 0 ? std::round(rng.uniform() * 50 * 16) / 16 : rng.uniform() * 52 - 2;
    around(std::exp(-y), rng, [&](std::uint64_t m) {
      ++checked;
      mismatches += t.metropolis(y, m) != AcceptanceTable::exact_metropolis(y, m);
    });
  }
  CHECK(checked > 1000000);
  CHECK(mismatches == 0);
}

TEST_CASE("acceptance table: thresholds of the uniform kernel equal the exact tests") {
  // m < threshold(x) iff the 53-bit uniform m 2^-53 passes the exact test.
  Rng rng(6, 0);
  for (int i = 0; i < 2000; ++i) {
    const double x = rng.uniform() * 16 - 8;
    const std::uint64_t T = heat_bath_threshold(x);
    REQUIRE(T > 0);
    CHECK(AcceptanceTable::exact_heat_bath(x, T - 1));
    CHECK(!AcceptanceTable::exact_heat_bath(x, T));
    const double y = rng.uniform() * 8 + 1e-3;
    const std::uint64_t M = metropolis_threshold(y);
    CHECK(AcceptanceTable::exact_metropolis(y, M - 1));
    CHECK(!AcceptanceTable::exact_metropolis(y, M));
  }
  CHECK(metropolis_threshold(-1.0) == (std::uint64_t(1) << 53));
}
