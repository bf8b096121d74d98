// SpinMatrix, value conversion, constant units, unique patterns and moments on small
// hand-checkable data. (Moments against numpy on random data live in tests/python/test_stats.py.)
#include <doctest/doctest.h>

#include "spinfer/errors.hpp"
#include "spinfer/patterns.hpp"
#include "spinfer/stats.hpp"
#include "spinfer/values.hpp"

using namespace spinfer;

TEST_CASE("values: convention is detected from the values and errors name row and column") {
  const double binary[] = {0, 1, 1, 0, 1, 1};
  CHECK(values_to_matrix(binary, 2, 3, 3, 1, std::nullopt, "x").convention() == Convention::binary);
  const int spin[] = {-1, 1, 1, -1, 1, 1};
  SpinMatrix s = values_to_matrix(spin, 2, 3, 3, 1, std::nullopt, "x");
  CHECK(s.convention() == Convention::spin);
  CHECK(s.value(0, 0) == -1.0);
  CHECK(s.active(1, 1));
  const double bad[] = {0, 1, 2, 0, 1, 1};
  CHECK_THROWS_WITH_AS(values_to_matrix(bad, 2, 3, 3, 1, std::nullopt, "f.csv"),
                       "f.csv: row 1, column 3: value 2 is not binary; expected 0/1 or -1/+1",
                       InputError);
  const double nan[] = {0, 1, 1, 0, std::numeric_limits<double>::quiet_NaN(), 1};
  CHECK_THROWS_AS(values_to_matrix(nan, 2, 3, 3, 1, std::nullopt, "f"), InputError);
  const int mixed[] = {0, 1, -1, 0, 1, 1};
  CHECK_THROWS_AS(values_to_matrix(mixed, 2, 3, 3, 1, std::nullopt, "f"), InputError);
  CHECK_THROWS_AS(values_to_matrix(spin, 2, 3, 3, 1, Convention::binary, "f"), InputError);
  // Fortran order: element (t, i) at t + i * rows.
  const double fortran[] = {0, 1, 1, 0, 1, 1};  // column-major 2 x 3: rows (0,1,1), (1,0,1)
  SpinMatrix f = values_to_matrix(fortran, 2, 3, 1, 2, std::nullopt, "f");
  CHECK(!f.active(0, 0));
  CHECK(f.active(0, 1));
  CHECK(f.active(1, 0));
  CHECK(!f.active(1, 1));
}

TEST_CASE("constant units are found and reported by name") {
  std::vector<std::uint8_t> b = {0, 1, 1, 0, 0, 1, 1, 1, 0, 0, 1, 1};
  SpinMatrix m(b, 3, 4, Convention::binary);  // col 1 never, col 3 always, col 0/2 vary
  m.set_names({"a", "b", "c", "d"});
  ConstantUnits c = find_constant_units(m);
  // rows are (0,1,1,0), (0,1,1,1), (0,0,1,1): a never active, c always active
  REQUIRE(c.never_active.size() == 1);
  CHECK(c.describe(m) == "units never active: a; units always active: c");
  CHECK_THROWS_AS(require_no_constant_units(m, "rec.npy"), InputError);
  SpinMatrix d = drop_constant_units(m);
  CHECK(d.cols() == 2);
  CHECK(d.names() == std::vector<std::string>{"b", "d"});
}

TEST_CASE("duplicate names are rejected") {
  SpinMatrix m(std::vector<std::uint8_t>{0, 1, 1, 0}, 2, 2, Convention::binary);
  CHECK_THROWS_WITH_AS(m.set_names({"x", "x"}), "names: column 2: duplicate column name 'x'",
                       InputError);
}

TEST_CASE("unique patterns count repeated rows") {
  std::vector<std::uint8_t> b = {0, 0, 1, 0, 0, 0, 1, 0, 0, 0, 0, 1};
  SpinMatrix m(b, 4, 3, Convention::binary);  // rows: 001, 000, 100, 001
  PatternTable t = unique_patterns(m, true);
  CHECK(t.patterns.rows() == 3);
  CHECK(t.patterns.weights() == std::vector<double>{2, 1, 1});
  CHECK(t.row_to_pattern == std::vector<std::int64_t>{0, 1, 2, 0});
  // Moments of the compressed table equal those of the original.
  Moments a = compute_moments(m), c = compute_moments(t.patterns);
  CHECK((a.second - c.second).cwiseAbs().maxCoeff() < 1e-15);
}

TEST_CASE("moments: sparse and dense kernels agree exactly; spin conversion is exact") {
  // 300 x 70 pseudo-random bits, density ~0.3 (deterministic LCG).
  std::vector<std::uint8_t> b(300 * 70);
  std::uint64_t x = 12345;
  for (auto& v : b) {
    x = x * 6364136223846793005ULL + 1442695040888963407ULL;
    v = (x >> 33) % 10 < 3;
  }
  SpinMatrix m(b, 300, 70, Convention::binary);
  StatsOptions sp, de;
  sp.kernel = PairKernel::sparse;
  de.kernel = PairKernel::dense;
  de.threads = 2;
  Moments a = compute_moments(m, Convention::binary, sp), c = compute_moments(m, Convention::binary, de);
  CHECK(a.second == c.second);  // integer counts: bit-identical
  // Direct spin-valued computation for one pair.
  Moments s = compute_moments(m, Convention::spin, sp);
  double sij = 0, si = 0;
  for (int t = 0; t < 300; ++t) {
    sij += m.value(t, 3) * 2 - 1 == 0 ? 0 : (2.0 * m.active(t, 3) - 1) * (2.0 * m.active(t, 5) - 1);
    si += 2.0 * m.active(t, 3) - 1;
  }
  CHECK(s.second(3, 5) == doctest::Approx(sij / 300).epsilon(1e-14));
  CHECK(s.mean(3) == doctest::Approx(si / 300).epsilon(1e-14));
  CHECK((s.connected - 4.0 * a.connected).cwiseAbs().maxCoeff() < 1e-14);
  // Weighted: doubling a row equals weight 2.
  std::vector<double> w(300, 1.0);
  w[7] = 2.0;
  SpinMatrix mw = m;
  mw.set_weights(w);
  std::vector<std::int64_t> idx(300);
  for (int t = 0; t < 300; ++t) idx[t] = t;
  idx.push_back(7);
  Moments dw = compute_moments(mw), dd = compute_moments(m.take_rows(idx));
  CHECK((dw.connected - dd.connected).cwiseAbs().maxCoeff() < 1e-14);
  // P(K) sums to one.
  CHECK(active_count_distribution(m).sum() == doctest::Approx(1.0));
}
