#include "spinfer/model.hpp"

#include <cmath>

#include "spinfer/errors.hpp"

namespace spinfer {

void validate_model(const IsingModel& model, const std::string& source) {
  const Eigen::Index N = model.fields.size();
  if (model.couplings.rows() != N || model.couplings.cols() != N) {
    throw InputError(source + ": couplings are " + std::to_string(model.couplings.rows()) + " x " +
                     std::to_string(model.couplings.cols()) + " but there are " +
                     std::to_string(N) + " fields");
  }
  if (!model.names.empty() && Eigen::Index(model.names.size()) != N)
    throw InputError(source + ": " + std::to_string(model.names.size()) + " names for " +
                     std::to_string(N) + " units");
  for (Eigen::Index i = 0; i < N; ++i) {
    if (!std::isfinite(model.fields(i)))
      throw InputError(source + ": field " + std::to_string(i + 1) + " is not finite");
    if (model.couplings(i, i) != 0.0)
      throw InputError(source + ": coupling diagonal entry " + std::to_string(i + 1) +
                       " is not zero");
    for (Eigen::Index j = 0; j < N; ++j) {
      const double a = model.couplings(i, j), b = model.couplings(j, i);
      if (!std::isfinite(a))
        throw InputError(where(source + " couplings", i + 1, j + 1) + "value is not finite");
      if (std::abs(a - b) > 1e-12 * std::max({1.0, std::abs(a), std::abs(b)}))
        throw InputError(where(source + " couplings", i + 1, j + 1) +
                         "couplings are not symmetric");
    }
  }
}

IsingModel convert_model(const IsingModel& model, Convention to) {
  IsingModel out = model;
  out.convention = to;
  if (model.convention == to) return out;
  const Eigen::VectorXd row_sums = model.couplings.rowwise().sum();  // diagonal is zero
  if (to == Convention::spin) {  // from binary (a, W): J = W/4, h = a/2 + sum_j W_ij/4
    out.couplings = model.couplings / 4.0;
    out.fields = model.fields / 2.0 + row_sums / 4.0;
  } else {  // from spin (h, J): W = 4J, a = 2h - 2 sum_j J_ij
    out.couplings = 4.0 * model.couplings;
    out.fields = 2.0 * model.fields - 2.0 * row_sums;
  }
  return out;
}

double log_partition_shift(const IsingModel& model, Convention to) {
  if (model.convention == to) return 0.0;
  // Write everything in binary parameters (a, W); log Z_x = log Z_s + sum a/2 + sum_{i<j} W/4.
  const IsingModel b = to == Convention::binary ? convert_model(model, Convention::binary) : model;
  const double shift = b.fields.sum() / 2.0 + b.couplings.sum() / 8.0;  // sum_{i<j} = sum_all / 2
  return to == Convention::binary ? shift : -shift;
}

double energy(const IsingModel& model, const std::uint8_t* active) {
  const Eigen::Index N = model.fields.size();
  const Convention c = model.convention;
  double e = 0;
  for (Eigen::Index i = 0; i < N; ++i) {
    const double vi = unit_value(active[i], c);
    if (vi == 0.0) continue;
    e -= model.fields(i) * vi;
    for (Eigen::Index j = i + 1; j < N; ++j) e -= model.couplings(i, j) * vi * unit_value(active[j], c);
  }
  return e;
}

}  // namespace spinfer
