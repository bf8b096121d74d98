// Pseudo-likelihood, interaction screening and penalty selection.
// Oracles: exact enumeration of all 2^N states (population weights make the true parameters the
// exact optimum of PLM, RISE and log-RISE: Besag 1975, Vuffray et al.
// 2016); central finite differences for gradients; direct per-sample sums for objectives.
// scikit-learn and sampled-data checks live in tests/python/test_fitting.py.
#include <doctest/doctest.h>

#include <cmath>
#include <random>

#include "../../lib/src/local_fields.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/penalty_path.hpp"
#include "spinfer/pseudo_likelihood.hpp"
#include "spinfer/screening.hpp"

using namespace spinfer;
using Eigen::MatrixXd;
using Eigen::VectorXd;

namespace {

struct Truth {
  VectorXd h;
  MatrixXd J;
};

Truth random_model(int N, double beta, std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  Truth t{VectorXd(N), MatrixXd::Zero(N, N)};
  for (int i = 0; i < N; ++i) t.h(i) = 0.3 * g(rng);
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) t.J(i, j) = t.J(j, i) = beta / std::sqrt(double(N)) * g(rng);
  return t;
}

// All 2^N states with their exact probabilities as weights.
SpinMatrix enumerate_states(const Truth& t) {
  const int N = int(t.h.size());
  const std::int64_t S = std::int64_t(1) << N;
  std::vector<std::uint8_t> bits(std::size_t(S * N));
  std::vector<double> logp(static_cast<std::size_t>(S));
  double mx = -1e300;
  for (std::int64_t k = 0; k < S; ++k) {
    VectorXd s(N);
    for (int i = 0; i < N; ++i) {
      bits[std::size_t(k * N + i)] = std::uint8_t((k >> i) & 1);
      s(i) = ((k >> i) & 1) ? 1.0 : -1.0;
    }
    logp[std::size_t(k)] = t.h.dot(s) + 0.5 * s.dot(t.J * s);
    mx = std::max(mx, logp[std::size_t(k)]);
  }
  std::vector<double> w(static_cast<std::size_t>(S));
  for (std::int64_t k = 0; k < S; ++k) w[std::size_t(k)] = std::exp(logp[std::size_t(k)] - mx);
  SpinMatrix m(bits, S, N, Convention::binary);
  m.set_weights(w);
  return m;
}

SpinMatrix bernoulli_data(std::int64_t T, int N, double p, std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::bernoulli_distribution b(p);
  std::vector<std::uint8_t> bits(std::size_t(T * N));
  for (auto& x : bits) x = b(rng);
  for (int i = 0; i < N; ++i) {  // no constant units
    bits[std::size_t(i)] = 1;
    bits[std::size_t(N + i)] = 0;
  }
  return SpinMatrix(bits, T, N, Convention::binary);
}

double max_abs(const MatrixXd& a) { return a.cwiseAbs().maxCoeff(); }

}  // namespace

TEST_CASE("PLM and screening recover the true model from exact population weights") {
  const Truth t = random_model(7, 0.8, 11);
  const SpinMatrix data = enumerate_states(t);
  for (bool symmetric : {false, true}) {
    for (const char* rep : {"dense", "sparse"}) {
      CAPTURE(symmetric);
      CAPTURE(rep);
      PseudoLikelihoodOptions o;
      o.symmetric = symmetric;
      o.l2 = 0;
      o.tolerance = 1e-10;
      o.threads = 2;
      o.representation = rep;
      const IsingModel m = fit_pseudo_likelihood(data, o);
      CHECK(m.convention == Convention::spin);
      CHECK(max_abs(m.couplings - t.J) < 1e-6);
      CHECK(max_abs(m.fields - t.h) < 1e-6);
      CHECK(m.provenance.method == "pseudo-likelihood");
      CHECK(m.provenance.extra["variant"] == (symmetric ? "symmetric" : "per-variable"));
      CHECK(m.provenance.extra["representation"] == rep);
    }
    for (bool logarithmic : {false, true}) {
      CAPTURE(logarithmic);
      ScreeningOptions o;
      o.logarithmic = logarithmic;
      o.symmetric = symmetric;
      o.l1 = 0;
      o.tolerance = 1e-10;
      const IsingModel m = fit_screening(data, o);
      CHECK(max_abs(m.couplings - t.J) < 1e-6);
      CHECK(max_abs(m.fields - t.h) < 1e-6);
      CHECK(m.provenance.method == "screening");
      CHECK(m.provenance.extra["variant"] == (logarithmic ? "log-rise" : "rise"));
    }
  }
}

