// ln Z by exact enumeration, annealed importance sampling (partition_ais.cpp) or thermodynamic
// integration; the log-likelihood and entropy built on it. Formulas: partition.hpp.
#include "spinfer/partition.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <sstream>

#include "partition_internal.hpp"
#include "spinfer/chain_diagnostics.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {
namespace detail {
namespace {

constexpr double kPi = 3.14159265358979323846;

/// ln(e^a + e^b) without overflow.
double log_add_exp(double a, double b) {
  const double m = std::max(a, b);
  return m + std::log1p(std::exp(-std::abs(a - b)));
}

/// <v> of one unit under the field x (P(active) = 1 / (1 + exp(-(1 - lo) x))).
double unit_mean(double x, double lo) {
  const double span = 1.0 - lo;
  return lo + span / (1.0 + std::exp(-span * x));
}

/// A per-purpose seed derived from the user's seed (sampler runs take seeds, not streams).
std::uint64_t derived_seed(std::uint64_t seed, std::uint64_t purpose) {
  Rng r(seed, purpose);
  return r.next();
}

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

// Stream indices of the derived seeds: TI node k uses kNodeStream + k.
constexpr std::uint64_t kNodeStream = std::uint64_t(1) << 62;
constexpr std::uint64_t kEnergyStream = (std::uint64_t(1) << 62) - 1;

SamplerOptions sampler_options(const PartitionOptions& o, std::uint64_t seed, const std::string& stage) {
  SamplerOptions s;
  s.method = "gibbs";
  s.chains = o.chains;
  s.samples = o.samples;
  s.burn_in = o.burn_in;
  s.thin = o.thin;
  s.seed = seed;
  s.threads = o.threads;
  if (o.progress) {
    const ProgressCallback user = o.progress;
    s.progress = [user, stage](const Progress& p) {
      Progress q = p;
      q.stage = stage + ": " + p.stage;
      return user(q);
    };
  }
  return s;
}

void check_options(const PartitionOptions& o) {
  if (o.method != "auto" && o.method != "exact" && o.method != "ais" && o.method != "thermodynamic")
    throw InputError("log partition: method must be \"auto\", \"exact\", \"ais\" or \"thermodynamic\", got \"" +
                     o.method + "\"");
  if (o.base != "fields" && o.base != "mean-field")
    throw InputError("log partition: base must be \"fields\" or \"mean-field\", got \"" + o.base + "\"");
  if (o.exact_max_units < 0 || o.exact_max_units > kMaxExactUnits)
    throw InputError("log partition: exact_max_units must be in 0.." + std::to_string(kMaxExactUnits));
  if (o.ais_runs < 2) throw InputError("log partition: ais_runs must be >= 2");
  if (o.ais_steps < 1) throw InputError("log partition: ais_steps must be >= 1");
  if (o.ais_sweeps < 1) throw InputError("log partition: ais_sweeps must be >= 1");
  if (o.bootstrap < 0) throw InputError("log partition: bootstrap must be >= 0");
  if (o.ti_nodes < 1 || o.ti_nodes > 200) throw InputError("log partition: ti_nodes must be in 1..200");
  if (o.chains < 1) throw InputError("log partition: chains must be >= 1");
  if (o.samples < 8 * o.chains)
    throw InputError("log partition: samples must be at least 8 per chain (got " + std::to_string(o.samples) +
                     " for " + std::to_string(o.chains) + " chains)");
  if (o.thin == 0) throw InputError("log partition: thin must be >= 1 (or negative for automatic)");
}

}  // namespace

Eigen::VectorXd reference_fields(const IsingModel& model, const std::string& base,
                                 std::vector<std::string>* warnings) {
  if (base == "fields") return model.fields;
  // Naive mean field: m_i = <v_i> at the field h_i + sum_j J_ij m_j, solved by damped iteration.
  const double lo = model.convention == Convention::binary ? 0.0 : -1.0;
  const std::int64_t N = model.size();
  Eigen::VectorXd m(N);
  for (std::int64_t i = 0; i < N; ++i) m(i) = unit_mean(model.fields(i), lo);
  for (int it = 0; it < 5000; ++it) {
    const Eigen::VectorXd H = model.fields + model.couplings * m;
    Eigen::VectorXd next(N);
    for (std::int64_t i = 0; i < N; ++i) next(i) = unit_mean(H(i), lo);
    const double change = (next - m).cwiseAbs().maxCoeff();
    m = 0.5 * m + 0.5 * next;
    if (!std::isfinite(change)) break;
    if (change < 1e-10) return model.fields + model.couplings * m;
  }
  warnings->push_back("mean-field reference: the self-consistency iteration did not converge; "
                      "the model's own fields are used instead");
  return model.fields;
}

double independent_log_partition(const Eigen::VectorXd& g, Convention convention) {
  const double lo = convention == Convention::binary ? 0.0 : -1.0;
  double s = 0;
  for (Eigen::Index i = 0; i < g.size(); ++i) s += log_add_exp(g(i) * lo, g(i));
  return s;
}

void run_thermodynamic(const IsingModel& model, const PartitionOptions& o, LogPartitionEstimate& out) {
  const auto t0 = std::chrono::steady_clock::now();
  gauss_legendre_unit(o.ti_nodes, &out.nodes, &out.node_weights);
  const Eigen::VectorXd& g = out.base_fields;
  const std::int64_t N = model.size(), n = o.ti_nodes;
  const double lo = model.convention == Convention::binary ? 0.0 : -1.0;
  const std::int64_t batches = std::max<std::int64_t>(1, (32 + o.chains - 1) / o.chains);
  double integral = 0, variance = 0;
  for (std::int64_t k = 0; k < n; ++k) {
    const double a = out.nodes[std::size_t(k)];
    IsingModel path;  // E_alpha: fields (1 - a) g + a h, couplings a J
    path.convention = model.convention;
    path.fields = (1.0 - a) * g + a * model.fields;
    path.couplings = a * model.couplings;
    std::ostringstream stage;
    stage << "thermodynamic integration node " << (k + 1) << "/" << n;
    const SampleSet set = sample(path, sampler_options(o, derived_seed(o.seed, kNodeStream + std::uint64_t(k)), stage.str()));
    // E_1 - E_0 = (E_alpha - E_0) / alpha with E_0 = -g.v (O(N) per sample).
    ChainSeries series(std::size_t(o.chains));
    for (std::int64_t t = 0; t < set.samples.rows(); ++t) {
      const std::uint8_t* row = set.samples.row(t);
      double e0 = 0;
      for (std::int64_t i = 0; i < N; ++i) e0 -= g(i) * (row[i] ? 1.0 : lo);
      series[std::size_t(set.chain[std::size_t(t)])].push_back((set.energies[std::size_t(t)] - e0) / a);
    }
    const MeanWithError me = batch_means(series, batches);
    out.node_mean.push_back(me.mean);
    out.node_error.push_back(me.error);
    out.node_rhat.push_back(set.diagnostics.rhat_energy);
    for (const auto& w : set.diagnostics.warnings) out.warnings.push_back(stage.str() + ": " + w);
    if (set.diagnostics.rhat_energy > 1.05) {
      std::ostringstream w;
      w << stage.str() << ": split R-hat of the energy is " << set.diagnostics.rhat_energy
        << " (> 1.05): the chains disagree; raise samples or use fewer, longer chains";
      out.warnings.push_back(w.str());
    }
    const double wk = out.node_weights[std::size_t(k)];
    integral += wk * me.mean;
    variance += wk * wk * me.error * me.error;
  }
  out.value = out.base_log_partition - integral;
  out.error = std::sqrt(variance);
  out.seconds = seconds_since(t0);
}

}  // namespace detail

