// Closed-form inversions checked on exact moments (exact enumeration) against the exactness
// limits named below and one computed regression table:
//   Bethe exact on trees (Ricci-Tersenghi 2012; Nguyen & Berg 2012),
//   IP and SM exact for N = 2 (Roudi, Aurell & Hertz 2009; Sessak & Monasson 2009),
//   TAP = mean-field at m = 0 (Kappen & Rodriguez 1998),
//   mean-field bias O(beta^2) with fields (the O(J^2) TAP term it omits),
//   J = 0, h = atanh m for independent units,
//   SK N = 12 exact-moment bias table (values computed by enumeration elsewhere; a loose regression).
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <random>

#include "spinfer/closed_form.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/version.hpp"

using namespace spinfer;

namespace {

IsingModel spin_model(const Eigen::VectorXd& h, const Eigen::MatrixXd& J) {
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = h;
  m.couplings = J;
  return m;
}

Moments exact_moments(const IsingModel& m, Convention c = Convention::spin) {
  ExactOptions o;
  o.convention = c;
  return exact_statistics(m, o).moments;
}

double max_abs(const Eigen::MatrixXd& a) { return a.cwiseAbs().maxCoeff(); }

// SK couplings J_ij ~ N(0, beta^2 / N), fields ~ N(0, field_sd^2).
IsingModel sk(int N, double beta, double field_sd, std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  Eigen::VectorXd h(N);
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) {
    h(i) = field_sd * g(rng);
    for (int j = i + 1; j < N; ++j) J(i, j) = J(j, i) = beta * g(rng) / std::sqrt(double(N));
  }
  return spin_model(h, J);
}

// eps_J = ||J^ - J||_F / ||J||_F over off-diagonal entries.
double coupling_error(const IsingModel& fit, const IsingModel& truth) {
  return (fit.couplings - truth.couplings).norm() / truth.couplings.norm();
}

}  // namespace

TEST_CASE("closed form: Bethe is exact on a random tree with fields") {
  std::mt19937_64 rng(2024);
  std::uniform_real_distribution<double> u(0.2, 1.0);
  std::normal_distribution<double> g(0.0, 0.5);
  const int N = 8;
  Eigen::VectorXd h(N);
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) {
    h(i) = g(rng);
    if (i > 0) {  // attach to a random earlier node: a random tree
      const int parent = int(rng() % std::uint64_t(i));
      const double v = (rng() % 2 ? 1 : -1) * u(rng);
      J(i, parent) = J(parent, i) = v;
    }
  }
  const IsingModel truth = spin_model(h, J);
  for (Convention c : {Convention::spin, Convention::binary}) {  // binary moments are converted
    const IsingModel fit = fit_bethe(exact_moments(truth, c));
    CHECK(max_abs(fit.couplings - J) < 1e-10);
    CHECK(max_abs(fit.fields - h) < 1e-10);
    CHECK(fit.convention == Convention::spin);
  }
}

TEST_CASE("closed form: independent-pair, Sessak-Monasson and Bethe are exact for N = 2") {
  for (std::uint64_t seed : {1u, 2u, 3u}) {
    std::mt19937_64 rng(seed);
    std::normal_distribution<double> g(0.0, 0.8);
    Eigen::Vector2d h(g(rng), g(rng));
    Eigen::Matrix2d J = Eigen::Matrix2d::Zero();
    J(0, 1) = J(1, 0) = g(rng);
    const Moments mo = exact_moments(spin_model(h, J));
    const IsingModel ip = fit_independent_pair(mo), sm = fit_sessak_monasson(mo),
                     be = fit_bethe(mo);
    CHECK(std::abs(ip.couplings(0, 1) - J(0, 1)) < 1e-10);
    CHECK(max_abs(ip.fields - h) < 1e-10);
    CHECK(std::abs(sm.couplings(0, 1) - J(0, 1)) < 1e-10);
    CHECK(std::abs(be.couplings(0, 1) - J(0, 1)) < 1e-10);
    CHECK(max_abs(be.fields - h) < 1e-10);
  }
}

