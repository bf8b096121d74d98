// Boltzmann learning (refine_moments) checked against exact enumeration:
//   * with exact population moments (all 2^N states weighted by their probabilities) exact-
//     expectation learning must return the generating model (the log-likelihood is strictly
//     concave, its maximum matches the moments; Ackley, Hinton & Sejnowski 1985, from memory);
//   * on B samples, sampled learning must approach the exact maximum-likelihood estimate and
//     reproduce the data's moments within their sampling noise (normalised errors in the style of Cocco & Monasson 2011);
// and the persistent-chain entry point of the sampler against an exactly predictable chain.
// Samples are drawn here from the exact probabilities (std::discrete_distribution), not by the
// sampler under test. Statistical tolerances are in standard errors with fixed seeds.
#include <doctest/doctest.h>

#include <cmath>
#include <random>

#include "spinfer/closed_form.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/refine.hpp"
#include "spinfer/sampler.hpp"
#include "spinfer/stats.hpp"

using namespace spinfer;

namespace {

IsingModel random_model(int N, double coupling_sd, double field_sd, std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = Eigen::VectorXd(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) {
    m.fields(i) = field_sd * g(rng);
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = coupling_sd * g(rng);
  }
  return m;
}

IsingModel independent_start(const SpinMatrix& data) {
  const Moments mo = compute_moments(data, Convention::spin);
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = mo.mean.array().atanh().matrix();
  m.couplings = Eigen::MatrixXd::Zero(data.cols(), data.cols());
  m.provenance.method = "independent";
  return m;
}

/// B rows drawn independently from the exact distribution of `m` (not from the sampler).
SpinMatrix exact_draws(const IsingModel& m, std::int64_t B, std::uint64_t seed) {
  const Eigen::VectorXd p = exact_state_probabilities(m);
  std::discrete_distribution<std::int64_t> pick(p.data(), p.data() + p.size());
  std::mt19937_64 rng(seed);
  const std::int64_t N = m.size();
  std::vector<std::uint8_t> bits(std::size_t(B * N));
  for (std::int64_t t = 0; t < B; ++t) {
    const std::int64_t k = pick(rng);
    for (std::int64_t i = 0; i < N; ++i) bits[std::size_t(t * N + i)] = (k >> i) & 1;
  }
  return SpinMatrix(std::move(bits), B, N, Convention::spin);
}

/// Largest |difference| over fields and couplings (spin convention).
double distance(const IsingModel& a, const IsingModel& b) {
  const IsingModel x = convert_model(a, Convention::spin), y = convert_model(b, Convention::spin);
  return std::max((x.fields - y.fields).cwiseAbs().maxCoeff(), (x.couplings - y.couplings).cwiseAbs().maxCoeff());
}

/// Root-mean-square difference over fields and couplings i<j (spin convention).
double rms_distance(const IsingModel& a, const IsingModel& b) {
  const IsingModel x = convert_model(a, Convention::spin), y = convert_model(b, Convention::spin);
  const double N = double(x.size());
  const double s = (x.fields - y.fields).squaredNorm() + 0.5 * (x.couplings - y.couplings).squaredNorm();
  return std::sqrt(s / (N + N * (N - 1) / 2));
}

/// epsilon_m, epsilon_c and max |z| of the exact moments of `model` against the data, with the
/// independent-sample noise sigma^2 = (1 - x^2) / B.
struct ExactCheck {
  double eps_m = 0, eps_c = 0, max_z = 0;
};
ExactCheck exact_check(const IsingModel& model, const SpinMatrix& data) {
  ExactOptions eo;
  eo.convention = Convention::spin;
  const Moments e = exact_statistics(model, eo).moments;
  const Moments d = compute_moments(data, Convention::spin);
  const double B = double(data.rows());
  const std::int64_t N = data.cols();
  ExactCheck r;
  for (std::int64_t i = 0; i < N; ++i) {
    const double z = (e.mean(i) - d.mean(i)) / std::sqrt((1 - d.mean(i) * d.mean(i)) / B);
    r.eps_m += z * z / double(N);
    r.max_z = std::max(r.max_z, std::abs(z));
    for (std::int64_t j = i + 1; j < N; ++j) {
      const double c = d.second(i, j);
      const double zc = (e.second(i, j) - c) / std::sqrt((1 - c * c) / B);
      r.eps_c += zc * zc / (double(N) * double(N - 1) / 2);
      r.max_z = std::max(r.max_z, std::abs(zc));
    }
  }
  r.eps_m = std::sqrt(r.eps_m);
  r.eps_c = std::sqrt(r.eps_c);
  return r;
}

}  // namespace