void gauss_legendre_unit(std::int64_t n, std::vector<double>* nodes, std::vector<double>* weights) {
  if (n < 1) throw InputError("Gauss-Legendre rule: need at least one node");
  nodes->assign(std::size_t(n), 0.0);
  weights->assign(std::size_t(n), 0.0);
  // Newton's method on P_n from Chebyshev-like guesses; P_n and P_{n-1} by the three-term
  // recurrence j P_j = (2j - 1) x P_{j-1} - (j - 1) P_{j-2}; w = 2 / ((1 - x^2) P_n'(x)^2)
  // (Abramowitz & Stegun 25.4.29). Roots come out descending; alpha = (1 - x) / 2 ascends.
  for (std::int64_t i = 0; i < n; ++i) {
    double x = std::cos(detail::kPi * (double(i) + 0.75) / (double(n) + 0.5));
    double dp = 1;
    for (int it = 0; it < 100; ++it) {
      double p0 = 1, p1 = x;
      for (std::int64_t j = 2; j <= n; ++j) {
        const double p2 = ((2.0 * double(j) - 1.0) * x * p1 - (double(j) - 1.0) * p0) / double(j);
        p0 = p1;
        p1 = p2;
      }
      dp = double(n) * (x * p1 - p0) / (x * x - 1.0);
      const double dx = p1 / dp;
      x -= dx;
      if (std::abs(dx) < 1e-16) break;
    }
    (*nodes)[std::size_t(i)] = 0.5 * (1.0 - x);
    (*weights)[std::size_t(i)] = 1.0 / ((1.0 - x * x) * dp * dp);  // half of 2 / (...) for [0, 1]
  }
}

