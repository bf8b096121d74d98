#include "spinfer/check.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <set>

#include "spinfer/bootstrap.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/partition.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/stats.hpp"
#include "spinfer/version.hpp"

namespace spinfer {
namespace {

constexpr std::int64_t kBatches = 20;

// The four statistics of a (possibly weighted) sample, flattened in check order.
struct Flat {
  Eigen::VectorXd means, correlations, triplets, counts;
};

Flat flat_statistics(const SpinMatrix& s, Convention c,
                     const std::vector<std::array<std::int64_t, 2>>& pairs,
                     const std::vector<std::array<std::int64_t, 3>>& triples, int threads) {
  StatsOptions so;
  so.threads = threads;
  const Moments m = compute_moments(s, c, so);
  Flat f;
  f.means = m.mean;
  f.correlations.resize(Eigen::Index(pairs.size()));
  for (std::size_t k = 0; k < pairs.size(); ++k) f.correlations(Eigen::Index(k)) = m.connected(pairs[k][0], pairs[k][1]);
  const std::vector<double> t = connected_triplets(s, triples, c, threads);
  f.triplets = Eigen::Map<const Eigen::VectorXd>(t.data(), Eigen::Index(t.size()));
  f.counts = active_count_distribution(s, threads);
  return f;
}

std::vector<std::array<std::int64_t, 3>> random_triples(std::int64_t N, std::int64_t count,
                                                        std::uint64_t seed) {
  std::vector<std::array<std::int64_t, 3>> out;
  if (N < 3 || count <= 0) return out;
  const double all = double(N) * double(N - 1) * double(N - 2) / 6.0;
  const auto target = std::int64_t(std::min<double>(double(count), all));
  std::set<std::array<std::int64_t, 3>> seen;
  Rng rng(seed, 0x7219);
  while (std::int64_t(out.size()) < target) {
    std::array<std::int64_t, 3> t{std::int64_t(rng.below(std::uint64_t(N))),
                                  std::int64_t(rng.below(std::uint64_t(N))),
                                  std::int64_t(rng.below(std::uint64_t(N)))};
    std::sort(t.begin(), t.end());
    if (t[0] == t[1] || t[1] == t[2]) continue;
    if (seen.insert(t).second) out.push_back(t);
  }
  return out;
}

void fill_scores(Comparison& c) {
  const Eigen::Index n = c.data.size();
  c.z.resize(n);
  c.z_independent.resize(n);
  double s = 0, si = 0, w = 0, wi = 0, mx = 0;
  Eigen::Index used = 0;
  for (Eigen::Index k = 0; k < n; ++k) {
    const double var = c.data_se(k) * c.data_se(k) + c.model_se(k) * c.model_se(k);
    const double var_i = c.data_se(k) * c.data_se(k);
    if (!(var > 0) || !(var_i > 0)) {  // a statistic with no noise (e.g. P(K) for an unseen K)
      c.z(k) = c.z_independent(k) = std::numeric_limits<double>::quiet_NaN();
      continue;
    }
    c.z(k) = (c.model(k) - c.data(k)) / std::sqrt(var);
    c.z_independent(k) = (c.independent(k) - c.data(k)) / std::sqrt(var_i);
    s += c.z(k) * c.z(k);
    si += c.z_independent(k) * c.z_independent(k);
    w += std::abs(c.z(k)) < 2;
    wi += std::abs(c.z_independent(k)) < 2;
    mx = std::max(mx, std::abs(c.z(k)));
    ++used;
  }
  if (used) {
    c.normalised_error = std::sqrt(s / double(used));
    c.normalised_error_independent = std::sqrt(si / double(used));
    c.within_2sigma = w / double(used);
    c.within_2sigma_independent = wi / double(used);
  }
  c.max_abs_z = mx;
}

nlohmann::json vec(const Eigen::VectorXd& v) {
  nlohmann::json a = nlohmann::json::array();
  for (Eigen::Index k = 0; k < v.size(); ++k) {
    if (std::isfinite(v(k))) a.push_back(v(k));
    else a.push_back(nullptr);
  }
  return a;
}

nlohmann::json comparison_json(const Comparison& c) {
  return {{"data", vec(c.data)}, {"data_se", vec(c.data_se)}, {"model", vec(c.model)},
          {"model_se", vec(c.model_se)}, {"independent", vec(c.independent)}, {"z", vec(c.z)},
          {"z_independent", vec(c.z_independent)}};
}

}  // namespace

Eigen::VectorXd poisson_binomial(const Eigen::VectorXd& p) {
  Eigen::VectorXd dist = Eigen::VectorXd::Zero(p.size() + 1);
  dist(0) = 1.0;
  for (Eigen::Index i = 0; i < p.size(); ++i) {
    for (Eigen::Index k = i + 1; k >= 1; --k) dist(k) = dist(k) * (1 - p(i)) + dist(k - 1) * p(i);
    dist(0) *= 1 - p(i);
  }
  return dist;
}

CheckResult check_model(const IsingModel& model, const SpinMatrix& data, const CheckOptions& options) {
  validate_model(model, "model");
  const std::int64_t N = data.cols();
  if (model.size() != N)
    throw InputError("check: the model has " + std::to_string(model.size()) + " units but the data have " +
                     std::to_string(N));
  if (data.rows() < 2) throw InputError("check: the data need at least 2 samples");
  if (!model.names.empty() && !data.names().empty() && model.names != data.names())
    throw InputError("check: the model's unit names differ from the data's column names");
  const Convention conv = data.convention();
  CheckResult r;
  r.convention = conv;
  for (std::int64_t i = 0; i < N; ++i)
    for (std::int64_t j = i + 1; j < N; ++j) r.pairs.push_back({i, j});
  r.triples = random_triples(N, options.triplets, options.seed);

  // Data values and their block-bootstrap noise.
  const Flat d = flat_statistics(data, conv, r.pairs, r.triples, options.threads);
  BlockBootstrapOptions bo;
  bo.replicates = options.bootstrap_replicates;
  bo.block_length = options.block_length;
  bo.seed = options.seed;
  bo.threads = options.threads;
  bo.progress = options.progress;
  const DataNoise noise = bootstrap_noise(data, conv, r.triples, bo);
  r.block_length = noise.block_length;
  r.bootstrap_replicates = noise.replicates;

  // Model values: exact weights over all states, or Monte Carlo with batch-means errors.
  Flat m, mse;
  if (N <= options.exact_limit) {
    r.model_statistics = "exact";
    const SpinMatrix states = exact_weighted_states(model, conv, 1.0, options.threads);
    m = flat_statistics(states, conv, r.pairs, r.triples, options.threads);
    mse = {Eigen::VectorXd::Zero(m.means.size()), Eigen::VectorXd::Zero(m.correlations.size()),
           Eigen::VectorXd::Zero(m.triplets.size()), Eigen::VectorXd::Zero(m.counts.size())};
  } else {
    r.model_statistics = "sampled";
    SamplerOptions so = options.sampler;
    so.samples = options.model_samples > 0 ? options.model_samples
                                           : std::max<std::int64_t>(20000, 2 * data.rows());
    so.samples = std::max<std::int64_t>(so.samples, kBatches * so.chains);
    so.seed = options.seed;
    so.threads = options.threads;
    so.progress = options.progress;
    const SampleSet set = sample(model, so);
    SpinMatrix samples = set.samples;
    samples.set_convention(conv);
    r.model_samples = samples.rows();
    r.sampler_diagnostics = {{"rhat_energy", set.diagnostics.rhat_energy},
                             {"ess_energy", set.diagnostics.ess_energy},
                             {"rhat_magnetisation", set.diagnostics.rhat_magnetisation},
                             {"burn_in", set.diagnostics.burn_in},
                             {"thin", set.diagnostics.thin},
                             {"field_resolution", set.diagnostics.field_resolution},
                             {"warnings", set.diagnostics.warnings}};
    m = flat_statistics(samples, conv, r.pairs, r.triples, options.threads);
    // Batch means: statistics of 20 contiguous batches; se = sd / sqrt(batches).
    Flat s1{Eigen::VectorXd::Zero(m.means.size()), Eigen::VectorXd::Zero(m.correlations.size()),
            Eigen::VectorXd::Zero(m.triplets.size()), Eigen::VectorXd::Zero(m.counts.size())};
    Flat s2 = s1;
    for (std::int64_t b = 0; b < kBatches; ++b) {
      const std::int64_t lo = samples.rows() * b / kBatches, hi = samples.rows() * (b + 1) / kBatches;
      const Flat f = flat_statistics(samples.slice_rows(lo, hi), conv, r.pairs, r.triples, 1);
      s1.means += f.means, s2.means += f.means.cwiseAbs2();
      s1.correlations += f.correlations, s2.correlations += f.correlations.cwiseAbs2();
      s1.triplets += f.triplets, s2.triplets += f.triplets.cwiseAbs2();
      s1.counts += f.counts, s2.counts += f.counts.cwiseAbs2();
    }
    const double B = double(kBatches);
    auto se = [B](const Eigen::VectorXd& a, const Eigen::VectorXd& b) {
      return ((b - a.cwiseAbs2() / B) / (B - 1)).cwiseMax(0.0).cwiseSqrt() / std::sqrt(B);
    };
    mse = {se(s1.means, s2.means), se(s1.correlations, s2.correlations),
           se(s1.triplets, s2.triplets), se(s1.counts, s2.counts)};
  }

  // The independent model with the data's means.
  const Eigen::VectorXd p = conv == Convention::binary ? d.means : ((d.means.array() + 1.0) / 2.0).matrix();
  auto make = [](const std::string& name, const Eigen::VectorXd& dv, const Eigen::VectorXd& dse,
                 const Eigen::VectorXd& mv, const Eigen::VectorXd& mse_v, const Eigen::VectorXd& iv) {
    Comparison c;
    c.name = name;
    c.data = dv, c.data_se = dse, c.model = mv, c.model_se = mse_v, c.independent = iv;
    fill_scores(c);
    return c;
  };
  Eigen::VectorXd corr_se(Eigen::Index(r.pairs.size()));
  for (std::size_t k = 0; k < r.pairs.size(); ++k)
    corr_se(Eigen::Index(k)) = noise.connected_se(r.pairs[k][0], r.pairs[k][1]);
  const Eigen::VectorXd trip_se =
      Eigen::Map<const Eigen::VectorXd>(noise.triplet_se.data(), Eigen::Index(noise.triplet_se.size()));
  r.means = make("means", d.means, noise.mean_se, m.means, mse.means, d.means);
  r.correlations = make("correlations", d.correlations, corr_se, m.correlations, mse.correlations,
                        Eigen::VectorXd::Zero(d.correlations.size()));
  r.triplets = make("triplets", d.triplets, trip_se, m.triplets, mse.triplets,
                    Eigen::VectorXd::Zero(d.triplets.size()));
  r.active_counts = make("active_counts", d.counts, noise.count_se, m.counts, mse.counts, poisson_binomial(p));

  // Log-likelihood per sample of the independent model (exact).
  // The independent model fitted to these means has mean log-likelihood -S_1 on the same data.
  r.log_likelihood_independent = -independent_entropy(d.means, conv);
  r.log_likelihood = std::numeric_limits<double>::quiet_NaN();
  if (options.likelihood) {
    PartitionOptions po;
    po.seed = options.seed;
    po.threads = options.threads;
    po.progress = options.progress;
    const LikelihoodEstimate le = log_likelihood_per_sample(model, data, po);
    r.log_likelihood = le.value;
    r.log_likelihood_error = le.error;
    r.log_likelihood_exact = le.log_partition.method == "exact";
    const MultiInformation mi = multi_information_ratio(model, data, po);
    auto num = [](double v) { return std::isfinite(v) ? nlohmann::json(v) : nlohmann::json(nullptr); };
    r.information = {{"independent_entropy", num(mi.independent_entropy)},
                     {"pairwise_entropy", num(mi.pairwise_entropy.value)},
                     {"pairwise_entropy_error", num(mi.pairwise_entropy.error)},
                     {"pattern_entropy", num(mi.pattern.plug_in)},
                     {"multi_information", num(mi.multi_information)},
                     {"pairwise_information", num(mi.pairwise_information)},
                     {"ratio", num(mi.ratio)},
                     {"ratio_error", num(mi.ratio_error)},
                     {"ratio_corrected", num(mi.ratio_corrected)},
                     {"reliable", mi.reliable},
                     {"warnings", mi.warnings},
                     {"log_partition_method", le.log_partition.method}};
  }
  return r;
}

nlohmann::json check_to_json(const CheckResult& r, const std::vector<std::string>& names) {
  nlohmann::json summary = nlohmann::json::object();
  for (const Comparison* c : {&r.means, &r.correlations, &r.triplets, &r.active_counts}) {
    summary[c->name] = {{"normalised_error", c->normalised_error},
                        {"normalised_error_independent", c->normalised_error_independent},
                        {"within_2sigma", c->within_2sigma},
                        {"within_2sigma_independent", c->within_2sigma_independent},
                        {"max_abs_z", c->max_abs_z},
                        {"count", c->data.size()}};
  }
  nlohmann::json ll = {{"independent", r.log_likelihood_independent}, {"exact", r.log_likelihood_exact}};
  ll["model"] = std::isfinite(r.log_likelihood) ? nlohmann::json(r.log_likelihood) : nlohmann::json(nullptr);
  ll["model_error"] = r.log_likelihood_error;
  nlohmann::json j = {
      {"format", "spinfer-check"},
      {"format_version", 1},
      {"version", version()},
      {"convention", to_string(r.convention)},
      {"names", names},
      {"model_statistics", r.model_statistics},
      {"model_samples", r.model_samples},
      {"bootstrap", {{"replicates", r.bootstrap_replicates}, {"block_length", r.block_length}}},
      {"summary", summary},
      {"log_likelihood_per_sample", ll},
      {"information", r.information},
      {"means", comparison_json(r.means)},
      {"correlations", comparison_json(r.correlations)},
      {"triplets", comparison_json(r.triplets)},
      {"active_counts", comparison_json(r.active_counts)},
      {"sampler", r.sampler_diagnostics},
  };
  j["correlations"]["pairs"] = r.pairs;
  j["triplets"]["triples"] = r.triples;
  return j;
}

}  // namespace spinfer
