// ln Z, likelihood, entropy and multi-information against exact enumeration (exact.hpp, itself
// checked against a brute-force sum in test_exact.cpp), closed forms written here (independent
// units: ln Z = sum ln(e^{h lo} + e^{h}); polynomial integrals for the Gauss-Legendre rule) and
// hand-computed pattern entropies. Statistical checks are |estimate - exact| <= 4 standard errors
// with fixed seeds (deterministic), and the standard errors themselves are bounded.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <vector>

#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/partition.hpp"
#include "spinfer/rng.hpp"

using namespace spinfer;

namespace {

/// A random fully connected model: h ~ U(-0.5, 0.5), J_ij ~ U(-s, s) with s = scale / sqrt(N).
IsingModel random_model(int N, Convention c, std::uint64_t seed, double scale = 1.5) {
  Rng rng(seed, 0);
  IsingModel m;
  m.convention = c;
  m.fields = Eigen::VectorXd(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  const double s = scale / std::sqrt(double(N));
  for (int i = 0; i < N; ++i) m.fields(i) = rng.uniform() - 0.5;
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = s * (2 * rng.uniform() - 1);
  if (c == Convention::binary) {  // binary couplings are 4x the spin ones for the same strength
    m.couplings *= 4;
    m.fields *= 2;
  }
  return m;
}

/// T rows drawn exactly from the model's enumerated distribution (inverse CDF).
SpinMatrix exact_draws(const IsingModel& m, std::int64_t T, std::uint64_t seed) {
  const Eigen::VectorXd p = exact_state_probabilities(m);
  std::vector<double> cdf(std::size_t(p.size()));
  double acc = 0;
  for (Eigen::Index k = 0; k < p.size(); ++k) cdf[std::size_t(k)] = acc += p(k);
  const std::int64_t N = m.size();
  std::vector<std::uint8_t> bits(std::size_t(T * N));
  Rng rng(seed, 1);
  for (std::int64_t t = 0; t < T; ++t) {
    const double u = rng.uniform() * acc;
    const auto k = std::int64_t(std::upper_bound(cdf.begin(), cdf.end(), u) - cdf.begin());
    for (std::int64_t i = 0; i < N; ++i) bits[std::size_t(t * N + i)] = std::uint8_t((k >> i) & 1);
  }
  return SpinMatrix(std::move(bits), T, N, m.convention);
}

}  // namespace

TEST_CASE("gauss_legendre_unit integrates polynomials of degree 2n-1 exactly") {
  for (std::int64_t n : {1, 2, 5, 16, 40}) {
    std::vector<double> x, w;
    gauss_legendre_unit(n, &x, &w);
    REQUIRE(x.size() == std::size_t(n));
    for (std::size_t i = 1; i < x.size(); ++i) CHECK(x[i] > x[i - 1]);
    for (std::int64_t k = 0; k < 2 * n; ++k) {
      double s = 0;
      for (std::size_t i = 0; i < x.size(); ++i) s += w[i] * std::pow(x[i], double(k));
      CHECK(s == doctest::Approx(1.0 / double(k + 1)).epsilon(1e-12));  // int_0^1 x^k dx
    }
  }
}

TEST_CASE("independent model: AIS and TI are exact; ln Z0 closed form") {
  for (Convention c : {Convention::spin, Convention::binary}) {
    IsingModel m = random_model(30, c, 5);
    m.couplings.setZero();
    // Closed form: product of independent two-state sums.
    double expect = 0;
    for (int i = 0; i < 30; ++i)
      expect += c == Convention::spin ? std::log(2 * std::cosh(m.fields(i))) : std::log1p(std::exp(m.fields(i)));
    PartitionOptions o;
    o.method = "ais";
    o.ais_steps = 10;
    const auto a = estimate_log_partition(m, o);
    CHECK(a.value == doctest::Approx(expect).epsilon(1e-13));
    CHECK(a.error == 0.0);
    CHECK(a.effective_runs == doctest::Approx(double(o.ais_runs)));
    o.method = "thermodynamic";
    o.ti_nodes = 3;
    o.samples = 400;
    const auto t = estimate_log_partition(m, o);
    CHECK(t.value == doctest::Approx(expect).epsilon(1e-13));
  }
}

TEST_CASE("AIS and thermodynamic integration agree with enumeration for N = 12..16") {
  int case_index = 0;
  for (int N : {12, 14, 16}) {
    for (Convention c : {Convention::spin, Convention::binary}) {
      for (const char* base : {"fields", "mean-field"}) {
        const IsingModel m = random_model(N, c, std::uint64_t(100 + case_index++));
        const double exact = exact_log_partition(m);
        PartitionOptions o;
        o.base = base;
        o.seed = 7;
        o.method = "ais";
        o.ais_runs = 64;
        o.ais_steps = 400;
        const auto a = estimate_log_partition(m, o);
        INFO("N=" << N << " " << to_string(c) << " base=" << base << " exact=" << exact);
        CHECK(a.method == "ais");
        CHECK(a.lower_bound);
        CHECK(a.error > 0);
        CHECK(a.error < 0.05);
        CHECK(std::abs(a.value - exact) <= 4 * a.error);
        CHECK(a.bootstrap_error == doctest::Approx(a.error).epsilon(0.5));
        CHECK(a.effective_runs > 0.5 * double(o.ais_runs));
        o.method = "thermodynamic";
        o.ti_nodes = 12;
        o.samples = 2000;
        const auto t = estimate_log_partition(m, o);
        CHECK(t.node_mean.size() == 12);
        CHECK(t.error > 0);
        CHECK(t.error < 0.05);
        CHECK(std::abs(t.value - exact) <= 4 * t.error);
      }
    }
  }
}

TEST_CASE("estimates are identical for every thread count; auto picks exact for small N") {
  const IsingModel m = random_model(22, Convention::spin, 3);
  PartitionOptions o;
  o.method = "ais";
  o.ais_runs = 16;
  o.ais_steps = 50;
  o.seed = 11;
  o.threads = 1;
  const auto a1 = estimate_log_partition(m, o);
  o.threads = 2;
  const auto a2 = estimate_log_partition(m, o);
  CHECK(a1.log_weights == a2.log_weights);
  CHECK(a1.value == a2.value);
  CHECK(a1.bootstrap_error == a2.bootstrap_error);
  o.method = "thermodynamic";
  o.ti_nodes = 3;
  o.samples = 200;
  o.threads = 1;
  const auto t1 = estimate_log_partition(m, o);
  o.threads = 2;
  const auto t2 = estimate_log_partition(m, o);
  CHECK(t1.value == t2.value);
  CHECK(t1.node_mean == t2.node_mean);

  o.method = "auto";
  CHECK(estimate_log_partition(m, o).method == "ais");  // 22 > exact_max_units
  o.exact_max_units = 22;
  const auto e = estimate_log_partition(m, o);
  CHECK(e.method == "exact");
  CHECK(e.value == exact_log_partition(m));
}

TEST_CASE("log-likelihood per sample matches exact_log_likelihood") {
  const IsingModel m = random_model(14, Convention::binary, 21);
  const SpinMatrix data = exact_draws(m, 3000, 4);
  const double exact = exact_log_likelihood(m, data);
  PartitionOptions o;
  o.method = "exact";
  const auto e = log_likelihood_per_sample(m, data, o);
  CHECK(e.value == doctest::Approx(exact).epsilon(1e-11));
  CHECK(e.error == 0.0);
  CHECK(e.total_weight == 3000.0);
  o.method = "ais";
  o.ais_steps = 400;
  const auto a = log_likelihood_per_sample(m, data, o);
  CHECK(a.mean_energy == e.mean_energy);
  CHECK(a.error > 0);
  CHECK(std::abs(a.value - exact) <= 4 * a.error);
  // Weighted data: the same weighted mean as exact.hpp.
  SpinMatrix wdata = data.slice_rows(0, 500);
  std::vector<double> w(500);
  for (std::size_t t = 0; t < w.size(); ++t) w[t] = 0.5 + double(t % 7);
  wdata.set_weights(w);
  o.method = "exact";
  CHECK(log_likelihood_per_sample(m, wdata, o).value ==
        doctest::Approx(exact_log_likelihood(m, wdata)).epsilon(1e-11));
  CHECK_THROWS_AS(log_likelihood_per_sample(random_model(13, Convention::binary, 1), data, o), InputError);
}

TEST_CASE("model entropy matches the exact entropy") {
  for (Convention c : {Convention::spin, Convention::binary}) {
    const IsingModel m = random_model(15, c, 31);
    ExactOptions eo;
    eo.convention = c;
    const ExactStatistics st = exact_statistics(m, eo);
    PartitionOptions o;
    const auto e = model_entropy(m, o);  // auto: exact
    CHECK(e.value == doctest::Approx(st.entropy).epsilon(1e-11));
    CHECK(e.error == 0.0);
    for (const char* method : {"ais", "thermodynamic"}) {
      o.method = method;
      o.ais_steps = 400;
      o.samples = 4000;
      o.ti_nodes = 10;
      const auto s = model_entropy(m, o);
      INFO(method << " " << to_string(c));
      CHECK(s.error > 0);
      CHECK(s.error < 0.1);
      CHECK(std::abs(s.value - st.entropy) <= 4 * s.error);
      CHECK(std::abs(s.mean_energy - st.mean_energy) <= 4 * s.mean_energy_error);
    }
  }
}

TEST_CASE("independent and pattern entropies against hand computation") {
  // H2 closed form: p = 0.5 -> ln 2; p = 0 or 1 -> 0; spin means map through p = (1 + m) / 2.
  Eigen::VectorXd p(3);
  p << 0.5, 0.0, 0.25;
  const double h25 = -0.25 * std::log(0.25) - 0.75 * std::log(0.75);
  CHECK(independent_entropy(p, Convention::binary) == doctest::Approx(std::log(2.0) + h25));
  Eigen::VectorXd m(2);
  m << 0.0, -0.5;
  CHECK(independent_entropy(m, Convention::spin) == doctest::Approx(std::log(2.0) + h25));
  Eigen::VectorXd bad(1);
  bad << 1.5;
  CHECK_THROWS_AS(independent_entropy(bad, Convention::binary), InputError);

  // Rows: A A A B -> f = 3/4, 1/4; K = 2, n = 4.
  SpinMatrix d({0, 1, 0, 1, 0, 1, 1, 1}, 4, 2, Convention::binary);
  const PatternEntropy pe = pattern_entropy(d);
  CHECK(pe.plug_in == doctest::Approx(h25));
  CHECK(pe.miller_madow == doctest::Approx(h25 + 1.0 / 8.0));
  CHECK(pe.distinct == 2);
  CHECK_FALSE(pe.reliable);  // 4 samples for 2 patterns
  // Var(ln f) = E[(ln f)^2] - S^2 over the data.
  const double e2 = 0.75 * std::pow(std::log(0.75), 2) + 0.25 * std::pow(std::log(0.25), 2);
  CHECK(pe.error == doctest::Approx(std::sqrt((e2 - h25 * h25) / 4)));
}

TEST_CASE("multi-information ratio: pairwise data give about 1; independent data are flagged") {
  // Data drawn exactly from a pairwise model: I_2 / I_N = 1 up to sampling error. S_2 is the
  // exact entropy of the generating model, which matches the data's means only up to sampling
  // noise, so the comparison allows for it through the ratio's error (dominated by I_N's).
  const IsingModel m = random_model(8, Convention::spin, 41, 3.0);
  const SpinMatrix data = exact_draws(m, 200000, 9);
  PartitionOptions o;
  const MultiInformation mi = multi_information_ratio(m, data, o);
  INFO("ratio=" << mi.ratio << " +- " << mi.ratio_error << " I_N=" << mi.multi_information);
  CHECK(mi.reliable);
  CHECK(mi.warnings.empty());
  CHECK(mi.multi_information > 10 * mi.multi_information_error);
  CHECK(mi.ratio_error < 0.05);
  CHECK(std::abs(mi.ratio - 1.0) <= 4 * mi.ratio_error);
  CHECK(std::abs(mi.ratio_corrected - 1.0) <= 4 * mi.ratio_error);
  CHECK(mi.multi_information == doctest::Approx(mi.independent_entropy - mi.pattern.plug_in));

  // Independent units: I_N ~ 0, the ratio is flagged as undefined rather than reported.
  IsingModel ind = m;
  ind.couplings.setZero();
  const SpinMatrix idata = exact_draws(ind, 50000, 10);
  const MultiInformation mz = multi_information_ratio(ind, idata, o);
  CHECK_FALSE(mz.reliable);
  CHECK_FALSE(mz.warnings.empty());
  CHECK(std::abs(mz.multi_information_corrected) < 4 * mz.multi_information_error + 1e-3);

  // Too few samples for the number of patterns (near-uniform over 256): S_N flagged as unreliable.
  const MultiInformation ms = multi_information_ratio(ind, idata.slice_rows(0, 500), o);
  CHECK(ms.pattern.distinct > 100);
  CHECK_FALSE(ms.pattern.reliable);
  CHECK_FALSE(ms.reliable);
}

TEST_CASE("log partition: bad options and interruption") {
  const IsingModel m = random_model(10, Convention::spin, 1);
  PartitionOptions o;
  o.method = "bogus";
  CHECK_THROWS_AS(estimate_log_partition(m, o), InputError);
  o = {};
  o.ais_runs = 1;
  CHECK_THROWS_AS(estimate_log_partition(m, o), InputError);
  o = {};
  o.base = "nope";
  CHECK_THROWS_AS(estimate_log_partition(m, o), InputError);
  o = {};
  o.ti_nodes = 0;
  CHECK_THROWS_AS(estimate_log_partition(m, o), InputError);
  o = {};
  o.method = "exact";
  CHECK_THROWS_AS(estimate_log_partition(random_model(25, Convention::spin, 1), o), InputError);
  for (const char* method : {"ais", "thermodynamic"}) {
    o = {};
    o.method = method;
    o.progress = [](const Progress&) { return false; };
    CHECK_THROWS_AS(estimate_log_partition(m, o), Interrupted);
  }
}