LogPartitionEstimate estimate_log_partition(const IsingModel& model, const PartitionOptions& o) {
  validate_model(model, "model");
  detail::check_options(o);
  if (model.size() == 0) throw InputError("log partition: the model has no units");
  LogPartitionEstimate out;
  out.convention = model.convention;
  std::string method = o.method;
  if (method == "auto") method = model.size() <= o.exact_max_units ? "exact" : "ais";
  out.method = method;
  if (method == "exact") {
    const auto t0 = std::chrono::steady_clock::now();
    out.value = exact_log_partition(model, 1.0, o.threads);
    out.error = 0;
    out.seconds = detail::seconds_since(t0);
    return out;
  }
  out.base = o.base;
  out.base_fields = detail::reference_fields(model, o.base, &out.warnings);
  out.base_log_partition = detail::independent_log_partition(out.base_fields, model.convention);
  if (method == "ais")
    detail::run_ais(model, o, out);
  else
    detail::run_thermodynamic(model, o, out);
  return out;
}

LikelihoodEstimate log_likelihood_per_sample(const IsingModel& model, const SpinMatrix& data,
                                             const PartitionOptions& o) {
  validate_model(model, "model");
  if (data.cols() != model.size())
    throw InputError("log likelihood: the data have " + std::to_string(data.cols()) +
                     " columns but the model has " + std::to_string(model.size()) + " units");
  if (data.rows() == 0) throw InputError("log likelihood: the data have no rows");
  LikelihoodEstimate out;
  // <E>_data = -h.<v> - 1/2 sum_ij J_ij <v_i v_j> from the data's moments in the model's
  // convention (exact; J has a zero diagonal).
  StatsOptions so;
  so.threads = o.threads;
  const Moments mo = compute_moments(data, model.convention, so);
  out.mean_energy = -model.fields.dot(mo.mean) - 0.5 * model.couplings.cwiseProduct(mo.second).sum();
  out.total_weight = mo.total_weight;
  out.log_partition = estimate_log_partition(model, o);
  out.value = -out.mean_energy - out.log_partition.value;
  out.error = out.log_partition.error;
  return out;
}

EntropyEstimate model_entropy(const IsingModel& model, const PartitionOptions& o) {
  EntropyEstimate out;
  out.log_partition = estimate_log_partition(model, o);
  if (out.log_partition.method == "exact") {
    ExactOptions eo;
    eo.convention = model.convention;
    eo.threads = o.threads;
    const ExactStatistics st = exact_statistics(model, eo);
    out.mean_energy = st.mean_energy;
    out.value = st.entropy;
    return out;
  }
  const SampleSet set = sample(model, detail::sampler_options(o, detail::derived_seed(o.seed, detail::kEnergyStream),
                                                              "model energy"));
  ChainSeries series(std::size_t(o.chains));
  for (std::size_t t = 0; t < set.energies.size(); ++t)
    series[std::size_t(set.chain[t])].push_back(set.energies[t]);
  const MeanWithError me = batch_means(series, std::max<std::int64_t>(1, (32 + o.chains - 1) / o.chains));
  out.mean_energy = me.mean;
  out.mean_energy_error = me.error;
  out.energy_sampling = set.diagnostics;
  out.value = out.log_partition.value + out.mean_energy;
  out.error = std::sqrt(out.log_partition.error * out.log_partition.error + me.error * me.error);
  return out;
}

}  // namespace spinfer
