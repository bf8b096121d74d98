#include "spinfer/fit.hpp"

#include "fit_options.hpp"

#include "spinfer/closed_form.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/pseudo_likelihood.hpp"
#include "spinfer/screening.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {

std::vector<std::string> fit_methods() {
  std::vector<std::string> m = {"pseudo-likelihood", "screening"};
  for (const auto& c : closed_form_methods()) m.push_back(c);
  return m;
}

IsingModel fit_model(const SpinMatrix& data, const FitOptions& o) {
  require_no_constant_units(data, "data");
  IsingModel model;
  bool known = false;
  for (const std::string& cf : closed_form_methods()) {
    if (cf != o.method) continue;
    known = true;
    StatsOptions so;
    so.threads = o.threads;
    ClosedFormOptions co;
    co.shrinkage = o.shrinkage;
    co.mean_field_fallback = o.mean_field_fallback;
    model = fit_closed_form(compute_moments(data, Convention::spin, so), o.method, co);
  }
  if (o.method == "pseudo-likelihood") {
    known = true;
    PseudoLikelihoodOptions po;
    detail::copy_iterative_options(o, po);
    model = fit_pseudo_likelihood(data, po);
  } else if (o.method == "screening") {
    known = true;
    ScreeningOptions so;
    so.logarithmic = o.logarithmic;
    detail::copy_iterative_options(o, so);
    model = fit_screening(data, so);
  } else if (known && (o.l1.value_or(0) != 0 || o.l2.value_or(0) != 0)) {
    throw InputError("method '" + o.method + "' takes no penalty (--l1/--l2); use shrinkage instead");
  }
  if (!known) {
    std::string list;
    for (const auto& m : fit_methods()) list += (list.empty() ? "" : ", ") + m;
    throw InputError("unknown method '" + o.method + "' (known: " + list + ")");
  }
  model.names = data.names();
  model.provenance.samples = data.rows();
  model.provenance.units = data.cols();
  return convert_model(model, o.convention.value_or(data.convention()));
}

}  // namespace spinfer
