// Private: the L-BFGS / OWL-QN driver shared by pseudo-likelihood and interaction screening, and
// the automatic (held-out) penalty choice. Public contracts are in pseudo_likelihood.hpp,
// screening.hpp and penalty_path.hpp.
#pragma once

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "local_fields.hpp"
#include "spinfer/checkpoint.hpp"
#include "spinfer/model.hpp"
#include "spinfer/unit_fits.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/pseudo_likelihood.hpp"
#include "spinfer/screening.hpp"

namespace spinfer::detail {

struct LocalFitSettings {
  LocalLoss loss = LocalLoss::pseudo_likelihood;
  bool logarithmic = false;  ///< screening only: minimise log S_i
  bool symmetric = false;
  double l1 = 0, l2 = 0;     ///< resolved (non-negative) penalties
  int max_iterations = 1000;
  double tolerance = 1e-6;
  ProgressCallback progress;
  std::string stage = "pseudo-likelihood";
  double checkpoint_every_s = 600;  ///< seconds between periodic saves of the optimiser state
};

struct LocalFitResult {
  Eigen::VectorXd h;             ///< N (per-variable with a unit subset: only those entries set)
  Eigen::MatrixXd theta;         ///< N x N, column i = couplings into unit i (unaveraged)
  Eigen::MatrixXd J;             ///< symmetric (averaged or tied), zero diagonal
  std::vector<std::int64_t> units;  ///< the fitted units
  std::int64_t iterations = 0;   ///< largest number of accepted steps of any unit
  std::int64_t rounds = 0;       ///< lock-step rounds (batched evaluations)
  std::int64_t evaluations = 0;  ///< per-unit objective + gradient evaluations (the cost unit)
  bool converged = false;
  double objective = 0;          ///< sum over the fitted problems of their final objective
  std::vector<std::int64_t> unit_iterations;  ///< per fitted unit, in `units` order
  std::vector<double> unit_objective;         ///< per fitted unit (symmetric: total / N)
  std::vector<std::int64_t> unconverged;
  /// How the per-unit problems were conditioned: "whitened" (one factor per unit, <= 200
  /// units), "whitened-shared" (one factor for all, above), "centred", or "none" (L1, symmetric).
  std::string preconditioning;
};

/// Receives the optimiser's complete state (for checkpoints).
using LocalSaveState = std::function<void(const nlohmann::json& optimiser_state)>;

/// One fit with resolved penalties. `start` (spin convention) may be null: then h = atanh(m),
/// J = 0. `units` (per-variable only) restricts the fit to those units: each unit's iterates are
/// exactly those of the full fit. `resume` continues from a state given to `save_state` (which
/// is called every settings.checkpoint_every_s and when interrupted). Throws Interrupted,
/// NumericalError (non-finite objective at the start), InputError (bad settings or state).
/// `unit_team` (per-variable only): the ranks that each fit their own contiguous, non-empty
/// share of all units on all rows (`fields` then belongs to this rank alone); the ranks meet
/// after every round (rank_rounds.hpp), `resume` is then a state of all units, and `save_state`
/// is called on rank 0 only, with the state of all units. `save_state` must be set on every
/// rank or on none. Non-root ranks throw Interrupted when rank 0 stops the fit.
LocalFitResult fit_local(const LocalFields& fields, const LocalFitSettings& settings,
                         const LocalFitResult* start,
                         const std::vector<std::int64_t>* units = nullptr,
                         const nlohmann::json* resume = nullptr,
                         const LocalSaveState& save_state = nullptr,
                         const Team* unit_team = nullptr);

/// Mean per-sample pseudo-log-likelihood of (h, J) on the selected rows.
double mean_pseudo_log_likelihood(const LocalFields& fields, const Eigen::VectorXd& h,
                                  const Eigen::MatrixXd& J);

/// Front end shared by fit_pseudo_likelihood and fit_screening: resolves automatic penalties
/// (held-out choice), runs the fit and fills the model and its provenance.
struct LocalFitRequest {
  LocalFitSettings settings;  ///< l1/l2 may be automatic_penalty here
  int threads = 0;
  std::string representation = "auto";
  /// MPI ranks (may be null). The symmetric objective and the held-out penalty choice share the
  /// rows out over them (local_fields.hpp); the per-variable final fit shares the units out
  /// (each rank fits its units on all rows; rank_rounds.hpp) when there are at least as many
  /// units as ranks.
  const Team* team = nullptr;
  std::optional<IsingModel> warm_start;
  std::string method;
  nlohmann::json extra = nlohmann::json::object();
  CheckpointHooks checkpoint;
};
IsingModel fit_local_model(const SpinMatrix& data, const LocalFitRequest& request);

/// Requests as fit_pseudo_likelihood / fit_screening build them.
LocalFitRequest pseudo_likelihood_request(const PseudoLikelihoodOptions& options);
LocalFitRequest screening_request(const ScreeningOptions& options);

/// The per-variable problems of `units` only (see unit_fits.hpp); request.settings.symmetric
/// must be false.
UnitFits fit_local_units(const SpinMatrix& data, const LocalFitRequest& request,
                         const std::vector<std::int64_t>& units);

}  // namespace spinfer::detail
