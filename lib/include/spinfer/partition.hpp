// Log partition function, likelihood, entropy and multi-information of models too large to
// enumerate (and exactly for small ones).
//
// Energies and log Z are in the model's own convention (model.hpp): E(v) = -h.v - sum_{i<j} J_ij
// v_i v_j, P(v) = exp(-E(v)) / Z, T = 1. Entropies and log-likelihoods are in nats.
//
// Both Monte Carlo estimators start from an independent reference model E_0(v) = -sum_i g_i v_i,
// whose log partition function is known in closed form:
//   ln Z_0 = sum_i ln(e^{g_i lo} + e^{g_i hi})
//          = sum_i ln(1 + e^{g_i})  (binary, lo = 0)   or   sum_i ln 2cosh g_i  (spin, lo = -1),
// and follow the path E_alpha = E_0 + alpha (E_1 - E_0), alpha in [0, 1], where E_1 is the model.
// E_alpha is itself an Ising model: fields (1 - alpha) g + alpha h, couplings alpha J.
// The reference fields g are the model's own fields ("fields": the couplings switched off) or the
// naive mean-field effective fields g_i = h_i + sum_j J_ij m_j at a self-consistent m ("mean-field",
// closer to the model, so the path is shorter; in the binary convention, where the couplings also
// shift the effective fields, it cut the AIS error 3x on a random N = 16 model). The choice changes
// the efficiency, never the value.
//
//  * Annealed importance sampling (Neal, "Annealed importance sampling", Stat. Comput. 11:125,
//    2001). Each run draws x_0 ~ P_0 exactly, then for k = 1..K
//    (alpha_k = k / K) adds -(alpha_k - alpha_{k-1}) (E_1 - E_0)(x) to its log weight and moves x
//    with `ais_sweeps` sequential Gibbs sweeps that leave P_{alpha_k} invariant. Z_1 / Z_0 =
//    E[w]; the estimate is ln Z_0 + ln mean(w) (log-mean-exp). By Jensen's inequality E[ln Zhat]
//    <= ln Z: the value is a stochastic lower bound, biased by about -error^2 / 2. Standard error:
//    the delta method, sd(w) / (sqrt(R) mean(w)), and a bootstrap over runs (diagnostics). Both are
//    unreliable when a few runs dominate: check the effective sample size of the weights,
//    (sum w)^2 / sum w^2, reported with a warning below R / 10.
//  * Thermodynamic integration: d ln Z_alpha / d alpha = -<E_1 - E_0>_alpha, so
//    ln Z_1 = ln Z_0 - int_0^1 <E_1 - E_0>_alpha d alpha. The integral is a
//    Gauss-Legendre rule with `ti_nodes` nodes; at each node the mean comes from the Monte Carlo
//    sampler (sampler.hpp, automatic burn-in and thinning unless set) with a batch-means standard
//    error. Error = sqrt(sum_k w_k^2 se_k^2) (independent nodes); the quadrature error is not
//    included (it is small when <E_1 - E_0>_alpha is smooth, i.e. no phase transition on the path).
//  * Exact enumeration (exact.hpp): N <= 24; "auto" takes it for N <= exact_max_units.
//
// Determinism: AIS run r draws from Rng(seed, r) and TI node k samples with a seed derived from
// (seed, k), so a seed gives the same result for every thread count.
#pragma once

#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/sampler.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct PartitionOptions {
  std::string method = "auto";        ///< "auto", "exact", "ais" or "thermodynamic"
  std::int64_t exact_max_units = 20;  ///< "auto" enumerates up to this N (at most 24), else AIS
  std::string base = "mean-field";    ///< reference model: "mean-field" or "fields" (see above);
                                      ///< mean-field falls back to fields (with a warning)
                                      ///< when its iteration does not converge
  // Annealed importance sampling
  std::int64_t ais_runs = 100;        ///< independent runs (>= 2)
  std::int64_t ais_steps = 1000;      ///< intermediate distributions K (>= 1), alpha_k = k / K
  std::int64_t ais_sweeps = 1;        ///< Gibbs sweeps per intermediate distribution (>= 1)
  std::int64_t bootstrap = 200;       ///< bootstrap replicates of the runs (0: none)
  // Thermodynamic integration, and the <E>_model sampling of model_entropy
  std::int64_t ti_nodes = 16;         ///< Gauss-Legendre nodes (1..200)
  std::int64_t samples = 4000;        ///< kept samples per node (and for <E>_model)
  std::int64_t chains = 4;            ///< chains per node
  std::int64_t burn_in = -1;          ///< sweeps; < 0: automatic (sampler.hpp)
  std::int64_t thin = -1;             ///< sweeps; < 0: automatic
  std::uint64_t seed = 0;
  int threads = 1;                    ///< <= 0: automatic (resolve_threads)
  ProgressCallback progress;          ///< false -> Interrupted
};

