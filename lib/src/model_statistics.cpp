// Model statistics with batch-means standard errors, and temperature scans of E and C.
#include <algorithm>
#include <array>
#include <cmath>
#include <limits>

#include "sampler_engine.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/scan.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::int64_t batches_per_chain(std::int64_t chains) { return std::max<std::int64_t>(1, (32 + chains - 1) / chains); }

/// Mean and unbiased variance.
std::pair<double, double> mean_var(const double* x, std::int64_t n) {
  double m = 0;
  for (std::int64_t i = 0; i < n; ++i) m += x[i];
  m /= double(n);
  double v = 0;
  for (std::int64_t i = 0; i < n; ++i) v += (x[i] - m) * (x[i] - m);
  return {m, n > 1 ? v / double(n - 1) : 0.0};
}

/// Row ranges [begin, end) of the batches: each chain's rows (contiguous) cut into equal parts.
std::vector<std::pair<std::int64_t, std::int64_t>> batch_ranges(const std::vector<std::int32_t>& chain,
                                                                std::int64_t per_chain) {
  std::vector<std::pair<std::int64_t, std::int64_t>> out;
  const auto n = std::int64_t(chain.size());
  std::int64_t start = 0;
  while (start < n) {
    std::int64_t stop = start;
    while (stop < n && chain[std::size_t(stop)] == chain[std::size_t(start)]) ++stop;
    const std::int64_t len = (stop - start) / per_chain;
    if (len > 0)
      for (std::int64_t b = 0; b < per_chain; ++b) out.emplace_back(start + b * len, start + (b + 1) * len);
    start = stop;
  }
  return out;
}

/// Standard error of the mean of per-batch values, accumulated one batch at a time (Welford) so
/// memory stays O(size of one statistic vector) whatever the number of batches.
class BatchError {
 public:
  void add(const Eigen::VectorXd& x) {
    if (n_ == 0) {
      mean_ = Eigen::VectorXd::Zero(x.size());
      m2_ = Eigen::VectorXd::Zero(x.size());
    }
    ++n_;
    const Eigen::VectorXd d = x - mean_;
    mean_ += d / double(n_);
    m2_ += d.cwiseProduct(x - mean_);
  }
  /// sd / sqrt(n) per component; NaN with fewer than two batches.
  Eigen::VectorXd error(Eigen::Index size) const {
    if (n_ < 2) return Eigen::VectorXd::Constant(size, kNaN);
    return (m2_ / double(n_ - 1) / double(n_)).cwiseMax(0.0).cwiseSqrt();
  }
  std::int64_t count() const { return n_; }

 private:
  std::int64_t n_ = 0;
  Eigen::VectorXd mean_, m2_;
};

/// All statistics of rows [b, e) flattened into one vector:
/// means (N) | second (N*N) | connected (N*N) | P(K) (N+1) | E | C.
Eigen::VectorXd flat_statistics(const SampleSet& set, std::int64_t b, std::int64_t e, double T,
                                int threads) {
  const SpinMatrix& s = set.samples;
  const std::int64_t N = s.cols();
  const SpinMatrix view = SpinMatrix::view(s.row(b), e - b, N, s.convention(), nullptr, true);
  StatsOptions so;
  so.threads = threads;
  const Moments mo = compute_moments(view, s.convention(), so);
  const Eigen::VectorXd pk = active_count_distribution(view, threads);
  const auto [Em, Ev] = mean_var(set.energies.data() + b, e - b);
  Eigen::VectorXd out(N + 2 * N * N + N + 1 + 2);
  out << mo.mean, mo.second.reshaped(), mo.connected.reshaped(), pk, Em, Ev / (double(N) * T * T);
  return out;
}

struct EnergyStats {
  double E = 0, E_err = 0, C = 0, C_err = 0;
};

/// <E> and C = Var(E)/(N T^2) with batch-means errors from per-chain energy series.
EnergyStats energy_statistics(const ChainSeries& chains, std::int64_t N, double T) {
  const std::int64_t per = batches_per_chain(std::int64_t(chains.size()));
  std::vector<double> all;
  std::vector<std::array<double, 2>> batch;
  for (const auto& c : chains) {
    all.insert(all.end(), c.begin(), c.end());
    const std::int64_t len = std::int64_t(c.size()) / per;
    if (len == 0) continue;
    for (std::int64_t b = 0; b < per; ++b) {
      const auto [m, v] = mean_var(c.data() + b * len, len);
      batch.push_back({m, v / (double(N) * T * T)});
    }
  }
  const auto [m, v] = mean_var(all.data(), std::int64_t(all.size()));
  EnergyStats r;
  r.E = m;
  r.C = v / (double(N) * T * T);
  BatchError be;
  for (const auto& b : batch) be.add(Eigen::Vector2d(b[0], b[1]));
  const Eigen::VectorXd err = be.error(2);
  r.E_err = err(0);
  r.C_err = err(1);
  return r;
}

}  // namespace

