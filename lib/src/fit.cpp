#include "spinfer/fit.hpp"

#include "spinfer/closed_form.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {

std::vector<std::string> fit_methods() {
  std::vector<std::string> m = closed_form_methods();
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
