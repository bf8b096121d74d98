// Checkpoints (checkpoint.hpp) of refine_moments and coupling_significance: a run stopped at
// some point and resumed from the state it saved (after a JSON dump/parse round trip, as the
// command line stores it) must give the uninterrupted run's result bit for bit. The reference is
// the uninterrupted run itself with the same seed (exact equality of every number), so these
// checks need no statistical tolerance. Also: the states' validation on resume.
#include <doctest/doctest.h>

#include <cmath>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "../../lib/src/checkpoint_state.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/fit.hpp"
#include "spinfer/refine.hpp"
#include "spinfer/significance.hpp"
#include "spinfer/stats.hpp"

using namespace spinfer;
using nlohmann::json;

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

/// B rows drawn independently from the exact distribution of `m`.
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

/// Independent-unit start (fields atanh(m), no couplings).
IsingModel independent_start(const SpinMatrix& data) {
  const Moments mo = compute_moments(data, Convention::spin);
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = mo.mean.array().atanh().matrix();
  m.couplings = Eigen::MatrixXd::Zero(data.cols(), data.cols());
  return m;
}

/// What the command line does with a state: write it as text and read it back.
json round_trip(const json& state) { return json::parse(state.dump()); }

void require_same(const RefineResult& a, const RefineResult& b) {
  CHECK(a.model.fields == b.model.fields);  // exact equality, element by element
  CHECK(a.model.couplings == b.model.couplings);
  CHECK(a.iterations == b.iterations);
  CHECK(a.stop_reason == b.stop_reason);
  CHECK(a.warnings == b.warnings);
  CHECK(a.final_samples_per_iteration == b.final_samples_per_iteration);
  REQUIRE(a.trajectory.size() == b.trajectory.size());
  for (std::size_t k = 0; k < a.trajectory.size(); ++k) {
    CHECK(a.trajectory[k].epsilon_mean == b.trajectory[k].epsilon_mean);
    CHECK(a.trajectory[k].epsilon_correlation == b.trajectory[k].epsilon_correlation);
    CHECK(a.trajectory[k].samples == b.trajectory[k].samples);
    CHECK(a.trajectory[k].learning_rate == b.trajectory[k].learning_rate);
  }
}

struct Sampled {
  SpinMatrix data;
  IsingModel start;
  RefineOptions o;
};

Sampled sampled_case() {
  const IsingModel truth = random_model(6, 0.5, 0.3, 11);
  Sampled c{exact_draws(truth, 4000, 12), {}, {}};
  c.start = independent_start(c.data);
  c.o.expectations = "sampled";
  c.o.noise = "iid";
  c.o.seed = 5;
  c.o.threads = 2;
  c.o.max_iterations = 20;
  c.o.threshold = 0.05;   // out of reach: all 20 iterations run
  c.o.momentum = 0.5;     // so the velocities are part of the state
  c.o.patience = 4;       // so the learning rate halves within the run
  c.o.samples = 500;
  return c;
}

/// Runs with every_seconds = 0 (a state at every iteration) and a progress callback that stops at
/// the `stop_stage` report number `stop_at`; returns all states saved.
std::vector<json> run_and_stop(const Sampled& c, const std::string& stop_stage, int stop_at) {
  std::vector<json> saved;
  RefineOptions o = c.o;
  o.checkpoint.every_seconds = 0;
  o.checkpoint.save = [&](const json& s) { saved.push_back(round_trip(s)); };
  int seen = 0;
  o.progress = [&](const Progress& p) { return !(p.stage == stop_stage && ++seen == stop_at); };
  CHECK_THROWS_AS(refine_moments(c.data, c.start, o), Interrupted);
  return saved;
}

RefineResult resume_from(const Sampled& c, const json& state, int threads) {
  RefineOptions o = c.o;
  o.threads = threads;
  o.checkpoint.resume = state;
  return refine_moments(c.data, c.start, o);
}

}  // namespace

