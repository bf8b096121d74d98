// Work shared over the ranks of a team (team.hpp): ranks are threads here (thread_team.hpp), so
// the plain build checks what MPI jobs rely on. Reference throughout: the same call made by one
// process without a team. Fits must equal it bit for bit (row sums are added order-free, see
// lib/src/local_fields.hpp; the 1e-10 bound the MPI tests use is the promise to users), and so
// must samples (chain c draws from stream c wherever it runs).
#include <doctest/doctest.h>

#include <optional>
#include <random>
#include <string>

#include "../../lib/src/local_fields.hpp"
#include "spinfer/errors.hpp"
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

TEST_CASE("team: local-field sums on 2-4 ranks equal the single-process sums bit for bit") {
  // 40 units (three unit chunks), 21000 weighted rows (several segments per representation).
  const IsingModel truth = random_model(40, 8, 0.08);
  SpinMatrix data = sampled_data(truth, 21000, 4);
  std::vector<double> w(std::size_t(data.rows()));
  for (std::size_t t = 0; t < w.size(); ++t) w[t] = 1.0 + double(t % 5) / 8.0;
  data.set_weights(w);
  std::mt19937_64 rng(2);
  std::normal_distribution<double> g(0.0, 0.1);
  Eigen::MatrixXd theta(40, 40);
  Eigen::VectorXd h(40);
  for (int i = 0; i < 40; ++i) {
    h(i) = g(rng) - 0.5;
    for (int j = 0; j < 40; ++j) theta(i, j) = i == j ? 0.0 : g(rng);
  }
  std::vector<char> wanted(40, 0);
  wanted[3] = wanted[35] = 1;  // two of the three chunks
  struct Sums {
    Eigen::VectorXd loss, gh, subset_loss, means;
    Eigen::MatrixXd grad, moments;
  };
  auto all_sums = [&](const detail::LocalFields& f, detail::LocalLoss loss) {
    Sums s;
    f.evaluate(loss, theta, h, true, s.loss, s.grad, s.gh);
    Eigen::MatrixXd g2;
    Eigen::VectorXd gh2;
    s.subset_loss = Eigen::VectorXd::Constant(40, -1.0);
    f.evaluate(loss, theta, h, false, s.subset_loss, g2, gh2, &wanted);
    s.means = f.spin_means();
    s.moments = f.second_moments();
    return s;
  };
  for (const char* rep : {"dense", "sparse", "patterns-dense", "patterns-sparse"}) {
    for (auto loss : {detail::LocalLoss::pseudo_likelihood, detail::LocalLoss::screening}) {
      INFO(rep);
      const detail::PreparedData prep(data, rep, 1);
      const detail::LocalFields alone(prep, {{100, 20500}}, 2);
      const Sums ref = all_sums(alone, loss);
      for (int i = 0; i < 40; ++i)  // chunks without a wanted unit are left alone
        CHECK((ref.subset_loss(i) == -1.0 || ref.subset_loss(i) == ref.loss(i)));
      CHECK(ref.subset_loss(35) == ref.loss(35));
      if (std::string(rep) == "dense") CHECK(ref.subset_loss(20) == -1.0);  // 16-unit chunks
      for (int K : {2, 3, 4}) {
        CAPTURE(K);
        const auto got = run_on_threads<Sums>(K, [&](const Team& t) {
          const detail::LocalFields f(prep, {{100, 20500}}, 1, &t);
          return all_sums(f, loss);
        });
        for (const Sums& s : got) {
          CHECK(s.loss == ref.loss);
          CHECK(s.grad == ref.grad);
          CHECK(s.gh == ref.gh);
          CHECK(s.subset_loss == ref.subset_loss);
          CHECK(s.means == ref.means);
          CHECK(s.moments == ref.moments);
        }
      }
    }
  }
}

