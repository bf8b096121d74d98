// Moment-matching refinement of a model (Boltzmann learning): fields and couplings are moved along
// the gradient of the mean log-likelihood until the model reproduces the data's means and pair
// correlations within their sampling noise (Ackley, Hinton & Sejnowski 1985, from memory; stopping rule in the style of Cocco & Monasson 2011).
//
// Everything is done in the spin convention (s in {-1,+1}); the result is returned in the start
// model's convention. With data means m_i^D = <s_i>_D and raw correlations c_ij^D = <s_i s_j>_D,
// the mean log-likelihood per sample with an optional L2 penalty on the couplings is
//   L(h, J) = sum_i h_i m_i^D + sum_{i<j} J_ij c_ij^D - log Z(h, J) - (l2 / 2) sum_{i<j} J_ij^2,
// a concave function whose gradient is the moment mismatch
//   dL/dh_i = m_i^D - <s_i>_model,   dL/dJ_ij = c_ij^D - <s_i s_j>_model - l2 J_ij
// (the Hessian is minus the model covariance of the sufficient statistics; Ackley, Hinton &
// Sejnowski 1985). At the maximum (l2 = 0) the model's moments equal the data's exactly.
//
// Expectations:
//   "exact"    model moments, log Z and the Fisher matrix (the covariance of the sufficient
//              statistics s_i, s_i s_j) by enumerating all 2^N states (exact.hpp; N <= 20).
//              Steps are Newton steps theta += F^-1 grad (Fisher-preconditioned Boltzmann
//              learning with learning rate 1), at most 1 in any parameter, halved until L does not
//              decrease, until every |gradient| <= exact_tolerance: the exact maximum-likelihood
//              (or L2-penalised) estimate. Cost per iteration O(2^N P^2), P = N(N+1)/2. Measured
//              (loaded 2-core machine, mean-field start, 20000 samples): N = 12 in 5 iterations,
//              0.14 s; N = 16 in 5 iterations, 2.4 s; N = 20 is about 50x slower per iteration.
//   "sampled"  model moments from persistent Gibbs/Metropolis chains (sampler.hpp,
//              continue_chains): the chains keep their states from one iteration to the next, so
//              they stay near equilibrium while the parameters move slowly.
//   "auto"     exact when N <= 16, else sampled.
//
// Sampled steps (our choice, stated because the literature gives only the idea: Ferrari, PRE 94, 023301, 2016): an
// approximate natural gradient, theta += rate * M^-1 grad, with a preconditioner M built from the
// data alone (Ferrari, PRE 94, 023301, 2016: the data covariance chi_D of the sufficient
// statistics f = (s_i, s_i s_j) is the Fisher matrix at the maximum for a well-specified model).
//   "full"      M = chi_D (P x P, P = N(N+1)/2; needs fourth-order data moments, O(T P^2) once).
//               Near the optimum a step of rate 1 is a Newton step: on N = 8 test data it
//               converges in a handful of iterations where plain gradient ascent oscillates.
//   "diagonal"  (for large N) the energy is rewritten on centred variables d_i = s_i - m_i^D,
//                 sum_i h_i s_i + sum_{i<j} J_ij s_i s_j = const + sum_i h'_i s_i + sum_{i<j} J_ij d_i d_j,
//                 h'_i = h_i + sum_j J_ij m_j^D,
//               with gradients g'_h = g_h and g'_J,ij = g_J,ij - m_i^D g_h,j - m_j^D g_h,i. There
//               the field block uses the data's connected correlation matrix C^D and each coupling
//               the data variance Var_D(d_i d_j) (exact from pair moments, because
//               d_i^2 = 1 + m_i^2 - 2 m_i s_i is linear in s_i); for independent units this is the
//               exact Fisher matrix. The direction is scaled by 1 / (largest eigenvalue of
//               M^-1 chi_D), found by power iteration with products chi_D v computed over the data
//               (at most 50000 rows), so collective modes cannot make the steps unstable.
//   "none"      plain gradient ascent, also scaled by 1 / (largest eigenvalue of chi_D).
//               It is much slower than "full" on strongly collective data (measured: N = 40,
//               SK-like couplings, 50000 samples: full converged in 48 iterations, 20 s; diagonal
//               had not after 300, its step scale being 1/39).
//   "auto"      full when P <= 1300 (N <= 50; chi_D then takes 13.5 MB), else diagonal.
// No parameter changes by more than max_step per iteration (far from the optimum chi_D is a poor
// curvature model); optional heavy-ball momentum.
//   Samples per iteration adapt: the Monte Carlo error of the moments is kept below half the
//   current error (so the gradient is mostly signal and the parameters' jitter stays below the
//   error), and below monte_carlo_ratio of the data noise once the errors are under the threshold
//   (that iteration is the stopping check).
//   Safeguards: when a reliably measured error (Monte Carlo error below half of it) grows to more
//   than twice the best of the last 5 reliable iterations, the parameters return to that
//   iteration's, the learning rate is halved and the momentum cleared; when the error has not
//   improved by 10% for `patience` iterations, the learning rate is halved.
//
// Errors against the data (in the style of Cocco & Monasson 2011): with sigma the data's sampling noise of each statistic,
//   epsilon_m = sqrt(mean_i ((m_i^model - m_i^D) / sigma(m_i))^2),
//   epsilon_c = the same over the pairs i<j for c_ij = <s_i s_j>,
//   z = (model - data) / sigma for every statistic (max |z| reported).
// sigma comes from the block bootstrap of the data (bootstrap.hpp; `noise = "bootstrap"`) or the
// independent-sample formula sigma^2 = (1 - m^2) / B, (1 - c^2) / B (`noise = "iid"`), B = rows
// (Kish effective size (sum w)^2 / sum w^2 for weighted data). sigma is floored at 1/B so a
// statistic that never varied in the data still gets a finite z.
//
// Stopping (sampled): each iteration's moments carry batch-means Monte Carlo errors (each chain's
// samples cut into equal consecutive batches, 32 in all per sampling call), summarised as
// monte_carlo_ratio = rms(se_MC / sigma). The run has converged at the first iteration whose plain
// epsilon_m and epsilon_c are both below `threshold` while its monte_carlo_ratio is at most
// `monte_carlo_ratio` (samples capped by `max_check_samples`); that iteration's model is returned
// (no step is taken after it). The trajectory also gives "debiased" epsilons,
// sqrt(max(0, eps^2 - mean(se_MC^2 / sigma^2))), for reading. The run also stops after
// `max_iterations` or `max_seconds` (converged = false), returning the last evaluated model.
// Exact expectations stop when the largest |gradient| <= exact_tolerance.
//
// Reproducibility: iteration t samples with seed derived from (seed, t), and chain c of it draws
// from its own stream, so the same seed gives the same result for every thread count.
//
// Checkpoints (checkpoint.hpp): the consistent points are the tops of the iterations. A state
// (kind "refine", version 1) holds expectations, units, seed and "started"; once the first
// iteration has been reached (after the data noise and, sampled, the burn-in) also "iteration"
// (the next to evaluate), "elapsed_seconds", the spin-convention "fields" and "couplings" (list
// of rows), the "trajectory" so far and the "warnings"; sampled ones add everything the loop
// carries: "samples" (of the next iteration), "learning_rate", the momentum velocities
// ("velocity_fields", "velocity_couplings"), the safeguard's "window" of recent (error2, fields,
// couplings), "best" and "since_best", and the persistent "chains" (one string of 0/1 per
// chain, 1 = +1). The random streams need no saving: iteration t draws from seeds derived from
// (seed, t). A state with "started": false (stopped during the data noise or the burn-in) resumes
// as a fresh run. The data noise and the preconditioner are recomputed on resume (they are
// deterministic). The elapsed time carries over, so max_seconds counts all runs together; a resumed
// run's result equals the uninterrupted run's bit for bit (the time budget aside).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/checkpoint.hpp"
#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct RefineOptions {
  std::string expectations = "auto";    ///< "exact", "sampled" or "auto" (exact when N <= 16)
  double l2 = 0;                        ///< L2 penalty (l2/2) sum_{i<j} J_ij^2 on the mean
                                        ///< log-likelihood per sample, spin-convention J
  std::int64_t max_iterations = 1000;   ///< iteration budget (> 0)
  double max_seconds = 0;               ///< wall-clock budget; 0 = none
  int threads = 1;                      ///< <= 0: automatic (resolve_threads)
  std::uint64_t seed = 0;
  ProgressCallback progress;            ///< after every iteration (and during long sampling)

  // ---- stopping rule and data noise (sampled; the epsilons are reported for exact too) ----
  double threshold = 1.0;               ///< converged when epsilon_m and epsilon_c are below it
  std::string noise = "bootstrap";      ///< "bootstrap" (block bootstrap) or "iid"
  std::int64_t bootstrap_replicates = 100;
  std::int64_t block_length = 0;        ///< rows per bootstrap block; 0 = automatic

  // ---- sampled expectations ----
  std::string preconditioner = "auto";  ///< "full", "diagonal", "none"; auto: full when
                                        ///< P = N(N+1)/2 <= 1300, else diagonal
  double learning_rate = 1.0;           ///< multiplies the (scaled) preconditioned direction
  double momentum = 0;                  ///< heavy-ball coefficient in [0, 1)
  double max_step = 0.25;               ///< largest change of any parameter in one iteration
  std::int64_t samples = 0;             ///< smallest samples per iteration (they adapt, see
                                        ///< above); 0 = automatic: max(1000, 20 N)
  std::int64_t chains = 8;              ///< persistent chains (>= 2, for the error estimate)
  std::int64_t sweeps_between_samples = 1;  ///< thinning of the persistent chains
  std::int64_t burn_in = 200;           ///< sweeps under the start model before iteration 1
  std::string sampler = "gibbs";        ///< "gibbs" or "metropolis"
  double monte_carlo_ratio = 0.3;       ///< a check's rms(se_MC / sigma) must be at most this
  std::int64_t max_check_samples = 0;   ///< cap on a check's samples; 0 = automatic: 1e8 / N
  std::int64_t patience = 20;           ///< iterations without 10% progress before the learning
                                        ///< rate halves

  // ---- exact expectations ----
  double exact_tolerance = 1e-10;       ///< stop when every |dL/dtheta| is at most this

  /// Saving and resuming (see "Checkpoints" above). A resume state must come from a run with
  /// the same data, start model and options (max_iterations and max_seconds may grow).
  CheckpointHooks checkpoint;
};