TEST_CASE("checkpoint: numbers survive the JSON round trip exactly, non-finite ones as strings") {
  const std::vector<double> v = {0.1, -1.0 / 3.0, 1e-300, 5e-324, -0.0, 1.7976931348623157e308,
                                 std::numeric_limits<double>::infinity(),
                                 -std::numeric_limits<double>::infinity()};
  const json state = {{"kind", "x"}, {"version", 1}, {"v", checkpoint::numbers(v)},
                      {"nan", checkpoint::number(std::nan(""))}};
  const json back = round_trip(state);
  const checkpoint::StateReader r(back, "test: ", "x", 1);
  const std::vector<double> w = r.numbers("v", std::int64_t(v.size()));
  for (std::size_t k = 0; k < v.size(); ++k) {
    CHECK(w[k] == v[k]);
    CHECK(std::signbit(w[k]) == std::signbit(v[k]));
  }
  CHECK(std::isnan(r.number("nan")));
  CHECK_THROWS_WITH_AS(r.numbers("v", 3), "test: \"v\" has 8 values, expected 3", InputError);
  CHECK_THROWS_WITH_AS(checkpoint::StateReader(back, "test: ", "y", 1),
                       "test: it was saved by \"x\", not \"y\"", InputError);
}

TEST_CASE("checkpoint: sampled refinement resumed from any saved iteration equals the uninterrupted run") {
  const Sampled c = sampled_case();
  const RefineResult full = refine_moments(c.data, c.start, c.o);
  REQUIRE(full.iterations == 20);
  // The run must exercise the carried state: a halved learning rate somewhere.
  bool halved = false;
  for (const auto& it : full.trajectory) halved = halved || it.learning_rate < c.o.learning_rate;
  CHECK(halved);

  // Stopped by the report of iteration 9: the state saved on the way out is the top of
  // iteration 9 (its evaluation is redone on resume).
  const std::vector<json> saved = run_and_stop(c, "boltzmann learning", 9);
  REQUIRE(saved.size() >= 2);
  const json& last = saved.back();
  CHECK(last["kind"] == "refine");
  CHECK(last["started"] == true);
  CHECK(last["iteration"] == 9);
  CHECK(last["trajectory"].size() == 8);
  CHECK(last["chains"].size() == std::size_t(c.o.chains));
  // Resumed with another thread count: the same numbers.
  require_same(resume_from(c, last, 1), full);
  // A periodic state from earlier (the top of iteration 4) resumes to the same result too.
  for (const json& s : saved)
    if (s["iteration"] == 4) require_same(resume_from(c, s, 2), full);
}

TEST_CASE("checkpoint: sampled refinement stopped inside the sampling of an iteration") {
  const Sampled c = sampled_case();
  const RefineResult full = refine_moments(c.data, c.start, c.o);
  // The sampler reports after every round (at least once per sampling call, the burn-in's
  // included); stopping at its 12th report lands inside some iteration's sampling.
  const std::vector<json> saved = run_and_stop(c, "boltzmann learning (sampling)", 12);
  REQUIRE(!saved.empty());
  CHECK(saved.back()["started"] == true);
  require_same(resume_from(c, saved.back(), 2), full);
}

TEST_CASE("checkpoint: refinement stopped before its first iteration saves a fresh state") {
  Sampled c = sampled_case();
  c.o.noise = "bootstrap";  // the data noise reports progress per replicate
  c.o.bootstrap_replicates = 20;
  c.o.max_iterations = 5;
  const RefineResult full = refine_moments(c.data, c.start, c.o);
  const std::vector<json> saved = run_and_stop(c, "boltzmann learning (data noise)", 3);
  REQUIRE(saved.size() == 1);
  CHECK(saved[0]["started"] == false);
  CHECK(!saved[0].contains("fields"));
  require_same(resume_from(c, saved[0], 2), full);
}

TEST_CASE("checkpoint: exact refinement resumed equals the uninterrupted run") {
  const IsingModel truth = random_model(5, 0.6, 0.3, 21);
  Sampled c{exact_draws(truth, 3000, 22), {}, {}};
  c.start = independent_start(c.data);
  c.o.expectations = "exact";
  c.o.noise = "iid";
  c.o.l2 = 0.01;
  const RefineResult full = refine_moments(c.data, c.start, c.o);
  REQUIRE(full.converged);
  REQUIRE(full.iterations >= 3);
  const std::vector<json> saved = run_and_stop(c, "boltzmann learning", 3);
  REQUIRE(!saved.empty());
  CHECK(saved.back()["expectations"] == "exact");
  CHECK(saved.back()["iteration"] == 3);
  const RefineResult resumed = resume_from(c, saved.back(), 1);
  require_same(resumed, full);
  CHECK(resumed.log_likelihood == full.log_likelihood);
  // Stopped inside the enumeration of iteration 2 (one chunk of states per iteration at N = 5).
  const std::vector<json> inside = run_and_stop(c, "boltzmann learning (exact expectations)", 2);
  REQUIRE(!inside.empty());
  CHECK(inside.back()["iteration"] == 2);
  require_same(resume_from(c, inside.back(), 2), full);
}