TEST_CASE("team: pseudo-likelihood and screening on 3 ranks equal the single-process fit") {
  // The thread ranks run with OpenBLAS at one thread (thread_team.hpp); so must the reference:
  // a few BLAS calls of the fit set-up change their last bits with OpenBLAS's own thread count.
  detail::SingleThreadedBlas one_blas_thread;
  // 20 units: two unit chunks; 12001 rows: several row segments for every representation.
  const IsingModel truth = random_model(20, 5, 0.2);
  const SpinMatrix data = sampled_data(truth, 12001, 11);
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
    INFO(std::string(c.method) << (c.symmetric ? " symmetric " : " per-variable ") << std::string(c.representation));
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
      CHECK(max_difference(m, plain) == 0.0);
      CHECK(m.provenance.iterations == plain.provenance.iterations);
      CHECK(m.provenance.l2 == plain.provenance.l2);
    }
  }
}

TEST_CASE("team: a per-variable fit stopped on 3 ranks resumes on any rank count to the same model") {
  // Units shared out over ranks (lib/src/rank_rounds.hpp): rank 0 stops every rank at a round
  // boundary and saves the optimiser state of all units in the one-process layout.
  detail::SingleThreadedBlas one_blas_thread;  // as the thread ranks (see above)
  const IsingModel truth = random_model(13, 21, 0.25);  // 13 units: shares of 4, 4, 5
  const SpinMatrix data = sampled_data(truth, 6000, 4);
  FitOptions o;
  o.l2 = 1e-4;
  o.tolerance = 1e-9;
  o.threads = 1;
  const IsingModel plain = fit_model(data, o);
  REQUIRE(plain.provenance.iterations > 6);

  std::optional<nlohmann::json> saved;
  const auto stopped = run_on_threads<int>(3, [&](const Team& t) {
    FitOptions mine = o;
    mine.team = &t;
    mine.checkpoint.every_seconds = 1e9;  // only the save that comes with the stop
    mine.checkpoint.save = [&](const nlohmann::json& state) {
      CHECK(t.root());  // only rank 0 receives the gathered state
      saved = nlohmann::json::parse(state.dump());
    };
    mine.progress = [&](const Progress& p) { return !t.root() || p.done < 4; };  // rank 0 stops
    try {
      fit_model(data, mine);
    } catch (const Interrupted&) {
      return 1;
    }
    return 0;
  });
  for (int r : stopped) CHECK(r == 1);  // every rank stopped, not only rank 0
  REQUIRE(saved.has_value());
  const auto& optimiser = saved->at("optimiser");
  CHECK(optimiser.at("problems").size() == 13);
  CHECK(optimiser.at("rounds") == 4);

  FitOptions resume = o;
  resume.checkpoint.resume = *saved;
  CHECK(max_difference(fit_model(data, resume), plain) == 0.0);  // one process
  for (int ranks : {2, 3, 13}) {
    const auto resumed = run_on_threads<IsingModel>(ranks, [&](const Team& t) {
      FitOptions mine = resume;
      mine.team = &t;
      return fit_model(data, mine);
    });
    for (const IsingModel& m : resumed) {
      INFO(ranks << " ranks");
      CHECK(max_difference(m, plain) == 0.0);
      CHECK(m.provenance.extra.at("unit_ranks") == ranks);
      CHECK(m.provenance.extra.at("evaluations") == plain.provenance.extra.at("evaluations"));
    }
  }
  // More ranks than units: the samples are shared out instead (still the same model).
  const SpinMatrix two = data.select_columns({0, 1});
  const IsingModel plain_two = fit_model(two, o);
  for (const IsingModel& m : run_on_threads<IsingModel>(3, [&](const Team& t) {
         FitOptions mine = o;
         mine.team = &t;
         return fit_model(two, mine);
       })) {
    CHECK(max_difference(m, plain_two) == 0.0);
    CHECK_FALSE(m.provenance.extra.contains("unit_ranks"));
  }
}

TEST_CASE("team: weighted rows are shared like unweighted ones") {
  detail::SingleThreadedBlas one_blas_thread;  // as the thread ranks (see above)
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
  for (const IsingModel& m : shared) CHECK(max_difference(m, plain) == 0.0);
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
