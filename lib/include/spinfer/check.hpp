// Model versus data: does a fitted pairwise model reproduce what was measured, within the data's
// sampling noise? (issue "Sampler, exact enumeration and model checking", item 3.)
//
// For each statistic — means, connected pairwise correlations, a random set of connected
// triplets, and P(K) (the distribution of the number of active units) — the check reports the
// data value, the model value, the data's sampling noise (block bootstrap over time, since bins
// are correlated; bootstrap.hpp), the model's Monte Carlo error (zero when exact), z-scores
//   z = (model - data) / sqrt(se_data^2 + se_model^2),
// the fraction of |z| < 2, and the normalised error of the trade
//   eps = sqrt(mean(z^2))
// (in the style of Cocco & Monasson 2011/2012, but with the bootstrap noise
// instead of the iid formula (1 - m^2)/B). eps ≈ 1 means the model fits within sampling noise;
// eps >> 1 is a misfit; eps << 1 hints at overfitting. The independent (fields-only) model with
// the data's means is the baseline throughout (its means are exact by construction; its
// correlations and triplets are zero; its P(K) is the Poisson-binomial distribution).
//
// Model statistics are exact (enumeration of all states) for N <= exact_limit, else from the
// Monte Carlo sampler with batch-means errors (20 contiguous batches of the thinned samples).
// All statistics are in the data's convention.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/sampler.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct CheckOptions {
  std::int64_t triplets = 200;              ///< random distinct triples to compare (0 = none)
  std::int64_t bootstrap_replicates = 100;  ///< block-bootstrap replicates for the data noise
  std::int64_t block_length = 0;            ///< 0 = automatic (bootstrap.hpp)
  std::int64_t exact_limit = 20;            ///< enumerate all states up to this many units
  std::int64_t model_samples = 0;           ///< Monte Carlo samples; 0 = max(20000, 2 T)
  SamplerOptions sampler;                   ///< method, chains, thinning... (samples/seed/threads
                                            ///< are overridden by the fields here)
  bool likelihood = true;                   ///< estimate log-likelihood and entropies
  std::uint64_t seed = 0;
  int threads = 1;
  ProgressCallback progress;
};

/// One statistic compared three ways. Vectors are aligned: entry k of every vector is the same
/// mean / pair / triple / K.
struct Comparison {
  std::string name;  ///< "means", "correlations", "triplets", "active_counts"
  Eigen::VectorXd data, data_se, model, model_se, independent;
  Eigen::VectorXd z, z_independent;
  double normalised_error = 0, normalised_error_independent = 0;
  double within_2sigma = 0, within_2sigma_independent = 0;  ///< fractions of |z| < 2
  double max_abs_z = 0;
};

struct CheckResult {
  Convention convention = Convention::binary;
  std::string model_statistics;                         ///< "exact" or "sampled"
  std::int64_t model_samples = 0;                       ///< 0 when exact
  std::int64_t block_length = 0, bootstrap_replicates = 0;
  std::vector<std::array<std::int64_t, 2>> pairs;       ///< (i, j), i < j, order of correlations
  std::vector<std::array<std::int64_t, 3>> triples;     ///< order of triplets
  Comparison means, correlations, triplets, active_counts;
  /// Mean log-likelihood per sample of the data (nats): exact for N <= 20, else by annealed
  /// importance sampling (partition.hpp; a stochastic lower bound) with its standard error.
  double log_likelihood = 0, log_likelihood_error = 0, log_likelihood_independent = 0;
  bool log_likelihood_exact = false;
  /// Entropies (nats) and the multi-information ratio I_2 / I_N (Schneidman et al. 2006), with
  /// `reliable` false when the data's pattern entropy cannot be trusted (too few samples per
  /// distinct pattern) or the multi-information is not clearly above zero.
  nlohmann::json information = nlohmann::json::object();
  nlohmann::json sampler_diagnostics = nlohmann::json::object();
};

CheckResult check_model(const IsingModel& model, const SpinMatrix& data, const CheckOptions& options);

/// The documented CHECK.json layout (format "spinfer-check", version 1; see README).
nlohmann::json check_to_json(const CheckResult& result, const std::vector<std::string>& names);

/// P(K) of independent units with activation probabilities p (Poisson-binomial, by dynamic
/// programming over units).
Eigen::VectorXd poisson_binomial(const Eigen::VectorXd& p);

}  // namespace spinfer
