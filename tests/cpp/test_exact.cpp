// Exact enumeration against closed forms: 1D chains (transfer matrix), the 4x4 torus (values
// from Kaufman's finite-lattice partition function, Phys. Rev. 76:1232, 1949), Curie-Weiss
// finite-N sums, and the exact {0,1} <-> {-1,+1} conversion (change of variables s = 2x - 1).
// A plain loop over states (no Gray code) is the reference for log-likelihoods and moments;
// tests/python/test_exact.py repeats the check against numpy.
#include <doctest/doctest.h>

#include <cmath>
#include <random>

#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"

using namespace spinfer;

namespace {

IsingModel zero_model(std::int64_t N, Convention c = Convention::spin) {
  IsingModel m;
  m.convention = c;
  m.fields = Eigen::VectorXd::Zero(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  return m;
}

void bond(IsingModel& m, std::int64_t i, std::int64_t j, double K) {
  m.couplings(i, j) += K;
  m.couplings(j, i) += K;
}

IsingModel random_model(std::int64_t N, double scale, std::uint64_t seed, Convention c) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  IsingModel m = zero_model(N, c);
  for (std::int64_t i = 0; i < N; ++i) {
    m.fields(i) = 0.5 * g(rng);
    for (std::int64_t j = i + 1; j < N; ++j) bond(m, i, j, scale * g(rng) / std::sqrt(double(N)));
  }
  return m;
}

// Reference: direct sum over states k with unit i active iff bit i of k is set.
double naive_log_z(const IsingModel& m, std::vector<double>* log_weights = nullptr) {
  const std::int64_t N = m.size();
  std::vector<double> a(std::size_t(1) << N);
  std::vector<std::uint8_t> bits(static_cast<std::size_t>(N));
  double top = -1e300;
  for (std::size_t k = 0; k < a.size(); ++k) {
    for (std::int64_t i = 0; i < N; ++i) bits[std::size_t(i)] = (k >> i) & 1u;
    a[k] = -energy(m, bits.data());
    top = std::max(top, a[k]);
  }
  double s = 0;
  for (double v : a) s += std::exp(v - top);
  if (log_weights) *log_weights = a;
  return top + std::log(s);
}

}  // namespace

TEST_CASE("exact: log Z and probabilities match a direct sum over states") {
  for (Convention c : {Convention::spin, Convention::binary}) {
    IsingModel m = random_model(9, 1.5, 11, c);
    std::vector<double> a;
    const double lz = naive_log_z(m, &a);
    CHECK(exact_log_partition(m) == doctest::Approx(lz).epsilon(1e-13));
    const Eigen::VectorXd p = exact_state_probabilities(m);
    for (std::size_t k = 0; k < a.size(); ++k)
      CHECK(p(Eigen::Index(k)) == doctest::Approx(std::exp(a[k] - lz)).epsilon(1e-12));
    // Log-likelihood of a few weighted rows = weighted mean of log P(row).
    std::vector<std::uint8_t> rows;
    const std::vector<std::size_t> states = {0, 5, 300, 511, 5};
    for (std::size_t k : states)
      for (int i = 0; i < 9; ++i) rows.push_back(std::uint8_t((k >> i) & 1u));
    SpinMatrix d(rows, 5, 9, Convention::binary);
    d.set_weights({1, 2, 0.5, 1, 3});
    double ref = 0;
    const double w[] = {1, 2, 0.5, 1, 3};
    for (std::size_t r = 0; r < states.size(); ++r) ref += w[r] * (a[states[r]] - lz);
    CHECK(exact_log_likelihood(m, d) == doctest::Approx(ref / 7.5).epsilon(1e-12));
  }
}

