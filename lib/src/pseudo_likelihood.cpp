#include "spinfer/pseudo_likelihood.hpp"

#include "local_fit.hpp"
#include "spinfer/errors.hpp"

namespace spinfer {

detail::LocalFitRequest detail::pseudo_likelihood_request(const PseudoLikelihoodOptions& o) {
  detail::LocalFitRequest req;
  req.settings.loss = detail::LocalLoss::pseudo_likelihood;
  req.settings.symmetric = o.symmetric;
  req.settings.l1 = o.l1;
  req.settings.l2 = o.l2;
  req.settings.max_iterations = o.max_iterations;
  req.settings.tolerance = o.tolerance;
  req.settings.progress = o.progress;
  req.settings.stage = "pseudo-likelihood";
  req.threads = o.threads;
  req.representation = o.representation;
  req.team = o.team;
  req.warm_start = o.warm_start;
  req.method = "pseudo-likelihood";
  req.extra = {{"variant", o.symmetric ? "symmetric" : "per-variable"}};
  req.checkpoint = o.checkpoint;
  return req;
}

IsingModel fit_pseudo_likelihood(const SpinMatrix& data, const PseudoLikelihoodOptions& o) {
  return detail::fit_local_model(data, detail::pseudo_likelihood_request(o));
}

double pseudo_log_likelihood(const IsingModel& model, const SpinMatrix& data, int threads) {
  const IsingModel m = convert_model(model, Convention::spin);
  validate_model(m, "model");
  if (m.size() != data.cols())
    throw InputError("pseudo-log-likelihood: the model has " + std::to_string(m.size()) +
                     " units but the data have " + std::to_string(data.cols()));
  detail::PreparedData prepared(data, "auto", threads);
  detail::LocalFields fields(prepared, threads);
  return detail::mean_pseudo_log_likelihood(fields, m.fields, m.couplings);
}

}  // namespace spinfer
