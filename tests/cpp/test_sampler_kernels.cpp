// The sampler's table-driven acceptance tests against the formulas they replace: every decision
// must equal the exact test (heat bath: u (1 + exp(-x)) < 1, the logistic probability; Metropolis:
// y <= 0 or u < exp(-y)), including draws a few steps of 2^-53 from the boundary and arguments
// beyond the table; and the uniform-coupling kernels' split draw (16 bits, then 37 more on a tie)
// against the direct 53-bit comparison m < T; and the dense lock-step kernel's draw-side brackets
// (DrawBrackets): an argument beyond a cell's bound must give the exact test's outcome for every
// draw of the cell; and the integer-field kernels' bounds on integer fields (IntegerBounds), which
// must decide as the exact test for every draw of a cell.
#include <doctest/doctest.h>

#include <algorithm>
#include <climits>
#include <cmath>
#include <cstdint>
#include <limits>
#include <vector>

#include <Eigen/Dense>

#include "../../lib/src/draw_brackets.hpp"
#include "../../lib/src/integer_fields.hpp"
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

TEST_CASE("uniform-coupling draw: 16 bits plus a tie draw decide exactly as the 53-bit comparison") {
  // Reference: the direct test m < T with m = d 2^37 + e (d: the update's 16 bits, e: the tie
  // draw's 37 bits). Thresholds at the edges of the split (0, multiples of 2^37 and their
  // neighbours, 2^53 - 1, 2^53) and random ones; draws d at, around and away from the high part;
  // and thresholds whose low part sits at, just above and just below the tie draw that comes.
  constexpr std::uint64_t two37 = std::uint64_t(1) << 37, two53 = std::uint64_t(1) << 53;
  Rng rng(11, 0);
  std::vector<std::uint64_t> T = {0, 1, two37 - 1, two37, two37 + 1, 5 * two37, two53 - two37,
                                  two53 - two37 + 1, two53 - 1, two53};
  for (int i = 0; i < 200; ++i) T.push_back(rng.next() >> 11);
  std::vector<std::uint32_t> high;
  std::vector<std::uint64_t> low;
  split_thresholds(T, &high, &low);
  std::uint64_t tie[4] = {rng.next(), rng.next(), rng.next(), rng.next()};
  std::int64_t ties = 0;
  auto check = [&](std::uint32_t d, std::uint64_t t, std::uint32_t h, std::uint64_t l) {
    std::uint64_t next[4] = {tie[0], tie[1], tie[2], tie[3]};
    const std::uint64_t e = tie_bits(next);  // the draw a tie would take
    REQUIRE(e < two37);
    const bool pass = uniform_pass(d, h, l, tie);
    CHECK(pass == (std::uint64_t(d) * two37 + e < t));
    // The tie stream advances exactly on a tie.
    const bool advanced = std::equal(tie, tie + 4, next);
    CHECK(advanced == (d == h));
    ties += d == h;
  };
  for (std::size_t k = 0; k < T.size(); ++k) {
    INFO("T = " << T[k]);
    CHECK(high[k] <= 0xffff);
    CHECK(low[k] <= two37);
    CHECK(std::uint64_t(high[k]) * two37 + low[k] == T[k]);
    for (std::int64_t d : {std::int64_t(high[k]) - 1, std::int64_t(high[k]), std::int64_t(high[k]) + 1,
                           std::int64_t(0), std::int64_t(0xffff), std::int64_t(rng.next() >> 48)})
      if (d >= 0 && d <= 0xffff) check(std::uint32_t(d), T[k], high[k], low[k]);
  }
  // Ties against a low part at the coming draw e and beside it.
  for (int i = 0; i < 200; ++i) {
    std::uint64_t next[4] = {tie[0], tie[1], tie[2], tie[3]};
    const std::uint64_t e = tie_bits(next);
    const auto h = std::uint32_t(rng.next() >> 48) & 0x7fff;
    for (std::uint64_t l : {e, e + 1, e > 0 ? e - 1 : 0}) {
      const std::uint64_t t = std::uint64_t(h) * two37 + l;
      std::vector<std::uint32_t> hh;
      std::vector<std::uint64_t> ll;
      split_thresholds({t}, &hh, &ll);
      REQUIRE(hh[0] == h);
      check(h, t, hh[0], ll[0]);
    }
  }
  // T = 2^53: every draw passes, the tie (d = 2^16 - 1) included.
  check(0xffff, two53, 0xffff, two37);
  CHECK(ties > 600);
}

