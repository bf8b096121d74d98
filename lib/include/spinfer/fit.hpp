// One entry point for every estimator, by its trade name in kebab-case:
//   closed forms (from the moments):  mean-field, tap, independent-pair, sessak-monasson, bethe
//   iterative:                        pseudo-likelihood (per-variable or symmetric),
//                                     screening (RISE, or its logarithmic variant)
// The returned model has the data's column names and is in `convention` (default: the data's).
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "spinfer/checkpoint.hpp"
#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"
#include "spinfer/team.hpp"

namespace spinfer {

/// Marks a penalty to be chosen on held-out data (k-fold, contiguous folds; penalty_path.hpp).
constexpr double kAutomaticPenalty = -1.0;

struct FitOptions {
  std::string method = "pseudo-likelihood";
  bool symmetric = false;          ///< pseudo-likelihood / screening: tie J_ij = J_ji
  bool logarithmic = false;        ///< screening: log-RISE instead of RISE
  /// Per-sample penalties; kAutomaticPenalty = chosen on held-out data; unset = the method's
  /// default (pseudo-likelihood: l2 chosen on held-out data, l1 = 0; screening: l1 chosen on
  /// held-out data, l2 = 0). Closed forms take no penalty.
  std::optional<double> l1, l2;
  double shrinkage = 0;            ///< closed forms: C -> (1 - s) C + s diag(C)
  bool mean_field_fallback = false;///< closed forms: mean-field value where TAP/Bethe have no root
  int max_iterations = 1000;
  double tolerance = 1e-5;
  int threads = 0;
  std::optional<IsingModel> warm_start;
  std::string representation = "auto";
  std::optional<Convention> convention;  ///< of the result; default: the data's
  ProgressCallback progress;
  /// pseudo-likelihood / screening: periodic and on-interrupt optimiser state, and resuming
  /// from it (bit-identical to an uninterrupted fit). Closed forms ignore it.
  CheckpointHooks checkpoint;
  /// Pseudo-likelihood and screening: ranks sharing the samples or, per-variable, the units
  /// (PseudoLikelihoodOptions::team).
  /// The closed forms ignore it (every rank computes the same moments).
  const Team* team = nullptr;
};

/// The method names accepted by fit_model.
std::vector<std::string> fit_methods();

/// Fits `data` with options.method. Throws InputError for an unknown method (listing the known
/// ones), constant units, or bad options; NumericalError when a closed form has no answer.
IsingModel fit_model(const SpinMatrix& data, const FitOptions& options);

}  // namespace spinfer
