// Penalty selection on held-out data for the local estimators (pseudo-likelihood, screening).
//
// Score: the mean per-sample pseudo-log-likelihood (pseudo_likelihood.hpp) of the fitted model on
// the held-out rows, whatever the estimator. Folds are contiguous blocks of rows (recordings are
// time series: random folds would leak information between neighbouring, correlated bins).
// Along the grid, fits go from the largest penalty to the smallest, each warm-started from the
// previous one.
//
// Default grids (per-sample penalties, T = samples used for fitting, N = units):
//   l2: a * N / T with a log-spaced over [1e-3, 10]. a = 1/(2 N sigma^2) is the MAP penalty of a
//       Gaussian prior of variance sigma^2 on each coupling (a = 0.5: sigma = 1/sqrt(N), the
//       scale of SK couplings at beta = 1), so the grid follows the 1/T fall of the optimum.
//   l1: a * sqrt(log N / T) with a log-spaced over [10^-2.5, 10^0.5] (the sqrt(log N / T) scale
//       of L1 neighbourhood selection, Ravikumar, Wainwright & Lafferty 2010).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct PenaltyPath {
  std::vector<double> penalties;   ///< grid, decreasing
  std::vector<double> mean_score;  ///< mean over folds of the held-out score (higher is better)
  std::vector<double> se_score;    ///< standard error of that mean (sd over folds / sqrt(k))
  /// The selected penalty, as used on training folds of T (k-1)/k rows; for a fit on all T rows
  /// scale it by (k-1)/k (l2, optimum ~ 1/T) or sqrt((k-1)/k) (l1), as the automatic choice does.
  double chosen = 0;
  std::string kind;                ///< "l1" or "l2"
  std::string rule;                ///< "best mean" or "one standard error"
  int folds = 0;
};

struct PenaltyPathOptions {
  std::string estimator = "pseudo-likelihood";  ///< or "screening", "log-screening"
  std::string kind = "l2";                      ///< which penalty the grid varies: "l1" / "l2"
  std::vector<double> penalties;                ///< empty: default grid (see above)
  int grid_points = 9;                          ///< size of the default grid
  int folds = 5;                                ///< contiguous folds (>= 2)
  /// false: the best mean score. true: the largest penalty whose mean is within one standard
  /// error of the best (a more conservative, sparser choice).
  bool one_standard_error = false;
  bool symmetric = false;
  double other_penalty = 0;                     ///< the penalty of the other kind, held fixed
  int max_iterations = 1000;
  double tolerance = 1e-5;
  int threads = 0;
  std::string representation = "auto";
  ProgressCallback progress;                    ///< called after each fit; false => Interrupted
};

/// k-fold held-out scores over a penalty grid.
PenaltyPath penalty_path(const SpinMatrix& data, const PenaltyPathOptions& options = {});

/// The default grid described above, decreasing.
std::vector<double> default_penalty_grid(const std::string& kind, std::int64_t samples,
                                         std::int64_t units, int points = 9);

}  // namespace spinfer