TEST_CASE("draw brackets: an argument beyond a cell's bound decides as the exact test, for any draw of the cell") {
  const DrawBrackets& b = draw_brackets();
  REQUIRE(std::int64_t(b.heat_bath.size()) == DrawBrackets::kCells);
  REQUIRE(std::int64_t(b.metropolis.size()) == DrawBrackets::kCells);
  constexpr int cell_bits = 53 - DrawBrackets::kBits;  // cell of the 53-bit draw m: m >> cell_bits
  Rng rng(8, 0);
  std::int64_t checked = 0;
  for (std::int64_t c = 0; c < DrawBrackets::kCells; ++c) {
    const std::uint64_t first = std::uint64_t(c) << cell_bits, last = first + (std::uint64_t(1) << cell_bits) - 1;
    // The cell's extreme draws (where each bound is tight) and random ones.
    std::vector<std::uint64_t> draws = {first, first + 1, last - 1, last};
    for (int i = 0; i < 4; ++i) draws.push_back(first + (rng.next() >> (64 - cell_bits)));
    double active, inactive, accept, reject;
    unpack_bracket(b.heat_bath[std::size_t(c)], &active, &inactive);
    unpack_bracket(b.metropolis[std::size_t(c)], &accept, &reject);
    CHECK(inactive < active);
    CHECK(accept < reject);
    for (std::uint64_t m : draws) {
      CHECK((m >> cell_bits) == std::uint64_t(c));
      for (double step : {0.0, 1e-12, 1e-3, 1.0}) {
        if (std::isfinite(active)) {
          const double x = step == 0.0 ? active : active + step * (1 + std::abs(active));
          CHECK(AcceptanceTable::exact_heat_bath(x, m));
          ++checked;
        }
        if (std::isfinite(inactive)) {
          const double x = step == 0.0 ? inactive : inactive - step * (1 + std::abs(inactive));
          CHECK(!AcceptanceTable::exact_heat_bath(x, m));
          ++checked;
        }
        const double ya = step == 0.0 ? accept : accept - step * (1 + std::abs(accept));
        CHECK(AcceptanceTable::exact_metropolis(ya, m));
        if (std::isfinite(reject)) {
          const double yr = step == 0.0 ? reject : reject + step * (1 + std::abs(reject));
          CHECK(!AcceptanceTable::exact_metropolis(yr, m));
          ++checked;
        }
      }
    }
  }
  CHECK(checked > 90000);
  // Undecided pairs (argument between the bounds) take the exact test; they must be rare for the
  // brackets to be worth having (1024 cells: widths about 4/1024 in x near u = 1/2). The 1% is our
  // own cost bound, not an accuracy claim: every decision is exact whatever this fraction.
  std::int64_t undecided = 0;
  const std::int64_t pairs = 200000;
  for (std::int64_t i = 0; i < pairs; ++i) {
    const std::uint64_t m = rng.next() >> 11;
    const double x = rng.uniform() * 12 - 6;
    double active, inactive;
    unpack_bracket(b.heat_bath[std::size_t(m >> cell_bits)], &active, &inactive);
    undecided += !(x >= active || x <= inactive);
  }
  CHECK(double(undecided) / double(pairs) < 0.01);
}

TEST_CASE("integer fields: integer bounds decide as the exact test, and the 16-bit draw with its tie stream is the 53-bit test") {
  // IntegerBounds turn the draw brackets into bounds on an integer field w (argument c w,
  // c = beta span 2^-s): w >= pass[cell] must give the exact test's "pass" and w <= fail[cell]
  // its "fail" for every 53-bit draw m of the cell (checked at the cell's extreme draws, where
  // the exact test, monotone in m, is tightest), for several scales and temperatures, heat bath
  // and Metropolis. integer_decide must equal the exact test on m = d 2^37 + e, e the top 37 bits
  // of the tie stream's next output, stepping the tie stream exactly when the bounds do not decide.
  constexpr int cell_bits = 53 - DrawBrackets::kBits;
  Rng rng(21, 0);
  for (const int scale : {20, 25, 33})
    for (const double beta : {0.05, 1.0, 7.5})
      for (const std::int32_t lo : {-1, 0})
        for (const bool gibbs : {true, false}) {
          INFO("scale " << scale << ", beta " << beta << ", lo " << lo << (gibbs ? ", heat bath" : ", Metropolis"));
          IntegerModel m;
          m.scale = scale;
          m.lo = lo;
          m.hi = 1;
          const IntegerBounds b = integer_bounds(m, beta, gibbs);
          CHECK(b.c == std::ldexp(beta * double(1 - lo), -scale));
          auto exact = [&](std::int32_t w, std::uint64_t draw) {
            const double x = b.c * double(w);
            return gibbs ? AcceptanceTable::exact_heat_bath(x, draw) : AcceptanceTable::exact_metropolis(-x, draw);
          };
          for (std::int64_t c = 0; c < DrawBrackets::kCells; ++c) {
            const std::uint64_t first = std::uint64_t(c) << cell_bits, last = first + (std::uint64_t(1) << cell_bits) - 1;
            // Bounds beyond the int32 range are clamped to it (no field comes near: |w| < 2^30).
            CHECK((b.fail[c] < b.pass[c] || b.pass[c] == INT32_MIN || b.fail[c] == INT32_MAX));
            for (const std::uint64_t draw : {first, last}) {
              if (b.pass[c] < INT32_MAX) CHECK(exact(b.pass[c], draw));
              if (b.fail[c] > INT32_MIN) CHECK(!exact(b.fail[c], draw));
            }
          }
          // Random fields and 16-bit draws against the 53-bit test, tie stream in step.
          std::uint64_t tie[4] = {rng.next(), rng.next(), rng.next(), rng.next()}, shadow[4];
          std::copy(tie, tie + 4, shadow);
          const double reach = 12.0 / b.c;  // |x| up to 12
          std::int64_t ties = 0;
          for (int i = 0; i < 20000; ++i) {
            const auto w = std::int32_t(std::clamp((rng.uniform() * 2 - 1) * reach, -1e9, 1e9));
            const auto d = std::uint32_t(rng.next() >> 48);
            const std::uint32_t cell = d >> (16 - DrawBrackets::kBits);
            const bool bounded = w >= b.pass[cell] || w <= b.fail[cell];
            const bool got = integer_decide(b, w, d, tie);
            const std::uint64_t e = bounded ? 0 : tie_bits(shadow);
            if (!bounded) {
              ++ties;
              CHECK(got == exact(w, std::uint64_t(d) << 37 | e));
            } else {
              // Decided by the bounds: the exact test agrees for every e.
              CHECK(got == exact(w, std::uint64_t(d) << 37));
              CHECK(got == exact(w, std::uint64_t(d) << 37 | ((std::uint64_t(1) << 37) - 1)));
            }
            CHECK(std::equal(tie, tie + 4, shadow));
          }
          CHECK(ties > 0);
          CHECK(ties < 20000 / 50);  // our cost bound: the exact test stays rare
        }
}