ModelStatistics model_statistics(const IsingModel& model, const SamplerOptions& options) {
  const SampleSet set = sample(model, options);
  const std::int64_t N = set.samples.cols();
  const double T = options.temperature;
  ModelStatistics st;
  st.convention = model.convention;
  st.temperature = T;
  st.diagnostics = set.diagnostics;

  const Eigen::VectorXd full = flat_statistics(set, 0, set.samples.rows(), T, options.threads);
  const auto ranges = batch_ranges(set.chain, batches_per_chain(options.chains));
  BatchError be;
  for (const auto& [b, e] : ranges) be.add(flat_statistics(set, b, e, T, options.threads));
  const Eigen::VectorXd err = be.error(full.size());
  st.batches = std::int64_t(ranges.size());

  Eigen::Index at = 0;
  auto take_vector = [&](Estimate<Eigen::VectorXd>& e, Eigen::Index n) {
    e.value = full.segment(at, n);
    e.error = err.segment(at, n);
    at += n;
  };
  auto take_matrix = [&](Estimate<Eigen::MatrixXd>& e) {
    e.value = full.segment(at, N * N).reshaped(N, N);
    e.error = err.segment(at, N * N).reshaped(N, N);
    at += N * N;
  };
  take_vector(st.means, N);
  take_matrix(st.second);
  take_matrix(st.connected);
  take_vector(st.active_count, N + 1);
  st.energy = {full(at), err(at)};
  st.specific_heat = {full(at + 1), err(at + 1)};
  return st;
}

TemperatureScan temperature_scan(const IsingModel& model, const std::vector<double>& temperatures,
                                 const SamplerOptions& options, bool parallel_tempering) {
  if (temperatures.empty()) throw InputError("temperature_scan: no temperatures given");
  std::size_t ignored = 0;
  std::vector<double> ladder = detail::normalise_ladder(temperatures, temperatures[0], &ignored);
  TemperatureScan scan;
  scan.temperatures = ladder;
  scan.parallel_tempering = parallel_tempering;
  const std::int64_t N = model.size();
  auto add = [&](const ChainSeries& energies, double T) {
    const EnergyStats es = energy_statistics(energies, N, T);
    scan.energy.push_back(es.E);
    scan.energy_error.push_back(es.E_err);
    scan.specific_heat.push_back(es.C);
    scan.specific_heat_error.push_back(es.C_err);
  };

  if (parallel_tempering) {
    SamplerOptions o = options;
    o.temperature = ladder[0];
    o.temperature_ladder.reset();
    detail::EngineRequest rq;
    rq.ladder = ladder;
    rq.target_slot = 0;
    rq.keep_states = false;
    rq.all_slot_energies = true;
    const detail::EngineResult r = detail::run_engine(model, o, rq);
    for (std::size_t s = 0; s < ladder.size(); ++s) add(r.slot_energies[s], ladder[s]);
    scan.swap_acceptance = r.set.diagnostics.swap_acceptance;
    scan.runs.push_back(r.set.diagnostics);
  } else {
    for (std::size_t i = 0; i < ladder.size(); ++i) {
      SamplerOptions o = options;
      o.temperature = ladder[i];
      o.temperature_ladder.reset();
      std::uint64_t x = options.seed ^ (0xa0761d6478bd642fULL * (i + 1));
      o.seed = splitmix64(x);  // a separate family of streams per temperature
      if (options.progress) {
        const std::string prefix = "temperature " + std::to_string(i + 1) + "/" +
                                   std::to_string(ladder.size()) + ": ";
        o.progress = [prefix, cb = options.progress](const Progress& p) {
          Progress q = p;
          q.stage = prefix + p.stage;
          return cb(q);
        };
      }
      detail::EngineRequest rq;
      rq.ladder = {ladder[i]};
      rq.keep_states = false;
      const detail::EngineResult r = detail::run_engine(model, o, rq);
      ChainSeries energies(std::size_t(options.chains));
      for (std::size_t k = 0; k < r.set.energies.size(); ++k)
        energies[std::size_t(r.set.chain[k])].push_back(r.set.energies[k]);
      add(energies, ladder[i]);
      scan.runs.push_back(r.set.diagnostics);
    }
  }

  locate_specific_heat_peak(scan);
  return scan;
}

}  // namespace spinfer