TEST_CASE("exact: 1D chains, open and periodic (transfer matrix)") {
  const int N = 10;
  const double K = 0.7, t = std::tanh(K);
  IsingModel open = zero_model(N), ring = zero_model(N);
  for (int i = 0; i + 1 < N; ++i) bond(open, i, i + 1, K);
  ring = open;
  bond(ring, N - 1, 0, K);
  ExactOptions o;
  o.convention = Convention::spin;
  const ExactStatistics so = exact_statistics(open, o), sr = exact_statistics(ring, o);
  for (int r = 1; r < N; ++r) {
    // open chain: <s_i s_{i+r}> = tanh(K)^r for any i (zero field, m = 0)
    CHECK(so.moments.connected(0, r) == doctest::Approx(std::pow(t, r)).epsilon(1e-12));
    if (r < N - 3) CHECK(so.moments.connected(3, 3 + r) == doctest::Approx(std::pow(t, r)).epsilon(1e-12));
    // ring: (t^r + t^(N-r)) / (1 + t^N)
    CHECK(sr.moments.connected(0, r) ==
          doctest::Approx((std::pow(t, r) + std::pow(t, N - r)) / (1 + std::pow(t, N))).epsilon(1e-12));
  }
  // Sheet §3.5 [C]: N = 10, K = 0.7, r = 3 ring value.
  CHECK(sr.moments.second(4, 7) == doctest::Approx(0.248587049985).epsilon(1e-11));
  // Ring with a field: Z = l+^N + l-^N, l± = e^K cosh h ± sqrt(e^{2K} sinh^2 h + e^{-2K}).
  const double h = 0.3;
  ring.fields.setConstant(h);
  const double root = std::sqrt(std::exp(2 * K) * std::sinh(h) * std::sinh(h) + std::exp(-2 * K));
  const double lp = std::exp(K) * std::cosh(h) + root, lm = std::exp(K) * std::cosh(h) - root;
  CHECK(exact_log_partition(ring) ==
        doctest::Approx(std::log(std::pow(lp, N) + std::pow(lm, N))).epsilon(1e-13));
}

TEST_CASE("exact: 4x4 torus at K_c (Kaufman 1949)") {
  const double Kc = 0.5 * std::log(1 + std::sqrt(2.0));
  const int L = 4, N = L * L;
  IsingModel unit = zero_model(N);
  for (int r = 0; r < L; ++r)
    for (int c = 0; c < L; ++c) {
      bond(unit, r * L + c, r * L + (c + 1) % L, 1.0);
      bond(unit, r * L + c, ((r + 1) % L) * L + c, 1.0);
    }
  IsingModel atKc = unit;
  atKc.couplings *= Kc;
  // Sheet §3.2 table, L = 4: ln Z / N = 0.9701197161722052, u = -1.565623787638319,
  // c = 0.7832668259289094 (Kaufman's formula; ln Z also by brute force: 15.5219154587553).
  const ExactStatistics s = exact_statistics(atKc);
  CHECK(s.log_partition == doctest::Approx(15.5219154587553).epsilon(1e-13));
  CHECK(s.log_partition / N == doctest::Approx(0.9701197161722052).epsilon(1e-13));
  CHECK(s.mean_energy / (Kc * N) == doctest::Approx(-1.565623787638319).epsilon(1e-12));
  CHECK(s.specific_heat == doctest::Approx(0.7832668259289094).epsilon(1e-11));
  // The same physics through the temperature: J = 1, T = 1/K_c.
  ExactOptions o;
  o.temperature = 1 / Kc;
  o.threads = 2;
  const ExactStatistics st = exact_statistics(unit, o);
  CHECK(st.log_partition == doctest::Approx(15.5219154587553).epsilon(1e-13));
  CHECK(st.mean_energy / N == doctest::Approx(-1.565623787638319).epsilon(1e-12));
  CHECK(st.specific_heat == doctest::Approx(0.7832668259289094).epsilon(1e-11));
  CHECK(st.entropy == doctest::Approx(s.entropy).epsilon(1e-12));
  // Sheet §3.4 [C]: <m^2> at L = 4, K_c is 0.7613589086; m = (2K - N)/N.
  double m2 = 0;
  for (int k = 0; k <= N; ++k) m2 += s.active_count(k) * std::pow((2.0 * k - N) / N, 2);
  CHECK(m2 == doctest::Approx(0.7613589086).epsilon(1e-9));
}

TEST_CASE("exact: Curie-Weiss finite-N sum") {
  // H = -(J/2N) M^2 - h M with M = sum s_i equals J_ij = J/N, h_i = h plus the constant J/2.
  const int N = 18;
  const double beta = 1.0, J = 1.0, h = 0.1;
  IsingModel m = zero_model(N);
  m.fields.setConstant(beta * h);
  m.couplings.setConstant(beta * J / N);
  m.couplings.diagonal().setZero();
  std::vector<double> a(N + 1);
  double top = -1e300;
  for (int k = 0; k <= N; ++k) {
    const double M = 2.0 * k - N;
    a[std::size_t(k)] = std::lgamma(N + 1.0) - std::lgamma(k + 1.0) - std::lgamma(N - k + 1.0) +
                        beta * (J * M * M / (2.0 * N) + h * M);
    top = std::max(top, a[std::size_t(k)]);
  }
  double z = 0;
  for (double v : a) z += std::exp(v - top);
  const double log_z_cw = top + std::log(z);
  const ExactStatistics s = exact_statistics(m);
  CHECK(s.log_partition + beta * J / 2 == doctest::Approx(log_z_cw).epsilon(1e-13));
  for (int k = 0; k <= N; ++k)
    CHECK(s.active_count(k) == doctest::Approx(std::exp(a[std::size_t(k)] - log_z_cw)).epsilon(1e-11));
}