TEST_CASE("local-field kernels: objectives match direct sums, gradients match finite differences") {
  const int N = 9;
  SpinMatrix data = bernoulli_data(700, N, 0.3, 5);
  std::vector<double> w(700);
  std::mt19937_64 rng(3);
  std::uniform_real_distribution<double> u(0.2, 2.0);
  for (auto& x : w) x = u(rng);
  data.set_weights(w);
  const Truth t = random_model(N, 1.0, 9);
  MatrixXd theta = t.J;  // an asymmetric point, as in the per-variable problem
  theta(0, 3) += 0.2;
  theta(5, 1) -= 0.1;
  for (auto loss : {detail::LocalLoss::pseudo_likelihood, detail::LocalLoss::screening}) {
    // Direct sums (the definitions in local_fields.hpp).
    VectorXd direct = VectorXd::Zero(N);
    for (std::int64_t b = 0; b < data.rows(); ++b) {
      VectorXd s(N);
      for (int i = 0; i < N; ++i) s(i) = data.value(b, i) * 2 - 1;
      for (int i = 0; i < N; ++i) {
        double H = t.h(i);
        for (int j = 0; j < N; ++j)
          if (j != i) H += theta(j, i) * s(j);
        direct(i) += w[std::size_t(b)] * (loss == detail::LocalLoss::pseudo_likelihood
                                              ? std::log(2 * std::cosh(H)) - s(i) * H
                                              : std::exp(-s(i) * H));
      }
    }
    for (const char* rep : {"dense", "sparse", "patterns-dense", "patterns-sparse"}) {
      CAPTURE(rep);
      detail::PreparedData prep(data, rep, 1);
      detail::LocalFields f(prep, 2);
      VectorXd loss_sums, gh;
      MatrixXd grad;
      f.evaluate(loss, theta, t.h, true, loss_sums, grad, gh);
      CHECK(max_abs(loss_sums - direct) < 1e-9 * direct.cwiseAbs().maxCoeff());
      const double eps = 1e-6;
      for (int i = 0; i < N; ++i) {
        for (int j = 0; j < N; ++j) {
          if (i == j) continue;
          MatrixXd tp = theta, tm = theta;
          tp(j, i) += eps;
          tm(j, i) -= eps;
          VectorXd lp, lm, g2;
          MatrixXd d2;
          f.evaluate(loss, tp, t.h, false, lp, d2, g2);
          f.evaluate(loss, tm, t.h, false, lm, d2, g2);
          const double fd = (lp(i) - lm(i)) / (2 * eps);
          CHECK(std::abs(fd - grad(j, i)) < 1e-5 * (1 + std::abs(fd)));
        }
        VectorXd hp = t.h, hm = t.h, lp, lm, g2;
        MatrixXd d2;
        hp(i) += eps;
        hm(i) -= eps;
        f.evaluate(loss, theta, hp, false, lp, d2, g2);
        f.evaluate(loss, theta, hm, false, lm, d2, g2);
        CHECK(std::abs((lp(i) - lm(i)) / (2 * eps) - gh(i)) < 1e-5 * (1 + std::abs(gh(i))));
      }
    }
  }
}

