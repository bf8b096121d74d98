// Independent entropy, empirical pattern entropy and the multi-information ratio I_2 / I_N
// (Schneidman, Berry, Segev, Bialek, Nature 440:1007, 2006). Formulas: partition.hpp.
#include <algorithm>
#include <cmath>
#include <limits>
#include <sstream>

#include "spinfer/errors.hpp"
#include "spinfer/partition.hpp"
#include "spinfer/patterns.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {
namespace {

/// Binary entropy in nats; 0 at p = 0 and p = 1.
double h2(double p) {
  double s = 0;
  if (p > 0) s -= p * std::log(p);
  if (p < 1) s -= (1 - p) * std::log1p(-p);
  return s;
}

}  // namespace

double independent_entropy(const Eigen::VectorXd& means, Convention convention) {
  double s = 0;
  for (Eigen::Index i = 0; i < means.size(); ++i) {
    const double p = convention == Convention::binary ? means(i) : 0.5 * (1.0 + means(i));
    if (!(p >= -1e-12 && p <= 1 + 1e-12))
      throw InputError("independent entropy: mean of unit " + std::to_string(i + 1) + " (" +
                       std::to_string(means(i)) + ") is outside the range of the " + to_string(convention) +
                       " convention");
    s += h2(std::clamp(p, 0.0, 1.0));
  }
  return s;
}

PatternEntropy pattern_entropy(const SpinMatrix& data) {
  if (data.rows() == 0) throw InputError("pattern entropy: the data have no rows");
  const PatternTable table = unique_patterns(data);
  const auto& w = table.patterns.weights();
  PatternEntropy out;
  double n = 0;
  for (double x : w) n += x;
  out.samples = n;
  double s = 0, s2 = 0;
  for (double x : w) {
    if (x <= 0) continue;
    ++out.distinct;
    const double f = x / n, l = std::log(f);
    s -= f * l;
    s2 += f * l * l;
  }
  out.plug_in = s;
  // Miller-Madow: E[plug-in] = S - (K - 1) / (2n) + O(1/n^2) (Miller 1955; Paninski, Neural
  // Comput. 15:1191, 2003, eq. 3.7).
  out.miller_madow = s + double(out.distinct - 1) / (2.0 * n);
  out.error = std::sqrt(std::max(0.0, s2 - s * s) / n);
  out.reliable = n >= 10.0 * double(out.distinct);
  return out;
}

MultiInformation multi_information_ratio(const IsingModel& model, const SpinMatrix& data,
                                         const PartitionOptions& options) {
  validate_model(model, "model");
  if (data.cols() != model.size())
    throw InputError("multi-information: the data have " + std::to_string(data.cols()) +
                     " columns but the model has " + std::to_string(model.size()) + " units");
  if (data.rows() == 0) throw InputError("multi-information: the data have no rows");
  MultiInformation out;
  const std::int64_t N = data.cols();
  const Eigen::VectorXd p = compute_means(data, Convention::binary, options.threads);
  out.independent_entropy = independent_entropy(p, Convention::binary);
  out.pattern = pattern_entropy(data);

  // Plug-in I_N = sum_v f(v) [ln f(v) - sum_i ln p_i(v_i)]; its delta-method variance is the
  // variance of the bracket over the data, divided by n.
  const PatternTable table = unique_patterns(data);
  const double n = out.pattern.samples;
  double m1 = 0, m2 = 0;
  for (std::int64_t k = 0; k < table.patterns.rows(); ++k) {
    const double wk = table.patterns.weight(k);
    if (wk <= 0) continue;
    const double f = wk / n;
    const std::uint8_t* row = table.patterns.row(k);
    double l = std::log(f);
    for (std::int64_t i = 0; i < N; ++i) l -= row[i] ? std::log(p(i)) : std::log1p(-p(i));
    m1 += f * l;
    m2 += f * l * l;
  }
  out.multi_information = out.independent_entropy - out.pattern.plug_in;  // = m1 up to rounding
  out.multi_information_error = std::sqrt(std::max(0.0, m2 - m1 * m1) / n);
  out.multi_information_corrected = out.independent_entropy - out.pattern.miller_madow;

  out.pairwise_entropy = model_entropy(model, options);
  out.pairwise_information = out.independent_entropy - out.pairwise_entropy.value;
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double IN = out.multi_information, INc = out.multi_information_corrected;
  out.ratio = IN > 0 ? out.pairwise_information / IN : nan;
  out.ratio_corrected = INc > 0 ? out.pairwise_information / INc : nan;
  if (IN > 0) {
    const double a = out.pairwise_entropy.error / IN, b = out.ratio * out.multi_information_error / IN;
    out.ratio_error = std::sqrt(a * a + b * b);
  } else {
    out.ratio_error = nan;
  }

  std::ostringstream w;
  if (!out.pattern.reliable) {
    w << "the data have " << n << " samples for " << out.pattern.distinct
      << " distinct patterns (fewer than 10 per pattern): the empirical pattern entropy S_N is "
      << "biased low (Miller-Madow correction " << (out.pattern.miller_madow - out.pattern.plug_in)
      << " nats), so I_N and the ratio are unreliable";
    out.warnings.push_back(w.str());
    w.str("");
  }
  const bool significant = IN > 3.0 * out.multi_information_error && INc > 0;
  if (!significant) {
    w << "the multi-information I_N = " << IN << " +- " << out.multi_information_error
      << " nats (Miller-Madow corrected " << INc
      << ") is not clearly above zero: the units look independent and I_2 / I_N is undefined";
    out.warnings.push_back(w.str());
  }
  for (const auto& x : out.pairwise_entropy.log_partition.warnings) out.warnings.push_back(x);
  out.reliable = out.pattern.reliable && significant;
  return out;
}

}  // namespace spinfer
