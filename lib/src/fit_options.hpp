// Private: FitOptions -> the options of the iterative estimators (shared by fit_model and
// fit_model_units, so both fit with exactly the same settings).
#pragma once

#include "spinfer/fit.hpp"

namespace spinfer::detail {

// The settings pseudo-likelihood and screening share; unset penalties keep each method's default.
template <typename Options>
void copy_iterative_options(const FitOptions& o, Options& out) {
  out.symmetric = o.symmetric;
  if (o.l1) out.l1 = *o.l1;
  if (o.l2) out.l2 = *o.l2;
  out.max_iterations = o.max_iterations;
  out.tolerance = o.tolerance;
  out.threads = o.threads;
  out.warm_start = o.warm_start;
  out.progress = o.progress;
  out.representation = o.representation;
  out.checkpoint = o.checkpoint;
  out.team = o.team;
}

}  // namespace spinfer::detail