struct LogPartitionEstimate {
  double value = 0;                   ///< ln Z (model's convention)
  double error = 0;                   ///< standard error (0 when exact)
  std::string method;                 ///< "exact", "ais" or "thermodynamic"
  Convention convention = Convention::spin;
  bool lower_bound = false;           ///< AIS: E[value] <= ln Z (stochastic lower bound)
  std::string base;                   ///< reference model used ("" when exact)
  Eigen::VectorXd base_fields;        ///< g (empty when exact)
  double base_log_partition = 0;      ///< ln Z_0
  // AIS
  std::int64_t runs = 0, steps = 0, sweeps = 0;
  std::vector<double> log_weights;    ///< ln w per run
  double effective_runs = 0;          ///< (sum w)^2 / sum w^2
  double bootstrap_error = std::numeric_limits<double>::quiet_NaN();  ///< sd of the bootstrap
                                      ///< ln Zhat (NaN without AIS or bootstrap)
  // Thermodynamic integration
  std::vector<double> nodes;          ///< alpha_k, ascending
  std::vector<double> node_weights;   ///< Gauss-Legendre weights on [0, 1] (sum 1)
  std::vector<double> node_mean;      ///< <E_1 - E_0>_alpha_k
  std::vector<double> node_error;     ///< batch-means standard error of node_mean
  std::vector<double> node_rhat;      ///< split R-hat of the sampled energy at each node
  std::vector<std::string> warnings;
  double seconds = 0;
};

/// ln Z of the model. Throws InputError for an invalid model or options, Interrupted when the
/// progress callback returns false.
LogPartitionEstimate estimate_log_partition(const IsingModel& model,
                                            const PartitionOptions& options = {});

struct LikelihoodEstimate {
  double value = 0;         ///< mean ln P(row) per sample, weighted (nats)
  double error = 0;         ///< standard error, from ln Z only (<E>_data is exact)
  double mean_energy = 0;   ///< <E>_data (model's convention)
  double total_weight = 0;  ///< sum of the data's sample weights
  LogPartitionEstimate log_partition;
};

/// Mean log-probability per sample of the data's rows: -<E>_data - ln Z. The data's
/// bits are read as states (a row's convention does not matter). InputError if the columns differ.
LikelihoodEstimate log_likelihood_per_sample(const IsingModel& model, const SpinMatrix& data,
                                             const PartitionOptions& options = {});

struct EntropyEstimate {
  double value = 0;         ///< S = ln Z + <E>_model (nats)
  double error = 0;         ///< sqrt(error(ln Z)^2 + error(<E>)^2) (independent runs)
  double mean_energy = 0, mean_energy_error = 0;
  LogPartitionEstimate log_partition;
  SamplerDiagnostics energy_sampling;  ///< the <E>_model run (empty when exact)
};

/// Entropy of the model; exact (with error 0) when ln Z is computed exactly.
EntropyEstimate model_entropy(const IsingModel& model, const PartitionOptions& options = {});

/// S_1 = sum_i H2(p_i), p_i = P(unit i active) from `means` given in `convention`
/// (p = m for binary, (1 + m) / 2 for spin), H2(p) = -p ln p - (1 - p) ln(1 - p). Entropy of the
/// independent model with these means. InputError for a mean outside the range.
double independent_entropy(const Eigen::VectorXd& means, Convention convention);

/// Empirical entropy of the distinct row patterns (weights count as multiplicities).
struct PatternEntropy {
  double plug_in = 0;         ///< -sum_k f_k ln f_k over patterns, f_k = weight_k / n
  double miller_madow = 0;    ///< plug_in + (K - 1) / (2 n) (Miller 1955 bias correction)
  double error = 0;           ///< delta-method standard error: sqrt(Var(ln f) / n)
  std::int64_t distinct = 0;  ///< K, number of distinct patterns seen
  double samples = 0;         ///< n, total weight
  bool reliable = false;      ///< n >= 10 K (the plug-in bias (K - 1) / (2n) is then small)
};
PatternEntropy pattern_entropy(const SpinMatrix& data);

/// The fraction of the multi-information captured by a pairwise model (Schneidman, Berry, Segev,
/// Bialek, Nature 440:1007, 2006): I_2 / I_N = (S_1 - S_2) / (S_1 - S_N), with S_1 the
/// independent entropy at the data's means, S_2 the entropy of `model` (the pairwise model fitted
/// to the data) and S_N the empirical pattern entropy.
struct MultiInformation {
  double independent_entropy = 0;       ///< S_1 (data means)
  EntropyEstimate pairwise_entropy;     ///< S_2
  PatternEntropy pattern;               ///< S_N
  double multi_information = 0;         ///< I_N = S_1 - S_N (plug-in S_N)
  double multi_information_error = 0;   ///< delta method: sd(ln f(v) - sum_i ln f_i(v_i)) / sqrt(n)
  double multi_information_corrected = 0;  ///< S_1 - S_N with the Miller-Madow S_N
  double pairwise_information = 0;      ///< I_2 = S_1 - S_2
  double ratio = 0;                     ///< I_2 / I_N (NaN when I_N <= 0)
  double ratio_error = 0;               ///< from the errors of S_2 and I_N (S_1 treated as fixed)
  double ratio_corrected = 0;           ///< I_2 / I_N with the Miller-Madow S_N
  bool reliable = false;                ///< S_N reliable and I_N above 3 standard errors
  std::vector<std::string> warnings;
};
MultiInformation multi_information_ratio(const IsingModel& model, const SpinMatrix& data,
                                         const PartitionOptions& options = {});

/// n-point Gauss-Legendre rule on [0, 1]: nodes ascending, weights summing to 1.
void gauss_legendre_unit(std::int64_t n, std::vector<double>* nodes, std::vector<double>* weights);

}  // namespace spinfer
