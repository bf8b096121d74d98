// Per-unit (lock-step) optimisation: shards reproduce the full fit, checkpoints resume exactly.
// Oracles: the unsharded fit itself (a shard must follow bit-identical iterates, so the
// assembled model must equal it; the issue asks for 1e-12), the uninterrupted fit (resume),
// and the closed-form soft-thresholding solution of min 0.5 (x - a)^2 + c |x|
// (x* = sign(a) max(|a| - c, 0); Tibshirani 1996, "Regression shrinkage and selection via the
// lasso") for the OWL-QN branch of the optimiser.
#include <doctest/doctest.h>

#include <cmath>
#include <cstring>
#include <limits>
#include <random>

#include "../../lib/src/lockstep_lbfgs.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/fit.hpp"
#include "spinfer/unit_fits.hpp"

using namespace spinfer;
using Eigen::MatrixXd;
using Eigen::VectorXd;

namespace {

// Binary data with shared structure: units follow one of two latent drives.
SpinMatrix latent_data(int N, std::int64_t T, std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::vector<std::uint8_t> bits(std::size_t(T * N));
  for (std::int64_t t = 0; t < T; ++t) {
    const double z1 = u(rng) < 0.3 ? 1.0 : 0.0, z2 = u(rng) < 0.5 ? 1.0 : 0.0;
    for (int i = 0; i < N; ++i) {
      const double p = 0.15 + 0.5 * (i % 2 ? z1 : z2) * (0.4 + 0.1 * (i % 5));
      bits[std::size_t(t * N + i)] = u(rng) < p ? 1 : 0;
    }
  }
  return SpinMatrix(bits, T, N, Convention::binary);
}

double max_abs_diff(const IsingModel& a, const IsingModel& b) {
  return std::max((a.fields - b.fields).cwiseAbs().maxCoeff(),
                  (a.couplings - b.couplings).cwiseAbs().maxCoeff());
}

IsingModel sharded(const SpinMatrix& data, const FitOptions& o, int shards) {
  std::vector<UnitFits> parts;
  for (int k = shards - 1; k >= 0; --k)  // any order
    parts.push_back(fit_model_units(data, o, shard_units(data.cols(), k, shards)));
  return assemble_unit_fits(parts, data.convention());
}

}  // namespace

TEST_CASE("unit fits: shards assembled equal the unsharded fit (PLM L2, PLM L1, log-RISE, auto)") {
  const SpinMatrix data = latent_data(13, 4000, 5);
  struct Case {
    const char* method;
    std::optional<double> l1, l2;
    bool logarithmic;
    const char* representation;
  };
  const Case cases[] = {
      {"pseudo-likelihood", std::nullopt, 0.002, false, "dense"},     // whitened L-BFGS
      {"pseudo-likelihood", 0.003, 0.0, false, "sparse"},             // OWL-QN
      {"screening", std::nullopt, std::nullopt, true, "auto"},        // automatic l1, log-RISE
      {"pseudo-likelihood", std::nullopt, std::nullopt, false, "patterns"},  // automatic l2
  };
  for (const Case& c : cases) {
    CAPTURE(c.method);
    CAPTURE(c.representation);
    FitOptions o;
    o.method = c.method;
    o.l1 = c.l1;
    o.l2 = c.l2;
    o.logarithmic = c.logarithmic;
    o.representation = c.representation;
    o.tolerance = 1e-7;
    const IsingModel full = fit_model(data, o);
    for (int shards : {2, 5, 13}) {
      CAPTURE(shards);
      const IsingModel merged = sharded(data, o, shards);
      CHECK(max_abs_diff(full, merged) <= 1e-12);
      CHECK(merged.provenance.objective == doctest::Approx(full.provenance.objective).epsilon(1e-12));
      CHECK(merged.provenance.l1 == full.provenance.l1);
      CHECK(merged.provenance.l2 == full.provenance.l2);
      CHECK(merged.provenance.converged == full.provenance.converged);
    }
    // Thread count does not matter either.
    o.threads = 1;
    const IsingModel one = fit_model(data, o);
    CHECK(max_abs_diff(full, one) == 0.0);
  }
}

