#include "spinfer/unit_fits.hpp"

#include <algorithm>
#include <cmath>

#include "fit_options.hpp"
#include "local_fit.hpp"
#include "lockstep_lbfgs.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/version.hpp"

namespace spinfer {

std::vector<std::int64_t> shard_units(std::int64_t N, std::int64_t index, std::int64_t count) {
  if (count < 1 || index < 0 || index >= count)
    throw InputError("shard " + std::to_string(index + 1) + " of " + std::to_string(count) +
                     " does not exist (shards are numbered 1.." + std::to_string(count) + ")");
  if (count > N)
    throw InputError("cannot split " + std::to_string(N) + " units into " +
                     std::to_string(count) + " shards (at most one shard per unit)");
  std::vector<std::int64_t> units;
  for (std::int64_t i = index * N / count; i < (index + 1) * N / count; ++i) units.push_back(i);
  return units;
}

UnitFits fit_model_units(const SpinMatrix& data, const FitOptions& o,
                         const std::vector<std::int64_t>& units) {
  if (o.symmetric)
    throw InputError("shards: the symmetric objective couples all units; only per-variable "
                     "pseudo-likelihood and screening can be split into shards");
  detail::LocalFitRequest req;
  if (o.method == "pseudo-likelihood") {
    PseudoLikelihoodOptions po;
    detail::copy_iterative_options(o, po);
    req = detail::pseudo_likelihood_request(po);
  } else if (o.method == "screening") {
    ScreeningOptions so;
    so.logarithmic = o.logarithmic;
    detail::copy_iterative_options(o, so);
    req = detail::screening_request(so);
  } else {
    throw InputError("shards: method '" + o.method + "' is computed at once; only per-variable "
                     "pseudo-likelihood and screening can be split into shards");
  }
  return detail::fit_local_units(data, req, units);
}

IsingModel assemble_unit_fits(const std::vector<UnitFits>& parts, Convention convention) {
  if (parts.empty()) throw InputError("assemble: no parts given");
  const UnitFits& first = parts.front();
  const std::int64_t N = first.total_units;
  std::vector<int> owner(static_cast<std::size_t>(N), -1);
  Eigen::MatrixXd theta = Eigen::MatrixXd::Zero(N, N);
  Eigen::VectorXd h = Eigen::VectorXd::Zero(N);
  std::vector<std::int64_t> iterations(static_cast<std::size_t>(N), 0);
  std::vector<double> objective(static_cast<std::size_t>(N), 0.0);
  const auto& p0 = first.provenance;
  for (std::size_t k = 0; k < parts.size(); ++k) {
    const UnitFits& part = parts[k];
    const std::string which = "part " + std::to_string(k + 1);
    if (part.total_units != N || part.names != first.names)
      throw InputError("assemble: " + which + " was fitted to data with other units (" +
                       std::to_string(part.total_units) + " units, expected " + std::to_string(N) + ")");
    const auto& p = part.provenance;
    if (p.method != p0.method || p.l1 != p0.l1 || p.l2 != p0.l2 || p.samples != p0.samples ||
        p.extra.value("variant", nlohmann::json()) != p0.extra.value("variant", nlohmann::json()))
      throw InputError("assemble: " + which + " used other settings (method " + p.method +
                       ", l1 " + std::to_string(p.l1) + ", l2 " + std::to_string(p.l2) +
                       ", samples " + std::to_string(p.samples) + ") than part 1");
    const auto K = Eigen::Index(part.units.size());
    if (part.coefficients.rows() != N || part.coefficients.cols() != K || part.fields.size() != K ||
        Eigen::Index(part.iterations.size()) != K || Eigen::Index(part.objective.size()) != K)
      throw InputError("assemble: " + which + " has inconsistent array shapes");
    for (Eigen::Index c = 0; c < K; ++c) {
      const std::int64_t i = part.units[std::size_t(c)];
      if (i < 0 || i >= N) throw InputError("assemble: " + which + " names unit " + std::to_string(i) + ", out of range");
      if (owner[std::size_t(i)] >= 0)
        throw InputError("assemble: unit " + std::to_string(i) + " is fitted by both part " +
                         std::to_string(owner[std::size_t(i)] + 1) + " and " + which);
      owner[std::size_t(i)] = int(k);
      theta.col(i) = part.coefficients.col(c);
      theta(i, i) = 0.0;
      h(i) = part.fields(c);
      iterations[std::size_t(i)] = part.iterations[std::size_t(c)];
      objective[std::size_t(i)] = part.objective[std::size_t(c)];
    }
  }
  std::vector<std::int64_t> missing;
  for (std::int64_t i = 0; i < N; ++i)
    if (owner[std::size_t(i)] < 0) missing.push_back(i);
  if (!missing.empty()) {
    std::string list;
    for (std::size_t k = 0; k < missing.size() && k < 10; ++k)
      list += (k ? ", " : "") + std::to_string(missing[k]);
    if (missing.size() > 10) list += ", ...";
    throw InputError("assemble: " + std::to_string(missing.size()) +
                     " units are fitted by no part (0-based: " + list + ")");
  }
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = h;
  m.couplings = 0.5 * (theta + theta.transpose());  // average the two estimates of each pair
  m.names = first.names;
  m.provenance = p0;
  Provenance& p = m.provenance;
  std::vector<std::int64_t> unconverged;
  double total = 0;
  std::int64_t evaluations = 0, rounds = 0;
  p.iterations = 0;
  for (std::int64_t i = 0; i < N; ++i) {  // in unit order, whatever the parts were
    total += objective[std::size_t(i)];
    p.iterations = std::max(p.iterations, iterations[std::size_t(i)]);
  }
  for (const UnitFits& part : parts) {
    for (std::int64_t u : part.unconverged) unconverged.push_back(u);
    evaluations += part.provenance.extra.value("evaluations", std::int64_t(0));
    rounds = std::max(rounds, part.provenance.extra.value("rounds", std::int64_t(0)));
  }
  std::sort(unconverged.begin(), unconverged.end());
  p.objective = total;
  p.converged = unconverged.empty();
  p.units = N;
  p.extra["unconverged_units"] = unconverged;
  p.extra["evaluations"] = evaluations;
  p.extra["rounds"] = rounds;
  if (parts.size() > 1) p.extra["parts"] = parts.size();
  return convert_model(m, convention);
}

namespace {

std::string encode(const Eigen::MatrixXd& m) {
  return detail::encode_doubles(m.data(), std::size_t(m.size()));
}

}  // namespace

nlohmann::json unit_fits_to_json(const UnitFits& f) {
  nlohmann::json p = {{"method", f.provenance.method},
                      {"l1", f.provenance.l1},
                      {"l2", f.provenance.l2},
                      {"iterations", f.provenance.iterations},
                      {"converged", f.provenance.converged},
                      {"objective", f.provenance.objective},
                      {"samples", f.provenance.samples},
                      {"units", f.provenance.units},
                      {"version", f.provenance.version},
                      {"extra", f.provenance.extra}};
  return {{"total_units", f.total_units},
          {"names", f.names},
          {"units", f.units},
          {"coefficients", encode(f.coefficients)},
          {"fields", encode(f.fields)},
          {"iterations", f.iterations},
          {"objective", detail::encode_doubles(f.objective.data(), f.objective.size())},
          {"unconverged", f.unconverged},
          {"provenance", p}};
}

UnitFits unit_fits_from_json(const nlohmann::json& j, const std::string& source) {
  try {
    UnitFits f;
    f.total_units = j.at("total_units").get<std::int64_t>();
    f.names = j.at("names").get<std::vector<std::string>>();
    f.units = j.at("units").get<std::vector<std::int64_t>>();
    const auto K = Eigen::Index(f.units.size());
    const auto N = Eigen::Index(f.total_units);
    const std::vector<double> c = detail::decode_doubles(j.at("coefficients").get<std::string>(), "coefficients");
    const std::vector<double> h = detail::decode_doubles(j.at("fields").get<std::string>(), "fields");
    f.objective = detail::decode_doubles(j.at("objective").get<std::string>(), "objective");
    if (N < 1 || (!f.names.empty() && Eigen::Index(f.names.size()) != N) || Eigen::Index(c.size()) != N * K ||
        Eigen::Index(h.size()) != K || Eigen::Index(f.objective.size()) != K)
      throw InputError(source + ": the unit fits have inconsistent sizes");
    f.coefficients = Eigen::Map<const Eigen::MatrixXd>(c.data(), N, K);
    f.fields = Eigen::Map<const Eigen::VectorXd>(h.data(), K);
    f.iterations = j.at("iterations").get<std::vector<std::int64_t>>();
    if (Eigen::Index(f.iterations.size()) != K) throw InputError(source + ": 'iterations' has the wrong length");
    f.unconverged = j.at("unconverged").get<std::vector<std::int64_t>>();
    const auto& p = j.at("provenance");
    f.provenance.method = p.at("method").get<std::string>();
    f.provenance.l1 = p.at("l1").get<double>();
    f.provenance.l2 = p.at("l2").get<double>();
    f.provenance.iterations = p.at("iterations").get<std::int64_t>();
    f.provenance.converged = p.at("converged").get<bool>();
    f.provenance.objective = p.at("objective").get<double>();
    f.provenance.samples = p.at("samples").get<std::int64_t>();
    f.provenance.units = p.at("units").get<std::int64_t>();
    f.provenance.version = p.at("version").get<std::string>();
    f.provenance.extra = p.at("extra");
    return f;
  } catch (const nlohmann::json::exception& e) {
    throw InputError(source + ": not a complete set of unit fits (" + e.what() + ")");
  }
}

}  // namespace spinfer
