#include "spinfer/penalty_path.hpp"

#include <algorithm>
#include <cmath>

#include "local_fit.hpp"
#include "spinfer/errors.hpp"

namespace spinfer {

std::vector<double> default_penalty_grid(const std::string& kind, std::int64_t samples,
                                         std::int64_t units, int points) {
  if (kind != "l1" && kind != "l2") throw InputError("penalty kind '" + kind + "' is not l1 or l2");
  if (samples <= 0 || units <= 0) throw InputError("penalty grid: samples and units must be > 0");
  if (points < 1) throw InputError("penalty grid: at least one point is needed");
  const bool l1 = kind == "l1";
  const double lo = l1 ? -2.5 : -3.0, hi = l1 ? 0.5 : 1.0;
  const double scale = l1 ? std::sqrt(std::log(double(std::max<std::int64_t>(units, 2))) / double(samples))
                          : double(units) / double(samples);
  std::vector<double> g;
  for (int k = 0; k < points; ++k) {
    const double e = points == 1 ? 0.5 * (lo + hi) : hi - (hi - lo) * k / (points - 1);
    g.push_back(std::pow(10.0, e) * scale);
  }
  return g;
}

PenaltyPath penalty_path(const SpinMatrix& data, const PenaltyPathOptions& o) {
  require_no_constant_units(data, "data");
  if (o.kind != "l1" && o.kind != "l2") throw InputError("penalty kind '" + o.kind + "' is not l1 or l2");
  if (o.folds < 2) throw InputError("penalty path: at least 2 folds are needed");
  const std::int64_t T = data.rows();
  if (T < 2 * o.folds)
    throw InputError("penalty path: " + std::to_string(T) + " samples are too few for " +
                     std::to_string(o.folds) + " folds");
  if (!(o.other_penalty >= 0)) throw InputError("penalty path: other_penalty must be >= 0");
  detail::LocalFitSettings s;
  if (o.estimator == "pseudo-likelihood") {
    s.loss = detail::LocalLoss::pseudo_likelihood;
  } else if (o.estimator == "screening" || o.estimator == "log-screening") {
    s.loss = detail::LocalLoss::screening;
    s.logarithmic = o.estimator == "log-screening";
  } else {
    throw InputError("penalty path: estimator '" + o.estimator +
                     "' is not pseudo-likelihood, screening or log-screening");
  }
  s.stage = o.estimator;
  s.symmetric = o.symmetric;
  s.max_iterations = o.max_iterations;
  s.tolerance = o.tolerance;
  const bool l1 = o.kind == "l1";
  (l1 ? s.l2 : s.l1) = o.other_penalty;

  PenaltyPath path;
  path.kind = o.kind;
  path.folds = o.folds;
  path.rule = o.one_standard_error ? "one standard error" : "best mean";
  const std::int64_t train_rows = T - T / o.folds;
  path.penalties = o.penalties.empty()
                       ? default_penalty_grid(o.kind, train_rows, data.cols(), o.grid_points)
                       : o.penalties;
  for (double p : path.penalties)
    if (!(p >= 0) || !std::isfinite(p)) throw InputError("penalty path: penalties must be finite and >= 0");
  std::sort(path.penalties.begin(), path.penalties.end(), std::greater<double>());
  const std::size_t G = path.penalties.size();
  std::vector<std::vector<double>> scores(G, std::vector<double>(std::size_t(o.folds)));

  detail::PreparedData prepared(data, o.representation, o.threads);
  std::int64_t done = 0;
  for (int f = 0; f < o.folds; ++f) {
    const std::int64_t b = T * f / o.folds, e = T * (f + 1) / o.folds;
    detail::LocalFields train(prepared, {{0, b}, {e, T}}, o.threads);
    detail::LocalFields valid(prepared, {{b, e}}, o.threads);
    detail::LocalFitResult prev;
    bool have_prev = false;
    for (std::size_t k = 0; k < G; ++k) {  // largest penalty first, warm starts downwards
      (l1 ? s.l1 : s.l2) = path.penalties[k];
      detail::LocalFitResult r = detail::fit_local(train, s, have_prev ? &prev : nullptr);
      scores[k][std::size_t(f)] = detail::mean_pseudo_log_likelihood(valid, r.h, r.J);
      prev = std::move(r);
      have_prev = true;
      if (o.progress) {
        Progress p;
        p.stage = "penalty path";
        p.done = ++done;
        p.total = std::int64_t(G) * o.folds;
        p.objective = scores[k][std::size_t(f)];
        if (!o.progress(p)) throw Interrupted("penalty path: interrupted by the progress callback");
      }
    }
  }
  std::size_t best = 0;
  for (std::size_t k = 0; k < G; ++k) {
    double m = 0, v = 0;
    for (double x : scores[k]) m += x;
    m /= o.folds;
    for (double x : scores[k]) v += (x - m) * (x - m);
    path.mean_score.push_back(m);
    path.se_score.push_back(std::sqrt(v / (o.folds - 1)) / std::sqrt(double(o.folds)));
    if (m > path.mean_score[best]) best = k;
  }
  std::size_t chosen = best;
  if (o.one_standard_error) {  // largest penalty (earliest in the decreasing grid) within 1 SE
    for (std::size_t k = 0; k < G; ++k)
      if (path.mean_score[k] >= path.mean_score[best] - path.se_score[best]) {
        chosen = k;
        break;
      }
  }
  path.chosen = path.penalties[chosen];
  return path;
}

}  // namespace spinfer