TEST_CASE("unit fits: above 200 units (whitening from one shared factor) shards equal the full fit") {
  // Per-unit PLM with L2 above 200 units whitens every unit from one factor of the data's second
  // moments, with the triangular solves done over fixed blocks of 32 units: shards whose edges
  // cut those blocks must still follow bit-identical iterates.
  const SpinMatrix data = latent_data(213, 2500, 9);
  FitOptions o;
  o.l2 = 0.003;
  o.tolerance = 1e-8;
  const IsingModel full = fit_model(data, o);
  CHECK(full.provenance.converged);
  CHECK(full.provenance.extra.at("preconditioning") == "whitened-shared");
  for (int shards : {3, 7}) {
    CAPTURE(shards);
    CHECK(max_abs_diff(full, sharded(data, o, shards)) == 0.0);
  }
  o.threads = 1;
  CHECK(max_abs_diff(full, fit_model(data, o)) == 0.0);
}

TEST_CASE("unit fits: assembly refuses missing, duplicated and mismatched parts") {
  const SpinMatrix data = latent_data(6, 1500, 9);
  FitOptions o;
  o.l2 = 0.01;
  const UnitFits a = fit_model_units(data, o, shard_units(6, 0, 2));
  const UnitFits b = fit_model_units(data, o, shard_units(6, 1, 2));
  CHECK_THROWS_WITH_AS(assemble_unit_fits({a}, Convention::spin),
                       doctest::Contains("3 units are fitted by no part"), InputError);
  CHECK_THROWS_WITH_AS(assemble_unit_fits({a, b, a}, Convention::spin),
                       doctest::Contains("is fitted by both part 1 and part 3"), InputError);
  FitOptions other = o;
  other.l2 = 0.02;
  const UnitFits c = fit_model_units(data, other, shard_units(6, 1, 2));
  CHECK_THROWS_WITH_AS(assemble_unit_fits({a, c}, Convention::spin),
                       doctest::Contains("used other settings"), InputError);
  // JSON round trip is exact.
  const UnitFits back = unit_fits_from_json(unit_fits_to_json(b), "b.json");
  CHECK(back.coefficients == b.coefficients);
  CHECK(back.fields == b.fields);
  CHECK(back.objective == b.objective);
  CHECK(max_abs_diff(assemble_unit_fits({a, back}, Convention::binary),
                     assemble_unit_fits({a, b}, Convention::binary)) == 0.0);
  // Bad shard numbers and unshardable settings.
  CHECK_THROWS_AS(shard_units(6, 2, 2), InputError);
  CHECK_THROWS_WITH_AS(shard_units(6, 0, 7), doctest::Contains("at most one shard per unit"), InputError);
  FitOptions sym = o;
  sym.symmetric = true;
  CHECK_THROWS_WITH_AS(fit_model_units(data, sym, {0, 1}), doctest::Contains("symmetric"), InputError);
  FitOptions tap = o;
  tap.method = "tap";
  CHECK_THROWS_WITH_AS(fit_model_units(data, tap, {0, 1}), doctest::Contains("computed at once"),
                       InputError);
}

TEST_CASE("unit fits: an interrupted fit resumed from its checkpoint equals the uninterrupted fit") {
  const SpinMatrix data = latent_data(11, 3000, 21);
  for (bool symmetric : {false, true}) {
    for (const char* penalty : {"l2", "auto-l1"}) {
      CAPTURE(symmetric);
      CAPTURE(penalty);
      FitOptions o;
      o.symmetric = symmetric;
      if (std::string(penalty) == "l2") o.l2 = 0.003;
      else o.l1 = kAutomaticPenalty;
      o.tolerance = 1e-8;
      const IsingModel straight = fit_model(data, o);

      // Stop after 3 rounds of the final fit; keep the last saved state.
      nlohmann::json saved;
      int saves = 0;
      FitOptions first = o;
      first.checkpoint.every_seconds = 0;  // save after every round
      first.checkpoint.save = [&](const nlohmann::json& s) {
        saved = s;
        ++saves;
      };
      first.progress = [](const Progress& p) {
        return !(p.stage == "pseudo-likelihood" && p.done >= 3);
      };
      CHECK_THROWS_AS(fit_model(data, first), Interrupted);
      REQUIRE(saves > 0);
      REQUIRE(saved.at("stage") == "final");
      // Through text, as the CLI stores it.
      const nlohmann::json state = nlohmann::json::parse(saved.dump());

      FitOptions second = o;
      second.checkpoint.resume = state;
      const IsingModel resumed = fit_model(data, second);
      CHECK(max_abs_diff(straight, resumed) == 0.0);
      CHECK(resumed.provenance.iterations == straight.provenance.iterations);

      FitOptions wrong = o;
      nlohmann::json bad = state;
      bad["optimiser"]["problems"].erase(0);
      wrong.checkpoint.resume = bad;
      CHECK_THROWS_AS(fit_model(data, wrong), InputError);
    }
  }
}