TEST_CASE("integer fields: the rounded model, its layout, exact fields and energies, and the fallback") {
  const int N = 37;
  Rng rng(5, 0);
  Eigen::VectorXd h(N);
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) h(i) = 3 * rng.uniform() - 1.5;
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) J(i, j) = J(j, i) = 0.4 * (2 * rng.uniform() - 1);
  std::vector<std::int32_t> order(N);
  for (int p = 0; p < N; ++p) order[std::size_t(p)] = std::int32_t((p * 7) % N);  // a permutation (gcd(7, 37) = 1)
  for (const std::int32_t lo : {-1, 0}) {
    const auto m = quantise(h, J.data(), N, lo, 1, order);
    REQUIRE(m.has_value());
    // s: the largest (<= 40) with 2^s max_i (|h_i| + sum_j |J_ij|) <= 2^30 - (N + 1).
    const double widest = (h.cwiseAbs() + J.cwiseAbs().rowwise().sum()).maxCoeff();
    CHECK(std::ldexp(widest, m->scale) <= std::ldexp(1.0, 30) - (N + 1));
    CHECK(std::ldexp(widest, m->scale + 1) > std::ldexp(1.0, 30) - (N + 1));
    CHECK(m->NP == 48);
    const double r = m->resolution();
    const std::int32_t span = 1 - lo;
    for (int p = 0; p < N; ++p) {
      const int k = order[std::size_t(p)];
      CHECK(m->unit[std::size_t(p)] == k);
      CHECK(std::abs(m->fields[std::size_t(p)] * r - h(k)) <= r / 2);
      for (int q = 0; q < N; ++q) {
        const std::int32_t x = m->columns[std::size_t(p * m->NP + q)];
        CHECK(x % span == 0);
        CHECK(std::abs(x / span * r - J(order[std::size_t(q)], k)) <= r / 2);
        CHECK(m->columns[std::size_t((N + p) * m->NP + q)] == -x);
      }
      for (std::int64_t q = N; q < m->NP; ++q) CHECK(m->columns[std::size_t(p * m->NP + q)] == 0);
    }
    // Fields and energy of a state against the rounded model in doubles (exact here: every
    // product and partial sum is a multiple of 2^-s far below 2^53 units).
    std::vector<double> v(N);
    for (auto& x : v) x = (rng.next() >> 63) ? 1.0 : double(lo);
    AlignedVector<std::int32_t> H(std::size_t(m->NP), 7);
    std::int64_t E2 = 0;
    integer_fields(*m, v.data(), H.data(), &E2);
    double E = 0;
    for (int p = 0; p < N; ++p) {
      const int k = order[std::size_t(p)];
      double field = m->fields[std::size_t(p)] * r;
      for (int q = 0; q < N; ++q) field += m->columns[std::size_t(q * m->NP + p)] / span * r * v[std::size_t(order[std::size_t(q)])];
      CHECK(H[std::size_t(p)] * r == field);
      E -= 0.5 * v[std::size_t(k)] * (field + m->fields[std::size_t(p)] * r);
    }
    for (std::int64_t p = N; p < m->NP; ++p) CHECK(H[std::size_t(p)] == 0);
    CHECK(m->energy(E2) == doctest::Approx(E).epsilon(1e-14));
  }
  // Row sums beyond 2^10 would need a resolution coarser than 2^-20: no integer fields.
  J(0, 1) = J(1, 0) = 1500.0;
  CHECK(!quantise(h, J.data(), N, -1, 1, {}).has_value());
  J(0, 1) = J(1, 0) = std::numeric_limits<double>::infinity();
  CHECK(!quantise(h, J.data(), N, -1, 1, {}).has_value());
}
