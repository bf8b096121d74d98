// Lock-step groups of chains (sampler_groups.hpp) against every chain run alone: the reference is
// the single-chain kernels of sampler.cpp (EngineRequest::lock_step = false), and a chain's
// samples, energies and counters must be the same bits in any group, with any group size (partly
// filled groups, chains that stop one step before the others), on any thread count, across the
// periodic recomputation of the fields (every 1024 sweeps). Models cover each kernel: dense and
// CSR couplings, uniform couplings with degree 2, 4, 6 and one above the permute table (degree 8:
// 17 levels), both conventions, heat bath and Metropolis, sequential and coloured scans.
#include <doctest/doctest.h>

#include <algorithm>
#include <string>
#include <vector>

#include "../../lib/src/sampler_engine.hpp"
#include "../../lib/src/sampler_groups.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/sampler.hpp"

using namespace spinfer;

namespace {

IsingModel random_dense(int N, Convention c, std::uint64_t seed) {
  Rng rng(seed, 0);
  IsingModel m;
  m.convention = c;
  m.fields = Eigen::VectorXd(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) m.fields(i) = 0.6 * (2 * rng.uniform() - 1);
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = 0.5 * (2 * rng.uniform() - 1);
  return m;
}

/// Ring of N units, each coupled with value K to its `reach` nearest units on either side
/// (degree 2 reach), field h everywhere.
IsingModel ring(int N, int reach, double K, double h, Convention c) {
  IsingModel m;
  m.convention = c;
  m.fields = Eigen::VectorXd::Constant(N, h);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i)
    for (int r = 1; r <= reach; ++r) m.couplings(i, (i + r) % N) = m.couplings((i + r) % N, i) = K;
  return m;
}

/// A ring whose couplings are not all equal (CSR storage, general kernel).
IsingModel uneven_ring(int N, Convention c) {
  IsingModel m = ring(N, 2, 0.4, 0.1, c);
  for (int i = 0; i < N; ++i) m.couplings(i, (i + 1) % N) = m.couplings((i + 1) % N, i) = 0.2 + 0.05 * (i % 3);
  return m;
}

detail::EngineResult run(const IsingModel& m, const SamplerOptions& o, bool lock_step) {
  detail::EngineRequest rq;
  rq.ladder = {o.temperature};
  rq.lock_step = lock_step;
  return detail::run_engine(m, o, rq);
}

void check_same(const SampleSet& a, const SampleSet& b) {
  REQUIRE(a.samples.rows() == b.samples.rows());
  const std::int64_t n = a.samples.rows() * a.samples.cols();
  CHECK(std::equal(a.samples.data(), a.samples.data() + n, b.samples.data()));
  CHECK(a.energies == b.energies);
  CHECK(a.chain == b.chain);
  CHECK(a.diagnostics.acceptance_rate == b.diagnostics.acceptance_rate);
  CHECK(a.diagnostics.burn_in == b.diagnostics.burn_in);
  CHECK(a.diagnostics.thin == b.diagnostics.thin);
  CHECK(a.diagnostics.updates == b.diagnostics.updates);
}

}  // namespace

TEST_CASE("lock-step groups: every chain gives the bits it gives alone") {
  struct Case {
    std::string name;
    IsingModel model;
    std::string storage;
  };
  std::vector<Case> cases;
  for (Convention c : {Convention::spin, Convention::binary}) {
    const std::string conv = c == Convention::spin ? " spin" : " binary";
    cases.push_back({"dense" + conv, random_dense(13, c, 3), "dense"});
    cases.push_back({"csr" + conv, uneven_ring(21, c), "sparse"});
    cases.push_back({"uniform degree 2" + conv, ring(19, 1, 0.7, 0.2, c), "sparse"});
    cases.push_back({"uniform degree 4" + conv, ring(23, 2, 0.35, -0.1, c), "sparse"});
    cases.push_back({"uniform degree 6" + conv, ring(29, 3, 0.2, 0.0, c), "sparse"});
    cases.push_back({"uniform degree 8" + conv, ring(31, 4, 0.15, 0.3, c), "sparse"});
  }
  // Every copy of the kernels this CPU runs (the others are reported as skipped).
  for (const char* isa : {"generic", "avx2", "avx512"}) {
    if (!detail::use_group_kernel_isa(isa)) {
      MESSAGE("this CPU does not run the " << std::string(isa) << " lock-step kernels: not tested");
      continue;
    }
    for (const Case& k : cases)
      for (const char* method : {"gibbs", "metropolis"})
        for (const char* scan : {"sequential", "coloured"}) {
          INFO(std::string(isa) << ": " << k.name << ", " << method << ", " << scan);
          SamplerOptions o;
          o.method = method;
          o.scan = scan;
          o.storage = k.storage;
          o.seed = 41;
          o.burn_in = 1030;  // past the first recomputation of the fields
          o.thin = 2;
          // 15 chains: groups of 8 + 7 (large enough for every kernel, Engine::min_group); 15 x 7
          // + 4 samples, so four chains take one step more than the others (their group steps
          // them alone at the end).
          o.chains = 15;
          o.samples = 15 * 7 + 4;
          o.threads = 1;
          const SampleSet alone = run(k.model, o, false).set;
          CHECK(alone.diagnostics.lock_step_groups == 0);
          const SampleSet grouped = run(k.model, o, true).set;
          CHECK(grouped.diagnostics.lock_step_groups == 2);
          check_same(alone, grouped);
          o.threads = 2;
          check_same(alone, run(k.model, o, true).set);
          // The first chain, in a one-chain run (too few chains for a group): the same bits.
          o.chains = 1;
          o.samples = 7;
          const SampleSet first = run(k.model, o, true).set;
          REQUIRE(first.samples.rows() == 7);
          const std::int64_t n = 7 * first.samples.cols();
          CHECK(std::equal(first.samples.data(), first.samples.data() + n, alone.samples.data()));
          CHECK(std::equal(first.energies.begin(), first.energies.end(), alone.energies.begin()));
        }
  }
  detail::use_group_kernel_isa(nullptr);
}

TEST_CASE("lock-step groups: automatic burn-in and persistent chains") {
  const IsingModel m = ring(40, 2, 0.3, 0.05, Convention::spin);
  SamplerOptions o;
  o.chains = 15;
  o.samples = 15 * 30;
  o.seed = 8;
  o.threads = 2;
  o.scan = "coloured";
  // The pilot tunes on all chains' energies: the same series, so the same burn-in and thinning.
  const SampleSet grouped = run(m, o, true).set;
  CHECK(grouped.diagnostics.lock_step_groups == 2);
  check_same(run(m, o, false).set, grouped);
  // continue_chains: the final states go back into ChainStates from the groups' storage.
  o.burn_in = 5;
  o.thin = 1;
  ChainStates a, b;
  for (int call = 0; call < 2; ++call) {
    o.seed = 100 + std::uint64_t(call);
    detail::EngineRequest rq;
    rq.ladder = {1.0};
    rq.persistent = &a;
    rq.lock_step = false;
    const SampleSet x = detail::run_engine(m, o, rq).set;
    rq.persistent = &b;
    rq.lock_step = true;
    const SampleSet y = detail::run_engine(m, o, rq).set;
    check_same(x, y);
    CHECK(a.active == b.active);
  }
}