TEST_CASE("refine: exact expectations on exact population moments recover the model") {
  for (const Convention conv : {Convention::spin, Convention::binary}) {
    const IsingModel truth = random_model(7, 0.4, 0.3, 11);
    const SpinMatrix population = exact_weighted_states(truth, Convention::spin);
    IsingModel start = convert_model(independent_start(population), conv);
    RefineOptions o;
    o.expectations = "exact";
    o.noise = "iid";
    const RefineResult r = refine_moments(population, start, o);
    CHECK(r.converged);
    CHECK(r.expectations == "exact");
    CHECK(r.model.convention == conv);
    CHECK(r.max_gradient <= 1e-10);
    CHECK(distance(r.model, truth) < 1e-6);
    CHECK(r.model.provenance.method == "boltzmann-learning");
    CHECK(r.model.provenance.extra["start_method"] == "independent");
    CHECK(r.trajectory.size() == std::size_t(r.iterations));
    // The mean log-likelihood equals -entropy at the truth (sum_v P log P), by exact enumeration.
    ExactOptions eo;
    CHECK(r.log_likelihood == doctest::Approx(-exact_statistics(truth, eo).entropy).epsilon(1e-9));
  }
}

TEST_CASE("refine: exact expectations with an L2 penalty satisfy the penalised moment equations") {
  // At the penalised optimum: m^model = m^D and c^model_ij = c^D_ij - l2 J_ij (refine.hpp).
  const IsingModel truth = random_model(6, 0.5, 0.2, 5);
  const SpinMatrix population = exact_weighted_states(truth, Convention::binary);
  RefineOptions o;
  o.expectations = "exact";
  o.noise = "iid";
  o.l2 = 0.05;
  const RefineResult r = refine_moments(population, independent_start(population), o);
  REQUIRE(r.converged);
  ExactOptions eo;
  eo.convention = Convention::spin;
  const Moments model = exact_statistics(r.model, eo).moments;
  const Moments data = compute_moments(population, Convention::spin);
  CHECK((model.mean - data.mean).cwiseAbs().maxCoeff() < 1e-9);
  Eigen::MatrixXd lhs = model.second - data.second + o.l2 * r.model.couplings;
  lhs.diagonal().setZero();
  CHECK(lhs.cwiseAbs().maxCoeff() < 1e-9);
  // The penalty shrinks the couplings.
  CHECK(r.model.couplings.norm() < truth.couplings.norm());
}

TEST_CASE("refine: sampled learning approaches the exact maximum-likelihood estimate") {
  // N = 8, B = 20000 draws from a known model; the exact ML estimate comes from exact-expectation
  // learning on the same sample moments. The start is the naive mean-field inversion
  // (Kappen & Rodriguez 1998), biased at these couplings.
  const IsingModel truth = random_model(8, 0.35, 0.3, 21);
  const SpinMatrix data = exact_draws(truth, 20000, 3);
  RefineOptions exact_o;
  exact_o.expectations = "exact";
  exact_o.noise = "iid";
  const RefineResult ml = refine_moments(data, independent_start(data), exact_o);
  REQUIRE(ml.converged);

  const IsingModel start = fit_closed_form(compute_moments(data, Convention::spin), "mean-field");
  RefineOptions o;
  o.expectations = "sampled";
  o.noise = "iid";
  o.seed = 7;
  o.max_iterations = 400;
  const RefineResult r = refine_moments(data, start, o);
  CHECK(r.converged);
  CHECK(r.expectations == "sampled");
  CHECK(r.trajectory.back().check);
  CHECK(r.epsilon_mean < 1.0);
  CHECK(r.epsilon_correlation < 1.0);
  CHECK(r.monte_carlo_ratio <= o.monte_carlo_ratio);
  const double before = rms_distance(start, ml.model), after = rms_distance(r.model, ml.model);
  MESSAGE("rms distance to exact ML: start " << before << ", refined " << after << ", iterations "
                                             << r.iterations);
  CHECK(after < 0.5 * before);
  // Exact moments of the refined model against the data (independent of the sampler).
  const ExactCheck x = exact_check(r.model, data);
  MESSAGE("exact epsilon_m " << x.eps_m << ", epsilon_c " << x.eps_c << ", max |z| " << x.max_z);
  CHECK(x.eps_m < 1.5);
  CHECK(x.eps_c < 1.5);
  // 36 statistics with |z| ~ N(0, 1) at epsilon ~ 1: the largest is below 4.5 sigma.
  CHECK(x.max_z < 4.5);
}

