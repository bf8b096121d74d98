// Lock-step groups of chains (sampler_groups.hpp) against every chain run alone: the reference is
// the single-chain kernels of sampler.cpp (EngineRequest::lock_step = false), and a chain's
// samples, energies and counters must be the same bits in any group, with any group size (partly
// filled groups, chains that stop one step before the others), on any thread count, across the
// periodic recomputation of the fields (every 1024 sweeps). Models cover each kernel: dense
// couplings on integer fields in groups of up to 16 (N = 5 and 13, N = 141: several blocks, three
// draw batches, a partial last block; N = 300: row additions in two passes of 256 and 48 units;
// a dense-storage ring: the coloured scan's permuted order), dense couplings whose sums need
// double fields (the deferred double kernel), CSR couplings, uniform couplings with degree 2, 4, 6 and one above the byte-shuffle
// table (degree 8: 17 levels, the portable loop), both conventions, heat bath and Metropolis,
// sequential and coloured scans. Uniform couplings run in groups of up to 64 chains: every group size from 1
// to 64 and groups of uneven sizes are checked, and ties of the 16-bit draw (one update in 2^16,
// settled from each chain's tie stream) happen in those runs, as often in groups as alone.
#include <doctest/doctest.h>

#include <algorithm>
#include <string>
#include <utility>
#include <vector>

#include "../../lib/src/sampler_engine.hpp"
#include "../../lib/src/sampler_groups.hpp"
#include "../../lib/src/sampler_kernels.hpp"
#include "random_models.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/sampler.hpp"

using namespace spinfer;