TEST_CASE("closed form: TAP couplings equal mean-field couplings at zero magnetisation") {
  const IsingModel truth = sk(8, 0.6, 0.0, 5);  // h = 0: m = 0 by symmetry
  const Moments mo = exact_moments(truth);
  CHECK(mo.mean.cwiseAbs().maxCoeff() < 1e-14);
  const IsingModel tap = fit_tap(mo), mf = fit_mean_field(mo);
  CHECK(max_abs(tap.couplings - mf.couplings) < 1e-12);
  CHECK(max_abs(tap.couplings - truth.couplings) > 1e-4);  // not trivially exact
}

TEST_CASE("closed form: mean-field coupling error is O(beta^2) with fields") {
  // With m != 0 the leading omitted term is TAP's 2 J^2 m_i m_j: absolute error
  // ~ beta^2, so the slope of log(error) against log(beta) is 2.
  const IsingModel base = sk(8, 1.0, 0.5, 9);
  std::vector<double> lb, le;
  for (double beta : {0.01, 0.02, 0.04, 0.08}) {
    IsingModel t = base;
    t.couplings *= beta;
    const IsingModel fit = fit_mean_field(exact_moments(t));
    lb.push_back(std::log(beta));
    le.push_back(std::log((fit.couplings - t.couplings).norm()));
  }
  const double n = double(lb.size());
  double sx = 0, sy = 0, sxx = 0, sxy = 0;
  for (std::size_t k = 0; k < lb.size(); ++k)
    sx += lb[k], sy += le[k], sxx += lb[k] * lb[k], sxy += lb[k] * le[k];
  const double slope = (n * sxy - sx * sy) / (n * sxx - sx * sx);
  CHECK(slope == doctest::Approx(2.0).epsilon(0.05));
}

TEST_CASE("closed form: independent units give J = 0 and h = atanh m for every method") {
  Eigen::VectorXd h(5);
  h << 0.3, -0.7, 1.1, 0.0, -0.2;
  const Moments mo = exact_moments(spin_model(h, Eigen::MatrixXd::Zero(5, 5)), Convention::binary);
  for (const std::string& method : closed_form_methods()) {
    CAPTURE(method);
    const IsingModel fit = fit_closed_form(mo, method);
    CHECK(max_abs(fit.couplings) < 1e-12);
    CHECK(max_abs(fit.fields - h) < 1e-12);  // atanh(tanh h) = h
    CHECK(fit.provenance.method == method);
    CHECK(fit.provenance.units == 5);
    CHECK(fit.provenance.iterations == 0);
    CHECK(fit.provenance.converged);
    CHECK(fit.provenance.version == version());
  }
}

TEST_CASE("closed form: SK N = 12 exact-moment bias ordering at beta = 0.4 (computed regression values)") {
  // Sheet §2.2(a) [C], h = 0, median eps_J over 10 instances: SM 0.0043 < Bethe 0.012 <
  // nMF 0.032 < IP 0.342. Our instances differ from the ones those values came from, so values are checked to a factor 1.6
  // (measured here: 0.0037, 0.0134, 0.0307, 0.303).
  const std::vector<std::string> methods = {"sessak-monasson", "bethe", "mean-field",
                                            "independent-pair"};
  const std::vector<double> reference = {0.0043, 0.012, 0.032, 0.342};
  std::vector<std::vector<double>> errs(methods.size());
  for (std::uint64_t seed = 100; seed < 110; ++seed) {
    const IsingModel truth = sk(12, 0.4, 0.0, seed);
    const Moments mo = exact_moments(truth);
    for (std::size_t k = 0; k < methods.size(); ++k)
      errs[k].push_back(coupling_error(fit_closed_form(mo, methods[k]), truth));
  }
  std::vector<double> median;
  for (auto& e : errs) {
    std::sort(e.begin(), e.end());
    median.push_back(0.5 * (e[4] + e[5]));
  }
  for (std::size_t k = 0; k < methods.size(); ++k) {
    CAPTURE(methods[k]);
    CHECK(median[k] > reference[k] / 1.6);
    CHECK(median[k] < reference[k] * 1.6);
    if (k + 1 < methods.size()) CHECK(median[k] < median[k + 1]);
  }
}