TEST_CASE("fits: thread count, representation, warm start, interruption, L1") {
  const SpinMatrix data = bernoulli_data(3000, 12, 0.2, 21);
  PseudoLikelihoodOptions o;
  o.l2 = 1e-3;
  o.tolerance = 1e-8;
  o.representation = "dense";
  o.threads = 1;
  const IsingModel a = fit_pseudo_likelihood(data, o);
  o.threads = 2;
  const IsingModel b = fit_pseudo_likelihood(data, o);
  CHECK(a.couplings == b.couplings);  // bit-identical for any thread count
  CHECK(a.fields == b.fields);
  CHECK(a.provenance.iterations == b.provenance.iterations);
  CHECK(a.provenance.converged);
  CHECK(a.provenance.l2 == 1e-3);
  CHECK(a.provenance.samples == 3000);
  CHECK(a.provenance.units == 12);

  for (const char* rep : {"sparse", "patterns", "auto"}) {  // same optimum, other products
    o.representation = rep;
    const IsingModel c = fit_pseudo_likelihood(data, o);
    CHECK(max_abs(c.couplings - a.couplings) < 1e-6);
  }

  // Warm start from the solution: the symmetric variant's optimum is the returned model itself,
  // so no iteration is needed; the per-variable optimum is asymmetric (the returned model is the
  // average), so a warm start from it needs fewer iterations than a cold start.
  o.representation = "auto";
  o.symmetric = true;
  const IsingModel sym = fit_pseudo_likelihood(data, o);
  o.warm_start = sym;
  const IsingModel w = fit_pseudo_likelihood(data, o);
  CHECK(w.provenance.iterations == 0);
  CHECK(w.provenance.converged);
  CHECK(max_abs(w.couplings - sym.couplings) == 0.0);
  o.warm_start = convert_model(sym, Convention::binary);  // either convention is accepted
  CHECK(fit_pseudo_likelihood(data, o).provenance.iterations <= 1);
  o.symmetric = false;
  o.warm_start = a;
  CHECK(fit_pseudo_likelihood(data, o).provenance.iterations < a.provenance.iterations);
  o.warm_start.reset();

  int calls = 0;
  o.progress = [&](const Progress& p) {
    CHECK(p.stage == "pseudo-likelihood");
    return ++calls < 3;
  };
  CHECK_THROWS_AS(fit_pseudo_likelihood(data, o), Interrupted);
  CHECK(calls == 3);
  o.progress = nullptr;

  // L1 (OWL-QN): some couplings exactly zero; subgradient optimality at the solution.
  o.l2 = 0;
  o.l1 = 0.02;
  o.tolerance = 1e-7;
  const IsingModel l1 = fit_pseudo_likelihood(data, o);
  CHECK(l1.provenance.converged);
  int zeros = 0;
  for (int i = 0; i < 12; ++i)
    for (int j = i + 1; j < 12; ++j) zeros += l1.couplings(i, j) == 0.0;
  CHECK(zeros > 10);
  o.symmetric = true;
  CHECK(fit_pseudo_likelihood(data, o).provenance.converged);
}

TEST_CASE("penalty choice and bad input") {
  const Truth t = random_model(10, 1.0, 4);
  // A coarse Gibbs chain (good enough for a sanity check of the selection machinery).
  std::mt19937_64 rng(8);
  std::uniform_real_distribution<double> u(0, 1);
  const std::int64_t T = 4000;
  std::vector<std::uint8_t> bits(std::size_t(T * 10));
  VectorXd s = VectorXd::Ones(10);
  for (std::int64_t b = 0; b < T; ++b) {
    for (int sweep = 0; sweep < 3; ++sweep)
      for (int i = 0; i < 10; ++i) {
        const double H = t.h(i) + t.J.row(i).dot(s);
        s(i) = u(rng) < 1 / (1 + std::exp(-2 * H)) ? 1 : -1;
      }
    for (int i = 0; i < 10; ++i) bits[std::size_t(b * 10 + i)] = s(i) > 0;
  }
  const SpinMatrix data(bits, T, 10, Convention::binary);
  PenaltyPathOptions po;
  po.folds = 3;
  po.grid_points = 5;
  const PenaltyPath path = penalty_path(data, po);
  REQUIRE(path.penalties.size() == 5);
  CHECK(path.mean_score.size() == 5);
  CHECK(path.se_score.size() == 5);
  CHECK(std::is_sorted(path.penalties.rbegin(), path.penalties.rend()));
  CHECK(std::find(path.penalties.begin(), path.penalties.end(), path.chosen) != path.penalties.end());
  const auto best = std::max_element(path.mean_score.begin(), path.mean_score.end());
  CHECK(path.chosen == path.penalties[std::size_t(best - path.mean_score.begin())]);
  CHECK(path.kind == "l2");

  const IsingModel m = fit_pseudo_likelihood(data);  // automatic l2
  CHECK(m.provenance.l2 > 0);
  CHECK(m.provenance.extra.contains("penalty_selection"));
  CHECK(m.provenance.converged);

  std::vector<std::uint8_t> cbits(bits);
  for (std::int64_t b = 0; b < T; ++b) cbits[std::size_t(b * 10 + 3)] = 1;
  CHECK_THROWS_AS(fit_pseudo_likelihood(SpinMatrix(cbits, T, 10, Convention::binary)), InputError);
  PseudoLikelihoodOptions o;
  o.representation = "bogus";
  CHECK_THROWS_AS(fit_pseudo_likelihood(data, o), InputError);
  o.representation = "auto";
  o.l2 = -3;
  CHECK_THROWS_AS(fit_pseudo_likelihood(data, o), InputError);
  o.l2 = 0;
  IsingModel small;
  small.fields = VectorXd::Zero(3);
  small.couplings = MatrixXd::Zero(3, 3);
  o.warm_start = small;
  CHECK_THROWS_AS(fit_pseudo_likelihood(data, o), InputError);
}
