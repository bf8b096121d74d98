#include "spinfer/screening.hpp"

#include "local_fit.hpp"

namespace spinfer {

detail::LocalFitRequest detail::screening_request(const ScreeningOptions& o) {
  detail::LocalFitRequest req;
  req.settings.loss = detail::LocalLoss::screening;
  req.settings.logarithmic = o.logarithmic;
  req.settings.symmetric = o.symmetric;
  req.settings.l1 = o.l1;
  req.settings.l2 = o.l2;
  req.settings.max_iterations = o.max_iterations;
  req.settings.tolerance = o.tolerance;
  req.settings.progress = o.progress;
  req.settings.stage = "screening";
  req.threads = o.threads;
  req.representation = o.representation;
  req.team = o.team;
  req.warm_start = o.warm_start;
  req.method = "screening";
  req.extra = {{"variant", o.logarithmic ? "log-rise" : "rise"}, {"symmetric", o.symmetric}};
  req.checkpoint = o.checkpoint;
  return req;
}

IsingModel fit_screening(const SpinMatrix& data, const ScreeningOptions& o) {
  return detail::fit_local_model(data, detail::screening_request(o));
}

}  // namespace spinfer