/// One iteration's errors, for the trajectory. For sampled expectations the epsilons include the
/// Monte Carlo noise of that iteration (see `monte_carlo_ratio`); `debiased_*` remove it.
struct RefineIteration {
  std::int64_t iteration = 0;           ///< 1-based
  double epsilon_mean = 0, epsilon_correlation = 0;
  double debiased_epsilon_mean = 0, debiased_epsilon_correlation = 0;
  double max_z_mean = 0, max_z_correlation = 0;
  double monte_carlo_ratio = 0;         ///< rms(se_MC / sigma); 0 for exact expectations
  double max_gradient = 0;              ///< largest |dL/dtheta| (with the L2 term)
  std::int64_t samples = 0;             ///< Monte Carlo samples used; 0 for exact
  double learning_rate = 0;             ///< 0 for exact (L-BFGS chooses its own steps)
  bool check = false;                   ///< the converged (stopping-check) evaluation
};

struct RefineResult {
  IsingModel model;                     ///< in the start model's convention; provenance filled
  std::string expectations;             ///< "exact" or "sampled" (what was used)
  std::int64_t iterations = 0;
  bool converged = false;
  std::string stop_reason;              ///< "converged", "iterations", "time" or
                                        ///< "line search" (exact: L-BFGS could not improve)
  /// Errors of the returned model (sampled: from its last evaluation, a check if converged).
  double epsilon_mean = 0, epsilon_correlation = 0;
  double max_z_mean = 0, max_z_correlation = 0;
  double monte_carlo_ratio = 0;
  double max_gradient = 0;
  double log_likelihood = 0;            ///< exact only: mean log-likelihood per sample (nats)
  std::vector<RefineIteration> trajectory;
  /// Data noise used (spin convention): sigma of the means and of <s_i s_j>.
  Eigen::VectorXd mean_sigma;
  Eigen::MatrixXd correlation_sigma;
  std::string noise;                    ///< "bootstrap" or "iid"
  std::int64_t block_length = 0;        ///< bootstrap only
  std::string preconditioner;           ///< sampled: the one used
  double step_scale = 1;                ///< sampled: 1 / largest eigenvalue of precond^-1 chi_D
  std::int64_t samples_per_iteration = 0;  ///< sampled: at the start (it adapts later)
  std::int64_t final_samples_per_iteration = 0;
  double seconds = 0;
  std::vector<std::string> warnings;
};

/// Refines `start` (any convention, same number of units as `data`) by moment matching. Throws
/// InputError on a size mismatch, bad options, constant units, exact expectations with N > 20,
/// or a resume state that does not fit (kind, version, expectations, sizes, seed);
/// NumericalError when the parameters diverge; Interrupted when the progress callback returns
/// false (after handing the state to options.checkpoint.save). Provenance: method
/// "boltzmann-learning", l2, iterations, converged, objective (exact: -L; sampled:
/// sqrt(epsilon_m^2 + epsilon_c^2)), samples = data rows, units, seed, version; extra: start_method, expectations, preconditioner, samples_per_iteration, chains,
/// noise, threshold, epsilon_mean, epsilon_correlation, stop_reason.
RefineResult refine_moments(const SpinMatrix& data, const IsingModel& start,
                            const RefineOptions& options = {});

}  // namespace spinfer
