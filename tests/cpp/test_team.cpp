// Work shared over the ranks of a team (team.hpp): ranks are threads here (thread_team.hpp), so
// the plain build checks what MPI jobs rely on. Reference throughout: the same call made by one
// process without a team. Fits may differ from it only through the order of the additions
// (tolerance 1e-10); samples must be identical bit for bit (chain c draws from stream c wherever
// it runs).
#include <doctest/doctest.h>

#include <random>

#include "spinfer/fit.hpp"
#include "spinfer/sampler.hpp"
#include "spinfer/team.hpp"
#include "thread_team.hpp"

using namespace spinfer;
using spinfer::testing::run_on_threads;

namespace {

IsingModel random_model(int N, std::uint64_t seed, double scale) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = Eigen::VectorXd(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) m.fields(i) = 0.3 * g(rng) - 0.2;
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = scale * g(rng);
  return m;
}

SpinMatrix sampled_data(const IsingModel& m, std::int64_t rows, std::uint64_t seed) {
  SamplerOptions o;
  o.samples = rows;
  o.seed = seed;
  o.burn_in = 200;
  o.thin = 2;
  return sample(m, o).samples;
}

double max_difference(const IsingModel& a, const IsingModel& b) {
  return std::max((a.fields - b.fields).cwiseAbs().maxCoeff(),
                  (a.couplings - b.couplings).cwiseAbs().maxCoeff());
}

}  // namespace

TEST_CASE("team: shares cover the items in rank order") {
  for (std::int64_t n : {0, 1, 2, 7, 100}) {
    for (int K : {1, 2, 3, 8}) {
      std::int64_t next = 0;
      for (int r = 0; r < K; ++r) {
        const auto [b, e] = Team::share(n, r, K);
        CHECK(b == next);
        CHECK(e - b >= n / K);
        CHECK(e - b <= n / K + 1);
        next = e;
      }
      CHECK(next == n);
    }
  }
  CHECK_THROWS(Team::share(5, 3, 3));
}

TEST_CASE("team: a solo team returns its input") {
  const SoloTeam solo;
  std::vector<double> x = {1.5, -2.0};
  solo.sum(x.data(), x.size());
  CHECK(x == std::vector<double>{1.5, -2.0});
  CHECK(solo.all_gather(x) == x);
  CHECK(solo.gather(std::vector<std::uint8_t>{1, 2, 3}) == std::vector<std::uint8_t>{1, 2, 3});
}

TEST_CASE("team: thread ranks sum, gather and broadcast") {
  // Reference: the concatenation and sums written out by hand.
  const auto out = run_on_threads<std::vector<double>>(3, [](const Team& t) {
    std::vector<double> mine(std::size_t(t.rank()), double(t.rank()));  // rank r: r copies of r
    std::vector<double> all = t.all_gather(mine);
    std::vector<double> root = t.gather(mine);
    const double s = t.sum_value(double(t.rank() + 1));
    std::vector<double> b = t.rank() == 0 ? std::vector<double>{7, 8} : std::vector<double>{};
    t.broadcast(b);
    all.push_back(s);
    all.push_back(double(root.size()));
    all.insert(all.end(), b.begin(), b.end());
    return all;
  });
  CHECK(out[0] == std::vector<double>{1, 2, 2, 6, 3, 7, 8});
  CHECK(out[1] == std::vector<double>{1, 2, 2, 6, 0, 7, 8});
  CHECK(out[2] == std::vector<double>{1, 2, 2, 6, 0, 7, 8});
}