TEST_CASE("checkpoint: refine refuses a state that does not fit, naming what differs") {
  const Sampled c = sampled_case();
  const std::vector<json> saved = run_and_stop(c, "boltzmann learning", 3);
  REQUIRE(!saved.empty());
  const json good = saved.back();
  auto refused = [&](const json& state, RefineOptions o, const std::string& message) {
    o.checkpoint.resume = state;
    CHECK_THROWS_WITH_AS(refine_moments(c.data, c.start, o), doctest::Contains(message.c_str()), InputError);
  };
  RefineOptions other_seed = c.o;
  other_seed.seed = 6;
  refused(good, other_seed, "it was saved with seed 5, this run has seed 6");
  RefineOptions more_chains = c.o;
  more_chains.chains = 10;
  refused(good, more_chains, "it has 8 persistent chains, this run has 10");
  RefineOptions exact = c.o;
  exact.expectations = "exact";
  refused(good, exact, "it was saved with sampled expectations, this run uses exact");
  json wrong = good;
  wrong["kind"] = "significance";
  refused(wrong, c.o, "refine: resume state: it was saved by \"significance\", not \"refine\"");
  wrong = good;
  wrong["fields"].erase(0);
  refused(wrong, c.o, "\"fields\" has 5 values, expected 6");
  wrong = good;
  wrong["chains"][0] = "01x011";
  refused(wrong, c.o, "\"chains\" entry 1 has 'x' (expected 0/1)");
  wrong = good;
  wrong["trajectory"].erase(0);
  refused(wrong, c.o, "\"trajectory\" has 1 entries, expected 2");
  wrong = good;
  wrong.erase("window");
  refused(wrong, c.o, "missing \"window\"");
  refused(json::array(), c.o, "refine: resume state: expected a JSON object");
  RefineOptions negative = c.o;
  negative.checkpoint.every_seconds = -1;
  CHECK_THROWS_AS(refine_moments(c.data, c.start, negative), InputError);
}

namespace {

struct SignificanceCase {
  SpinMatrix data;
  SignificanceOptions o;
  Fitter fit;
};

SignificanceCase significance_case() {
  const IsingModel truth = random_model(6, 0.4, 0.2, 31);
  SignificanceCase c{exact_draws(truth, 1500, 32), {}, {}};
  c.o.bootstrap_replicates = 12;
  c.o.null_replicates = 6;
  c.o.seed = 9;
  FitOptions fo;
  fo.method = "mean-field";
  c.fit = [fo](const SpinMatrix& d) { return fit_model(d, fo); };
  return c;
}

void require_same(const SignificanceResult& a, const SignificanceResult& b) {
  CHECK(a.estimate == b.estimate);
  CHECK(a.standard_error == b.standard_error);
  CHECK(a.lower == b.lower);
  CHECK(a.upper == b.upper);
  CHECK(a.p_value == b.p_value);
  CHECK(a.q_value == b.q_value);
  CHECK(a.significant == b.significant);
  CHECK(a.null_abs == b.null_abs);
}

}  // namespace