TEST_CASE("exact: a model and its convert_model twin are the same distribution") {
  const IsingModel spin = random_model(10, 2.0, 7, Convention::spin);
  const IsingModel binary = convert_model(spin, Convention::binary);
  const Eigen::VectorXd ps = exact_state_probabilities(spin), pb = exact_state_probabilities(binary);
  CHECK((ps - pb).cwiseAbs().maxCoeff() < 1e-12);
  CHECK(((ps - pb).array() / ps.array()).abs().maxCoeff() < 1e-11);
  CHECK(exact_log_partition(binary) - exact_log_partition(spin) ==
        doctest::Approx(log_partition_shift(spin, Convention::binary)).epsilon(1e-12));
  ExactOptions o;
  o.convention = Convention::spin;
  const ExactStatistics a = exact_statistics(spin, o), b = exact_statistics(binary, o);
  CHECK((a.moments.connected - b.moments.connected).cwiseAbs().maxCoeff() < 1e-12);
  CHECK((a.moments.mean - b.moments.mean).cwiseAbs().maxCoeff() < 1e-12);
  CHECK(a.entropy == doctest::Approx(b.entropy).epsilon(1e-12));
  CHECK(a.specific_heat == doctest::Approx(b.specific_heat).epsilon(1e-10));
  // E_binary = E_spin - shift, so the mean energies differ by exactly the log Z shift.
  CHECK(a.mean_energy - b.mean_energy ==
        doctest::Approx(log_partition_shift(spin, Convention::binary)).epsilon(1e-12));
  // Moments in the binary convention are the spin ones converted (C^spin = 4 C^binary).
  o.convention = Convention::binary;
  const ExactStatistics c = exact_statistics(spin, o);
  CHECK((4.0 * c.moments.connected - a.moments.connected).cwiseAbs().maxCoeff() < 1e-13);
}

TEST_CASE("exact: results do not depend on the thread count, and large weights are safe") {
  IsingModel m = random_model(15, 40.0, 3, Convention::binary);  // huge energies: log-sum-exp
  ExactOptions one, three;
  three.threads = 3;
  const ExactStatistics a = exact_statistics(m, one), b = exact_statistics(m, three);
  CHECK(a.log_partition == b.log_partition);
  CHECK(a.moments.second == b.moments.second);
  CHECK(a.specific_heat == b.specific_heat);
  CHECK(std::isfinite(a.log_partition));
  CHECK(a.log_partition == doctest::Approx(naive_log_z(m)).epsilon(1e-12));
  CHECK(a.active_count.sum() == doctest::Approx(1.0).epsilon(1e-12));
}

TEST_CASE("exact: bad input is rejected") {
  CHECK_THROWS_AS(exact_log_partition(zero_model(25)), InputError);
  CHECK_THROWS_AS(exact_log_partition(zero_model(0)), InputError);
  CHECK_THROWS_AS(exact_log_partition(zero_model(3), 0.0), InputError);
  CHECK_THROWS_AS(exact_log_partition(zero_model(3), std::nan("")), InputError);
  IsingModel asym = zero_model(3);
  asym.couplings(0, 1) = 1;
  CHECK_THROWS_AS(exact_statistics(asym), InputError);
  SpinMatrix d(std::vector<std::uint8_t>{0, 1}, 1, 2, Convention::binary);
  CHECK_THROWS_AS(exact_log_likelihood(zero_model(3), d), InputError);
  CHECK_THROWS_AS(exact_weighted_states(zero_model(21), Convention::spin), InputError);
  // Independent units: P(K) is binomial and the entropy is N log 2.
  const ExactStatistics s = exact_statistics(zero_model(6));
  CHECK(s.entropy == doctest::Approx(6 * std::log(2.0)).epsilon(1e-14));
  CHECK(s.active_count(3) == doctest::Approx(20.0 / 64).epsilon(1e-14));
}