TEST_CASE("team: pseudo-likelihood and screening on 3 ranks equal the single-process fit") {
  const IsingModel truth = random_model(10, 5, 0.25);
  const SpinMatrix data = sampled_data(truth, 3001, 11);  // 3001: shares of unequal length
  struct Case {
    const char* method;
    bool symmetric;
    const char* representation;
    std::optional<double> l2, l1;
  };
  const Case cases[] = {
      {"pseudo-likelihood", false, "auto", std::nullopt, std::nullopt},  // held-out l2 choice
      {"pseudo-likelihood", true, "auto", std::nullopt, std::nullopt},
      {"pseudo-likelihood", false, "dense", 0.001, std::nullopt},
      {"pseudo-likelihood", true, "sparse", 0.001, std::nullopt},
      {"pseudo-likelihood", false, "patterns", std::nullopt, 0.002},  // OWL-QN
      {"screening", false, "auto", std::nullopt, 0.01},
  };
  for (const Case& c : cases) {
    INFO(c.method << (c.symmetric ? " symmetric " : " per-variable ") << c.representation);
    FitOptions o;
    o.method = c.method;
    o.symmetric = c.symmetric;
    o.representation = c.representation;
    o.l2 = c.l2;
    o.l1 = c.l1;
    o.threads = 1;
    const IsingModel plain = fit_model(data, o);
    const auto shared = run_on_threads<IsingModel>(3, [&](const Team& t) {
      FitOptions mine = o;
      mine.team = &t;
      return fit_model(data, mine);
    });
    for (const IsingModel& m : shared) {
      CHECK(max_difference(m, plain) < 1e-10);
      CHECK(m.provenance.iterations == plain.provenance.iterations);
      CHECK(m.provenance.l2 == doctest::Approx(plain.provenance.l2).epsilon(1e-12));
    }
    // Every rank took the same decisions from the same sums, so they agree exactly.
    CHECK(max_difference(shared[1], shared[0]) == 0.0);
    CHECK(max_difference(shared[2], shared[0]) == 0.0);
  }
}

TEST_CASE("team: weighted rows are shared like unweighted ones") {
  const IsingModel truth = random_model(6, 9, 0.4);
  SpinMatrix data = sampled_data(truth, 900, 3);
  std::vector<double> w(900);
  for (std::size_t t = 0; t < w.size(); ++t) w[t] = 0.5 + double(t % 7) / 4.0;
  data.set_weights(w);
  FitOptions o;
  o.l2 = 0.002;
  o.threads = 1;
  const IsingModel plain = fit_model(data, o);
  const auto shared = run_on_threads<IsingModel>(4, [&](const Team& t) {
    FitOptions mine = o;
    mine.team = &t;
    return fit_model(data, mine);
  });
  for (const IsingModel& m : shared) CHECK(max_difference(m, plain) < 1e-10);
}

TEST_CASE("team: chains spread over ranks give the single-process samples") {
  const IsingModel m = random_model(12, 21, 0.3);
  struct Case {
    std::int64_t chains, burn_in, thin;
    bool tempering;
  };
  // Automatic burn-in/thinning (pilot tuned on all chains), fixed, tempering, fewer chains
  // than ranks (an idle rank).
  for (const Case c : {Case{5, -1, -1, false}, Case{4, 50, 3, false}, Case{3, -1, 2, true},
                       Case{2, 20, 1, false}}) {
    INFO(c.chains << " chains, burn-in " << c.burn_in << ", thin " << c.thin);
    SamplerOptions o;
    o.chains = c.chains;
    o.samples = 1003;
    o.burn_in = c.burn_in;
    o.thin = c.thin;
    o.seed = 77;
    o.threads = 1;
    if (c.tempering) o.temperature_ladder = std::vector<double>{1.0, 1.6, 2.5};
    const SampleSet plain = sample(m, o);
    const auto shared = run_on_threads<SampleSet>(3, [&](const Team& t) {
      SamplerOptions mine = o;
      mine.team = &t;
      return sample(m, mine);
    });
    const SampleSet& root = shared[0];
    REQUIRE(root.samples.rows() == plain.samples.rows());
    CHECK(std::equal(plain.samples.data(), plain.samples.data() + plain.samples.rows() * 12,
                     root.samples.data()));
    for (const SampleSet& s : shared) {
      CHECK(s.energies == plain.energies);
      CHECK(s.chain == plain.chain);
      const auto &a = s.diagnostics, &b = plain.diagnostics;
      CHECK(a.burn_in == b.burn_in);
      CHECK(a.thin == b.thin);
      CHECK(a.rhat_energy == b.rhat_energy);
      CHECK(a.ess_magnetisation == b.ess_magnetisation);
      CHECK(a.acceptance_rate == b.acceptance_rate);
      CHECK(a.swap_acceptance == b.swap_acceptance);
      CHECK(a.updates == b.updates);
    }
    CHECK(shared[1].samples.rows() == 0);
    CHECK(shared[2].samples.rows() == 0);
  }
}