TEST_CASE("lock-step optimiser: OWL-QN reaches the soft-threshold solution, L-BFGS a quadratic's minimum") {
  // Problem k: 0.5 sum_j w_j (x_j - a_j)^2 (+ c |x_j| for k = 1); separable, so the minimiser is
  // x_j = a_j without L1 and soft-threshold(a_j, c / w_j) with it.
  const int n = 6;
  VectorXd a(n), w(n);
  a << 1.5, -0.2, 0.05, -3.0, 0.7, 0.0;
  w << 1.0, 2.0, 0.5, 4.0, 1.0, 3.0;
  const double c = 0.3;
  using spinfer::detail::LockstepMinimiser;
  std::vector<spinfer::detail::LockstepProblem> problems = {{n, n, 0.0}, {n, n, c}};
  spinfer::detail::LockstepSettings s;
  s.tolerance = 1e-12;
  LockstepMinimiser opt(problems, s);
  auto eval = [&](const std::vector<std::int64_t>& which, const std::vector<VectorXd>& x,
                  std::vector<double>& f, std::vector<VectorXd>& g, std::vector<double>& r) {
    for (std::int64_t k : which) {
      const VectorXd& xk = x[std::size_t(k)];
      f[std::size_t(k)] = 0.5 * (w.array() * (xk - a).array().square()).sum();
      g[std::size_t(k)] = (w.array() * (xk - a).array()).matrix();
      double res = 0;
      for (int j = 0; j < n; ++j) {
        const double gj = g[std::size_t(k)](j), cj = k == 1 ? c : 0.0;
        const double v = xk(j) > 0 ? std::abs(gj + cj) : xk(j) < 0 ? std::abs(gj - cj)
                                                                   : std::max(0.0, std::abs(gj) - cj);
        res = std::max(res, v);
      }
      r[std::size_t(k)] = res;
    }
  };
  opt.start({VectorXd::Zero(n), VectorXd::Constant(n, 0.1)}, eval);
  CHECK(opt.run(eval, nullptr));
  const auto& st = opt.states();
  CHECK(int(st[0].status) == int(spinfer::detail::LockstepStatus::converged));
  CHECK(int(st[1].status) == int(spinfer::detail::LockstepStatus::converged));
  for (int j = 0; j < n; ++j) {
    CAPTURE(j);
    CHECK(st[0].x(j) == doctest::Approx(a(j)).epsilon(1e-10));
    const double thr = c / w(j);
    const double expect = a(j) > thr ? a(j) - thr : a(j) < -thr ? a(j) + thr : 0.0;
    CHECK(std::abs(st[1].x(j) - expect) <= 1e-10);
  }
}

TEST_CASE("checkpoint number encoding is exact and rejects damaged text") {
  const std::vector<double> v = {0.0, -0.0, 1.0 / 3.0, -1e-310, 6.02214076e23,
                                 std::numeric_limits<double>::infinity(),
                                 std::numeric_limits<double>::quiet_NaN(), 42.0};
  for (std::size_t n = 0; n <= v.size(); ++n) {
    const std::string text = spinfer::detail::encode_doubles(v.data(), n);
    const std::vector<double> back = spinfer::detail::decode_doubles(text, "v");
    REQUIRE(back.size() == n);
    for (std::size_t k = 0; k < n; ++k)
      CHECK(std::memcmp(&back[k], &v[k], sizeof(double)) == 0);
  }
  CHECK_THROWS_AS(spinfer::detail::decode_doubles("abc", "v"), InputError);
  CHECK_THROWS_AS(spinfer::detail::decode_doubles("ab!d", "v"), InputError);
  CHECK_THROWS_AS(spinfer::detail::decode_doubles("AAAA", "v"), InputError);  // 3 bytes: not doubles
}