TEST_CASE("refine: same seed, same result for any thread count; the progress callback stops it") {
  const IsingModel truth = random_model(6, 0.3, 0.2, 4);
  const SpinMatrix data = exact_draws(truth, 5000, 9);
  RefineOptions o;
  o.expectations = "sampled";
  o.seed = 3;
  o.max_iterations = 15;
  o.threads = 1;
  const RefineResult a = refine_moments(data, independent_start(data), o);
  o.threads = 3;
  const RefineResult b = refine_moments(data, independent_start(data), o);
  CHECK(a.iterations == b.iterations);
  CHECK(a.model.fields == b.model.fields);
  CHECK(a.model.couplings == b.model.couplings);
  CHECK(a.epsilon_correlation == b.epsilon_correlation);

  int calls = 0;
  o.progress = [&calls](const Progress& p) {
    ++calls;
    return p.stage != "boltzmann learning" || p.done < 3;
  };
  CHECK_THROWS_AS(refine_moments(data, independent_start(data), o), Interrupted);
  CHECK(calls >= 3);
  o.expectations = "exact";
  CHECK_THROWS_AS(refine_moments(data, independent_start(data), o), Interrupted);
}

TEST_CASE("refine: budgets stop the run without convergence") {
  const IsingModel truth = random_model(6, 0.3, 0.2, 4);
  const SpinMatrix data = exact_draws(truth, 5000, 9);
  RefineOptions o;
  o.expectations = "sampled";
  o.max_iterations = 2;
  o.threshold = 1e-6;
  const RefineResult r = refine_moments(data, independent_start(data), o);
  CHECK_FALSE(r.converged);
  CHECK(r.stop_reason == "iterations");
  CHECK(r.iterations == 2);
  CHECK_FALSE(r.model.provenance.converged);
  o.max_iterations = 1000;
  o.max_seconds = 1e-9;
  const RefineResult t = refine_moments(data, independent_start(data), o);
  CHECK(t.stop_reason == "time");
  CHECK(t.iterations == 1);
}

TEST_CASE("refine: bad input is rejected") {
  const IsingModel truth = random_model(5, 0.3, 0.2, 4);
  const SpinMatrix data = exact_draws(truth, 500, 9);
  RefineOptions o;
  CHECK_THROWS_AS(refine_moments(data, random_model(4, 0.1, 0.1, 1), o), InputError);
  o.expectations = "magic";
  CHECK_THROWS_AS(refine_moments(data, truth, o), InputError);
  o = RefineOptions();
  o.chains = 1;
  CHECK_THROWS_AS(refine_moments(data, truth, o), InputError);
  o = RefineOptions();
  o.noise = "gaussian";
  CHECK_THROWS_AS(refine_moments(data, truth, o), InputError);
  // A unit that is never active has no finite field.
  std::vector<std::uint8_t> bits(std::size_t(500 * 5));
  for (std::int64_t t = 0; t < 500; ++t)
    for (std::int64_t i = 0; i < 4; ++i) bits[std::size_t(t * 5 + i)] = data.active(t, i);
  CHECK_THROWS_AS(refine_moments(SpinMatrix(std::move(bits), 500, 5, Convention::spin), truth, RefineOptions()),
                  InputError);
  // Exact expectations beyond 20 units.
  const IsingModel big = random_model(21, 0.01, 0.2, 2);
  o = RefineOptions();
  o.expectations = "exact";
  o.noise = "iid";
  std::vector<std::uint8_t> two_rows(std::size_t(2 * 21), 0);
  for (std::size_t i = 21; i < two_rows.size(); ++i) two_rows[i] = 1;
  CHECK_THROWS_AS(refine_moments(SpinMatrix(std::move(two_rows), 2, 21, Convention::spin), big, o),
                  InputError);
}

TEST_CASE("sampler: continue_chains resumes from the given states") {
  // Metropolis with h = J = 0 accepts every flip (dE = 0), so one sweep turns each chain's state
  // into its complement: the kept sample and the returned states are known exactly.
  IsingModel m;
  m.convention = Convention::binary;
  m.fields = Eigen::VectorXd::Zero(5);
  m.couplings = Eigen::MatrixXd::Zero(5, 5);
  ChainStates st;
  st.chains = 2;
  st.units = 5;
  st.active = {1, 0, 0, 1, 1, 0, 0, 0, 0, 1};
  SamplerOptions o;
  o.method = "metropolis";
  o.chains = 2;
  o.samples = 2;
  o.burn_in = 0;
  o.thin = 1;
  const SampleSet s = continue_chains(m, st, o);
  const std::vector<std::uint8_t> flipped = {0, 1, 1, 0, 0, 1, 1, 1, 1, 0};
  CHECK(std::vector<std::uint8_t>(s.samples.data(), s.samples.data() + 10) == flipped);
  CHECK(st.active == flipped);
  continue_chains(m, st, o);  // one more sweep: back to the first states
  CHECK(st.active == std::vector<std::uint8_t>{1, 0, 0, 1, 1, 0, 0, 0, 0, 1});
  // Wrong shapes and automatic tuning are rejected.
  o.chains = 3;
  o.samples = 3;
  CHECK_THROWS_AS(continue_chains(m, st, o), InputError);
  o.chains = 2;
  o.samples = 2;
  o.thin = -1;
  CHECK_THROWS_AS(continue_chains(m, st, o), InputError);
}
