// Private: many independent minimisations advanced in lock-step.
//
// Each problem k minimises F_k(x) = f_k(x) + c_k * sum_{j < p_k} |x_j| (f_k smooth and convex,
// c_k >= 0) with its own L-BFGS memory, its own backtracking line search and its own stopping
// test: L-BFGS two-loop recursion with the usual initial scaling s.y / y.y (Nocedal 1980; Nocedal
// & Wright 2006, Numerical Optimization, Alg. 7.4), Armijo backtracking with safeguarded
// quadratic interpolation (Nocedal & Wright 2006, §3.5), and for c_k > 0 the orthant-wise
// variant OWL-QN (Andrew & Gao 2007, "Scalable training of L1-regularized log-linear models":
// pseudo-gradient, direction sign constraint, orthant projection of the trial point).
//
// Why not one joint problem through a library optimiser: in lock-step, every round evaluates the
// trial points of all running problems with one call (so the caller can use matrix-matrix
// products over all of them), yet each problem's iterates depend only on its own objective.
// Hence (1) a problem that has converged stops costing anything, (2) any subset of the problems
// (a shard of a job array, the units of one MPI rank) follows exactly the same iterates as in the
// full run, and (3) the whole state is explicit, so a checkpoint resumes bit-identically.
#pragma once

#include <cstdint>
#include <functional>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

namespace spinfer::detail {

enum class LockstepStatus : int {
  running = 0,
  converged = 1,            ///< residual <= tolerance
  iteration_limit = 2,      ///< max_iterations accepted steps without converging
  line_search_failed = 3,   ///< no decrease along the direction (usually at rounding level)
};

/// Everything one problem needs to continue; serialisable (to_json / from_json).
struct LockstepState {
  Eigen::VectorXd x, g;        ///< accepted point, smooth gradient there
  double f = 0;                ///< F at x (smooth part + L1 term)
  double residual = 0;         ///< caller's optimality residual at x
  Eigen::VectorXd d;           ///< pending search direction (empty: a new one is needed)
  double step = 0;             ///< pending trial step along d
  double slope = 0;            ///< directional derivative used by the Armijo test
  std::int32_t trials = 0;     ///< trial steps tried along d
  Eigen::MatrixXd S, Y;        ///< L-BFGS pairs, column `slot` = pair number (ring buffer)
  Eigen::VectorXd rho;
  std::int32_t stored = 0, next = 0;  ///< pairs held, ring slot written next
  std::int64_t iterations = 0;        ///< accepted steps
  LockstepStatus status = LockstepStatus::running;
};

struct LockstepProblem {
  Eigen::Index dimension = 0;
  Eigen::Index penalised = 0;  ///< leading entries carrying the L1 term
  double l1 = 0;               ///< c_k (0: plain L-BFGS)
};

/// Evaluates the smooth parts f_k, their gradients and the caller's optimality residuals (for
/// L1 problems, of F: e.g. the minimum-norm subgradient) of the problems listed in `which` at
/// `x[k]`. Non-finite values are allowed (the line search then backs off). Entries of problems
/// not listed must be left untouched.
using LockstepEvaluate = std::function<void(
    const std::vector<std::int64_t>& which, const std::vector<Eigen::VectorXd>& x,
    std::vector<double>& f, std::vector<Eigen::VectorXd>& g, std::vector<double>& residual)>;

/// Called after every round (round number, sum of F over all problems); return false to stop
/// (the states stay consistent and can be saved).
using LockstepRoundCallback = std::function<bool(std::int64_t round, double objective_sum)>;

struct LockstepSettings {
  int memory = 10;
  std::int64_t max_iterations = 1000;  ///< accepted steps per problem
  int max_trials = 40;                 ///< trial steps per line search
  double tolerance = 1e-6;             ///< on the caller's residual
  int threads = 1;                     ///< for the per-problem direction updates
};

class LockstepMinimiser {
 public:
  LockstepMinimiser(std::vector<LockstepProblem> problems, LockstepSettings settings);

  /// Starts every problem at x0[k] (evaluates them once).
  void start(const std::vector<Eigen::VectorXd>& x0, const LockstepEvaluate& evaluate);
  /// Continues from saved states (as returned by `states()` / `from_json`).
  void restore(std::vector<LockstepState> states, std::int64_t rounds, std::int64_t evaluations);

  /// Runs rounds until no problem is running or the callback returns false. Returns true when
  /// no problem is running.
  bool run(const LockstepEvaluate& evaluate, const LockstepRoundCallback& after_round);

  const std::vector<LockstepState>& states() const { return states_; }
  std::int64_t rounds() const { return rounds_; }
  std::int64_t evaluations() const { return evaluations_; }  ///< sum over rounds of problems evaluated
  double objective_sum() const;

  /// The full state as JSON (doubles stored exactly, as base64 of little-endian bytes).
  nlohmann::json to_json() const;
  /// Checks the saved state against the problems (count, dimensions); throws InputError.
  void from_json(const nlohmann::json& saved);

 private:
  void new_direction(std::int64_t k);
  Eigen::VectorXd trial_point(std::int64_t k) const;
  Eigen::VectorXd pseudo_gradient(std::int64_t k) const;

  std::vector<LockstepProblem> problems_;
  LockstepSettings settings_;
  std::vector<LockstepState> states_;
  std::int64_t rounds_ = 0, evaluations_ = 0;
};

/// Exact text form of doubles for checkpoints: base64 of their little-endian IEEE bytes.
std::string encode_doubles(const double* values, std::size_t count);
std::vector<double> decode_doubles(const std::string& text, const std::string& what);

}  // namespace spinfer::detail
