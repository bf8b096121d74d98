// Private: the L-BFGS / OWL-QN driver shared by pseudo-likelihood and interaction screening, and
// the automatic (held-out) penalty choice. Public contracts are in pseudo_likelihood.hpp,
// screening.hpp and penalty_path.hpp.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "local_fields.hpp"
#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"

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
};

struct LocalFitResult {
  Eigen::VectorXd h;
  Eigen::MatrixXd J;         ///< symmetric (averaged or tied), zero diagonal
  std::int64_t iterations = 0;
  std::int64_t evaluations = 0;  ///< objective + gradient evaluations (the cost unit)
  bool converged = false;
  double objective = 0;
  std::vector<std::int64_t> unconverged;
};

/// One fit with resolved penalties. `start` (spin convention) may be null: then h = atanh(m),
/// J = 0. Throws Interrupted, NumericalError (non-finite objective).
LocalFitResult fit_local(const LocalFields& fields, const LocalFitSettings& settings,
                         const LocalFitResult* start);

/// Mean per-sample pseudo-log-likelihood of (h, J) on the selected rows.
double mean_pseudo_log_likelihood(const LocalFields& fields, const Eigen::VectorXd& h,
                                  const Eigen::MatrixXd& J);

/// Front end shared by fit_pseudo_likelihood and fit_screening: resolves automatic penalties
/// (held-out choice), runs the fit and fills the model and its provenance.
struct LocalFitRequest {
  LocalFitSettings settings;  ///< l1/l2 may be automatic_penalty here
  int threads = 0;
  std::string representation = "auto";
  std::optional<IsingModel> warm_start;
  std::string method;
  nlohmann::json extra = nlohmann::json::object();
};
IsingModel fit_local_model(const SpinMatrix& data, const LocalFitRequest& request);

}  // namespace spinfer::detail