TEST_CASE("checkpoint: significance resumed after a stop inside a refit equals the uninterrupted run") {
  const SignificanceCase c = significance_case();
  const SignificanceResult full = coupling_significance(c.data, c.fit, c.o);
  // The fitter throws Interrupted on its 16th call (as a refit stopped by its own progress
  // callback would): the full fit, 12 bootstrap refits and 2 surrogates are finished.
  SignificanceOptions o = c.o;
  std::vector<json> saved;
  o.checkpoint.every_seconds = 1e9;  // only the save on the way out
  o.checkpoint.save = [&](const json& s) { saved.push_back(round_trip(s)); };
  int calls = 0;
  const Fitter stopping = [&](const SpinMatrix& d) {
    if (++calls == 16) throw Interrupted("refit stopped");
    return c.fit(d);
  };
  CHECK_THROWS_AS(coupling_significance(c.data, stopping, o), Interrupted);
  REQUIRE(saved.size() == 1);
  CHECK(saved[0]["kind"] == "significance");
  CHECK(saved[0]["bootstrap"].size() == 12);
  CHECK(saved[0]["null"].size() == 2);
  SignificanceOptions r = c.o;
  r.checkpoint.resume = saved[0];
  int resumed_calls = 0;
  const Fitter counting = [&](const SpinMatrix& d) {
    ++resumed_calls;
    return c.fit(d);
  };
  require_same(coupling_significance(c.data, counting, r), full);
  CHECK(resumed_calls == 4);  // only the unfinished surrogates were refitted
}

TEST_CASE("checkpoint: significance stopped by its progress callback; states at every refit") {
  const SignificanceCase c = significance_case();
  const SignificanceResult full = coupling_significance(c.data, c.fit, c.o);
  SignificanceOptions o = c.o;
  std::vector<json> saved;
  o.checkpoint.every_seconds = 0;
  o.checkpoint.save = [&](const json& s) { saved.push_back(round_trip(s)); };
  o.progress = [](const Progress& p) { return p.done < 5; };  // stop after the 4th bootstrap refit
  CHECK_THROWS_AS(coupling_significance(c.data, c.fit, o), Interrupted);
  // One state after each refit that finished without a stop (the full fit and 3 bootstrap
  // refits), then the one on the way out (after the 4th bootstrap refit).
  REQUIRE(saved.size() == 5);
  CHECK(saved[0]["estimate"].size() == 6);
  CHECK(saved[0]["bootstrap"].empty());
  CHECK(saved.back()["bootstrap"].size() == 4);
  for (const json& s : {saved[0], saved.back()}) {
    SignificanceOptions r = c.o;
    r.checkpoint.resume = s;
    require_same(coupling_significance(c.data, c.fit, r), full);
  }
  // Replicates have their own streams: a state also continues a run asking for more of them.
  SignificanceOptions more = c.o;
  more.bootstrap_replicates = 15;
  more.null_replicates = 8;
  const SignificanceResult bigger = coupling_significance(c.data, c.fit, more);
  more.checkpoint.resume = saved.back();
  require_same(coupling_significance(c.data, c.fit, more), bigger);
}

TEST_CASE("checkpoint: significance refuses a state that does not fit") {
  const SignificanceCase c = significance_case();
  SignificanceOptions o = c.o;
  json state;
  o.checkpoint.every_seconds = 0;
  o.checkpoint.save = [&](const json& s) { state = round_trip(s); };
  o.progress = [](const Progress& p) { return p.done < 3; };
  CHECK_THROWS_AS(coupling_significance(c.data, c.fit, o), Interrupted);
  auto refused = [&](const json& s, SignificanceOptions r, const std::string& message) {
    r.checkpoint.resume = s;
    CHECK_THROWS_WITH_AS(coupling_significance(c.data, c.fit, r), doctest::Contains(message.c_str()), InputError);
  };
  SignificanceOptions other = c.o;
  other.block_length = 3;
  refused(state, other, "it has block_length " + state["block_length"].dump() + ", this run uses 3");
  other = c.o;
  other.bootstrap_replicates = 2;
  json three = state;  // 2 finished bootstrap replicates, plus one
  REQUIRE(three["bootstrap"].size() == 2);
  three["bootstrap"].push_back(three["bootstrap"][0]);
  refused(three, other, "it has 3 bootstrap replicates, more than the 2 of this run");
  other = c.o;
  other.convention = Convention::binary;
  refused(state, other, "its couplings are in the spin convention, this run reports binary");
  json wrong = state;
  wrong["bootstrap"][0].erase(0);
  refused(wrong, c.o, "\"bootstrap replicate 1\" has 14 values, expected 15");
  wrong = state;
  wrong["units"] = 7;
  refused(wrong, c.o, "it has units 7, the data have 6");
}