namespace {

IsingModel random_dense(int N, Convention c, std::uint64_t seed, double scale = 0.5) {
  return testing::uniform_random_model(N, c, seed, 0.6, scale);
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

detail::EngineResult run(const IsingModel& m, const SamplerOptions& o, bool lock_step,
                         std::int64_t smallest_group = 0) {
  detail::EngineRequest rq;
  rq.ladder = {o.temperature};
  rq.lock_step = lock_step;
  rq.smallest_group = smallest_group;
  return detail::run_engine(m, o, rq);
}

/// Chain c's rows of a run (rows are chain by chain).
std::vector<std::int64_t> rows_of(const SampleSet& s, std::int32_t c) {
  std::vector<std::int64_t> rows;
  for (std::size_t r = 0; r < s.chain.size(); ++r)
    if (s.chain[r] == c) rows.push_back(std::int64_t(r));
  return rows;
}

/// Every chain of `part` gives, row for row, the bits and energies of the same chain in `whole`
/// (a run of more chains, or with more samples per chain).
void check_prefix(const SampleSet& whole, const SampleSet& part, std::int32_t chains) {
  const std::int64_t N = whole.samples.cols();
  for (std::int32_t c = 0; c < chains; ++c) {
    const auto a = rows_of(whole, c), b = rows_of(part, c);
    REQUIRE(!b.empty());
    REQUIRE(b.size() <= a.size());
    for (std::size_t r = 0; r < b.size(); ++r) {
      CHECK(whole.energies[std::size_t(a[r])] == part.energies[std::size_t(b[r])]);
      const std::uint8_t* x = whole.samples.data() + a[r] * N;
      const std::uint8_t* y = part.samples.data() + b[r] * N;
      CHECK(std::equal(x, x + N, y));
    }
  }
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
  std::vector<Case> cases;  // uniform couplings: names starting with "uniform"
  for (Convention c : {Convention::spin, Convention::binary}) {
    const std::string conv = c == Convention::spin ? " spin" : " binary";
    cases.push_back({"dense" + conv, random_dense(13, c, 3), "dense"});
    // Several blocks of deferred field updates, a row tail (N mod 8) and two draw chunks (128).
    cases.push_back({"dense 141" + conv, random_dense(141, c, 5), "dense"});
    cases.push_back({"dense 5" + conv, random_dense(5, c, 7), "dense"});  // rows only in the tail
    // Several 256-unit passes of the integer kernel's row additions, a partial last block.
    cases.push_back({"dense 300" + conv, random_dense(300, c, 9, 0.05), "dense"});
    // Dense storage of a ring: the coloured scan's order is not the identity (3 colours), so
    // the integer fields are held in a permuted order.
    cases.push_back({"dense ring" + conv, uneven_ring(21, c), "dense"});
    // Coupling sums beyond 2^10: no integer fields (the double kernels), in groups of up to 8.
    cases.push_back({"wide dense" + conv, random_dense(13, c, 11, 200.0), "dense"});
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
          // 15 chains: groups of 8 + 7 or 15 (large enough for every kernel, Engine::min_group); 15 x 7
          // + 4 samples, so four chains take one step more than the others (their group steps
          // them alone at the end).
          o.chains = 15;
          o.samples = 15 * 7 + 4;
          o.threads = 1;
          const SampleSet alone = run(k.model, o, false).set;
          CHECK(alone.diagnostics.lock_step_groups == 0);
          const SampleSet grouped = run(k.model, o, true).set;
          // One thread: all 15 in one uniform-coupling group or one integer-field group (dense
          // couplings; AVX-512 only, elsewhere those chains run alone), else groups of 8 + 7.
          const bool integer = k.name.rfind("dense", 0) == 0;
          CHECK((grouped.diagnostics.field_resolution > 0) == integer);
          CHECK(grouped.diagnostics.lock_step_groups ==
                (k.name.rfind("uniform", 0) == 0 ? 1 : integer ? (std::string(isa) == "avx512" ? 1 : 0) : 2));
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
  // Uniform couplings (one group of up to 64 chains per thread) in both scans, and a model that is
  // not uniform (groups of up to 8).
  IsingModel uneven = uneven_ring(40, Convention::spin);
  for (const IsingModel& m : {ring(40, 2, 0.3, 0.05, Convention::spin), uneven})
    for (const char* scan : {"coloured", "sequential"}) {
      INFO(scan);
      SamplerOptions o;
      o.chains = 15;
      o.samples = 15 * 30;
      o.seed = 8;
      o.threads = 2;
      o.scan = scan;
      o.storage = "sparse";
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
}

TEST_CASE("uniform-coupling groups: any group size from 1 to 64, uneven groups, ties") {
  struct Case {
    std::string name;
    IsingModel model;
  };
  const std::vector<Case> cases = {
      {"degree 4 spin", ring(17, 2, 0.45, 0.1, Convention::spin)},
      {"degree 2 binary", ring(15, 1, 0.9, -0.4, Convention::binary)},
      {"degree 8 spin (portable loop)", ring(19, 4, 0.2, 0.05, Convention::spin)},
  };
  // (chains, threads): one group of that many chains, two groups of one chain, groups of 9 + 8,
  // 33 + 32, 64 + 63 and 44 + 43 + 43 chains (three groups: at most 64 chains each).
  const std::vector<std::pair<int, int>> runs = {{1, 1},  {2, 2},  {2, 1},  {3, 1},  {7, 1},  {8, 1},
                                                 {9, 1},  {17, 2}, {31, 1}, {32, 1}, {33, 1}, {63, 1},
                                                 {64, 1}, {65, 1}, {127, 2}, {130, 2}};
  constexpr int kAll = 130;
  for (const Case& k : cases)
    for (const char* method : {"gibbs", "metropolis"})
      for (const char* scan : {"sequential", "coloured"}) {
        SamplerOptions o;
        o.method = method;
        o.scan = scan;
        o.storage = "sparse";
        o.seed = 23;
        o.burn_in = 1030;  // past the first recomputation of the fields
        o.thin = 2;
        o.chains = kAll;
        o.samples = kAll * 6;
        o.threads = 2;
        // Reference: every chain alone (the single-chain kernels), 6 kept samples each.
        const std::int64_t ties0 = detail::uniform_ties();
        const SampleSet alone = run(k.model, o, false).set;
        const std::int64_t alone_ties = detail::uniform_ties() - ties0;
        CHECK(alone.diagnostics.lock_step_groups == 0);
        // 2.0-2.6 M updates: 31-40 ties expected (one in 2^16), none with probability below e^-30.
        CHECK(alone_ties > 0);
        for (const char* isa : {"generic", "avx2", "avx512"}) {
          if (!detail::use_group_kernel_isa(isa)) {
            MESSAGE("this CPU does not run the " << std::string(isa) << " lock-step kernels: not tested");
            continue;
          }
          for (const auto& [chains, threads] : runs) {
            INFO(std::string(isa) << ": " << k.name << ", " << method << ", " << scan << ", " << chains
                                  << " chains on " << threads << " threads");
            o.chains = chains;
            o.threads = threads;
            // Half the chains keep one sample more (their groups step them alone at the end).
            o.samples = chains * 5 + chains / 2;
            const SampleSet grouped = run(k.model, o, true, 1).set;
            CHECK(grouped.diagnostics.lock_step_groups == std::max<std::int64_t>((chains + 63) / 64, std::min(threads, chains)));
            check_prefix(alone, grouped, chains);
            if (chains == kAll) {
              // The same chains and steps as the reference: the same ties.
              o.samples = kAll * 6;
              const std::int64_t at = detail::uniform_ties();
              check_same(alone, run(k.model, o, true, 1).set);
              CHECK(detail::uniform_ties() - at == alone_ties);
            }
          }
        }
        detail::use_group_kernel_isa(nullptr);
      }
}

TEST_CASE("uniform-coupling groups: sweeps longer than the kernel's count flushes") {
  // 4800 positions per sweep: the AVX-512 kernel (the only one with these counts) widens its byte
  // counts every 16 positions and its 16-bit counts every 4096, so a sweep crosses both; energies
  // and states as alone. (The model is built dense, N^2 doubles: kept to one size and one copy.)
  const IsingModel m = ring(4800, 3, 0.2, -0.05, Convention::spin);
  for (const char* isa : {"avx512"}) {
    if (!detail::use_group_kernel_isa(isa)) {
      MESSAGE("this CPU does not run the avx512 lock-step kernels: not tested");
      continue;
    }
    for (const char* method : {"gibbs", "metropolis"})
      for (const char* scan : {"sequential", "coloured"}) {
        INFO(std::string(isa) << ", " << method << ", " << scan);
        SamplerOptions o;
        o.method = method;
        o.scan = scan;
        o.storage = "sparse";
        o.seed = 4;
        o.burn_in = 2;
        o.thin = 1;
        o.chains = 5;
        o.samples = 5 * 3;
        o.threads = 1;
        const SampleSet grouped = run(m, o, true, 1).set;
        CHECK(grouped.diagnostics.lock_step_groups == 1);
        check_same(run(m, o, false).set, grouped);
      }
  }
  detail::use_group_kernel_isa(nullptr);
}