TEST_CASE("closed form: a duplicated unit makes C singular; shrinkage makes it finite") {
  const IsingModel truth = sk(4, 0.5, 0.3, 17);
  const Moments base = exact_moments(truth);
  Moments dup;
  dup.convention = Convention::spin;
  const std::vector<int> src = {0, 1, 2, 3, 0};  // unit 5 copies unit 1
  dup.mean.resize(5);
  dup.second.resize(5, 5);
  dup.connected.resize(5, 5);
  for (int i = 0; i < 5; ++i) {
    dup.mean(i) = base.mean(src[std::size_t(i)]);
    for (int j = 0; j < 5; ++j) {
      dup.second(i, j) = base.second(src[std::size_t(i)], src[std::size_t(j)]);
      dup.connected(i, j) = base.connected(src[std::size_t(i)], src[std::size_t(j)]);
    }
  }
  for (const char* method : {"mean-field", "tap", "sessak-monasson", "bethe"}) {
    CAPTURE(method);
    try {
      fit_closed_form(dup, method);
      FAIL("expected NumericalError");
    } catch (const NumericalError& e) {
      const std::string msg = e.what();
      CHECK(msg.find("condition number") != std::string::npos);
      CHECK(msg.find("pair (unit 1, unit 5)") != std::string::npos);
    }
  }
  CHECK_THROWS_WITH_AS(fit_independent_pair(dup),
                       doctest::Contains("pair (unit 1, unit 5): the pair never takes the state"),
                       NumericalError);
  ClosedFormOptions o;
  o.shrinkage = 0.05;
  for (const std::string& method : closed_form_methods()) {
    CAPTURE(method);
    const IsingModel fit = fit_closed_form(dup, method, o);
    CHECK(fit.couplings.allFinite());
    CHECK(fit.fields.allFinite());
    CHECK(fit.provenance.extra["shrinkage"].get<double>() == 0.05);
  }
}

TEST_CASE("closed form: no real root is an error naming the pair, or an opt-in fallback") {
  // A valid two-unit table with m = (0.8, 0.8) and C_12 = -0.03 (all four cells positive):
  // 1 - 8 (C^-1)_12 m_1 m_2 = -0.19 < 0, so TAP has no real coupling.
  Moments mo;
  mo.convention = Convention::spin;
  mo.mean = Eigen::Vector2d(0.8, 0.8);
  mo.connected.resize(2, 2);
  mo.connected << 0.36, -0.03, -0.03, 0.36;
  CHECK_THROWS_WITH_AS(fit_tap(mo), doctest::Contains("pair (unit 1, unit 2): no real TAP coupling"),
                       NumericalError);
  ClosedFormOptions o;
  o.mean_field_fallback = true;
  const IsingModel tap = fit_tap(mo, o), mf = fit_mean_field(mo);
  CHECK(tap.couplings(0, 1) == doctest::Approx(mf.couplings(0, 1)));
  CHECK(tap.provenance.extra["fallback_pairs"].get<std::int64_t>() == 1);
  // The pair model is still exactly recovered by independent-pair (a 2x2 table always is).
  CHECK(fit_independent_pair(mo).couplings.allFinite());
}

TEST_CASE("closed form: bad input") {
  Moments mo;
  mo.convention = Convention::spin;
  mo.mean = Eigen::Vector2d(1.0, 0.2);
  mo.connected = Eigen::Matrix2d::Identity() * 0.5;
  CHECK_THROWS_WITH_AS(fit_mean_field(mo), doctest::Contains("unit 1 has |m| = 1"), NumericalError);
  mo.mean(0) = 0.1;
  CHECK_THROWS_WITH_AS(fit_closed_form(mo, "newton"), doctest::Contains("choose one of: mean-field"),
                       InputError);
  ClosedFormOptions bad;
  bad.shrinkage = 1.5;
  CHECK_THROWS_AS(fit_tap(mo, bad), InputError);
  mo.connected(0, 1) = std::nan("");
  CHECK_THROWS_AS(fit_tap(mo), InputError);
  mo.connected = Eigen::Matrix3d::Identity();
  CHECK_THROWS_AS(fit_bethe(mo), InputError);
}
