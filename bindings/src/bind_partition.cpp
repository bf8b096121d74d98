// ln Z, log-likelihood, entropy and multi-information (partition.hpp). The model arrives as
// (fields, couplings, convention), options as a dict built by spinfer/likelihood.py (unknown keys
// are rejected). Calls run without the GIL; the progress callback polls Ctrl-C.
#include <cmath>

#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/partition.hpp"

namespace spinfer::py_bind {
namespace {

PartitionOptions options_from_dict(const py::dict& d) {
  PartitionOptions o;
  py::object progress = py::none();
  for (const auto& item : d) {
    const auto key = item.first.cast<std::string>();
    const py::handle v = item.second;
    if (key == "method") o.method = v.cast<std::string>();
    else if (key == "exact_max_units") o.exact_max_units = v.cast<std::int64_t>();
    else if (key == "base") o.base = v.cast<std::string>();
    else if (key == "ais_runs") o.ais_runs = v.cast<std::int64_t>();
    else if (key == "ais_steps") o.ais_steps = v.cast<std::int64_t>();
    else if (key == "ais_sweeps") o.ais_sweeps = v.cast<std::int64_t>();
    else if (key == "bootstrap") o.bootstrap = v.cast<std::int64_t>();
    else if (key == "ti_nodes") o.ti_nodes = v.cast<std::int64_t>();
    else if (key == "samples") o.samples = v.cast<std::int64_t>();
    else if (key == "chains") o.chains = v.cast<std::int64_t>();
    else if (key == "burn_in") o.burn_in = v.is_none() ? -1 : v.cast<std::int64_t>();
    else if (key == "thin") o.thin = v.is_none() ? -1 : v.cast<std::int64_t>();
    else if (key == "seed") o.seed = v.cast<std::uint64_t>();
    else if (key == "threads") o.threads = v.cast<int>();
    else if (key == "progress") progress = py::reinterpret_borrow<py::object>(v);
    else throw InputError("log partition: unknown option '" + key + "'");
  }
  if (o.burn_in < -1 || o.thin < -1)
    throw InputError("log partition: burn_in and thin must be non-negative (None = automatic)");
  o.progress = progress_callback(progress);  // always set, so Ctrl-C is polled
  return o;
}

py::dict partition_dict(const LogPartitionEstimate& e) {
  py::dict r;
  r["value"] = e.value;
  r["error"] = e.error;
  r["method"] = e.method;
  r["convention"] = to_string(e.convention);
  r["lower_bound"] = e.lower_bound;
  r["base"] = e.base;
  r["base_fields"] = e.base_fields;
  r["base_log_partition"] = e.base_log_partition;
  r["runs"] = e.runs;
  r["steps"] = e.steps;
  r["sweeps"] = e.sweeps;
  r["log_weights"] = py::array(py::cast(e.log_weights));
  r["effective_runs"] = e.effective_runs;
  r["bootstrap_error"] = e.bootstrap_error;
  r["nodes"] = py::array(py::cast(e.nodes));
  r["node_weights"] = py::array(py::cast(e.node_weights));
  r["node_mean"] = py::array(py::cast(e.node_mean));
  r["node_error"] = py::array(py::cast(e.node_error));
  r["node_rhat"] = py::array(py::cast(e.node_rhat));
  r["warnings"] = e.warnings;
  r["seconds"] = e.seconds;
  return r;
}

py::dict entropy_dict(const EntropyEstimate& e) {
  py::dict r;
  r["value"] = e.value;
  r["error"] = e.error;
  r["mean_energy"] = e.mean_energy;
  r["mean_energy_error"] = e.mean_energy_error;
  r["log_partition"] = partition_dict(e.log_partition);
  r["energy_rhat"] = e.energy_sampling.rhat_energy;
  r["energy_ess"] = e.energy_sampling.ess_energy;
  std::vector<std::string> warnings = e.log_partition.warnings;
  for (const auto& w : e.energy_sampling.warnings) warnings.push_back("model energy: " + w);
  r["warnings"] = warnings;
  return r;
}

py::dict log_partition_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                          const std::string& convention, const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const PartitionOptions o = options_from_dict(options);
  LogPartitionEstimate e;
  {
    py::gil_scoped_release release;
    e = estimate_log_partition(model, o);
  }
  return partition_dict(e);
}

py::dict log_likelihood_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                           const std::string& convention, const SpinMatrix& data,
                           const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const PartitionOptions o = options_from_dict(options);
  LikelihoodEstimate e;
  {
    py::gil_scoped_release release;
    e = log_likelihood_per_sample(model, data, o);
  }
  py::dict r;
  r["value"] = e.value;
  r["error"] = e.error;
  r["mean_energy"] = e.mean_energy;
  r["total_weight"] = e.total_weight;
  r["log_partition"] = partition_dict(e.log_partition);
  r["warnings"] = e.log_partition.warnings;
  return r;
}

py::dict entropy_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                    const std::string& convention, const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const PartitionOptions o = options_from_dict(options);
  EntropyEstimate e;
  {
    py::gil_scoped_release release;
    e = model_entropy(model, o);
  }
  return entropy_dict(e);
}

py::dict multi_information_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                              const std::string& convention, const SpinMatrix& data,
                              const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const PartitionOptions o = options_from_dict(options);
  MultiInformation mi;
  {
    py::gil_scoped_release release;
    mi = multi_information_ratio(model, data, o);
  }
  py::dict r;
  r["ratio"] = mi.ratio;
  r["ratio_error"] = mi.ratio_error;
  r["ratio_corrected"] = mi.ratio_corrected;
  r["reliable"] = mi.reliable;
  r["independent_entropy"] = mi.independent_entropy;
  r["pairwise_entropy"] = entropy_dict(mi.pairwise_entropy);
  r["pattern_entropy"] = mi.pattern.plug_in;
  r["pattern_entropy_error"] = mi.pattern.error;
  r["pattern_entropy_corrected"] = mi.pattern.miller_madow;
  r["distinct_patterns"] = mi.pattern.distinct;
  r["samples"] = mi.pattern.samples;
  r["pattern_entropy_reliable"] = mi.pattern.reliable;
  r["multi_information"] = mi.multi_information;
  r["multi_information_error"] = mi.multi_information_error;
  r["multi_information_corrected"] = mi.multi_information_corrected;
  r["pairwise_information"] = mi.pairwise_information;
  r["warnings"] = mi.warnings;
  return r;
}

}  // namespace

void bind_partition(py::module_& m) {
  m.def("log_partition", &log_partition_py, py::arg("fields"), py::arg("couplings"),
        py::arg("convention"), py::arg("options"), "ln Z with its standard error (see spinfer.log_partition).");
  m.def("log_likelihood", &log_likelihood_py, py::arg("fields"), py::arg("couplings"),
        py::arg("convention"), py::arg("data"), py::arg("options"),
        "Mean log-probability per sample (see spinfer.log_likelihood).");
  m.def("entropy", &entropy_py, py::arg("fields"), py::arg("couplings"), py::arg("convention"),
        py::arg("options"), "Model entropy (see spinfer.entropy).");
  m.def("multi_information", &multi_information_py, py::arg("fields"), py::arg("couplings"),
        py::arg("convention"), py::arg("data"), py::arg("options"),
        "I_2 / I_N (see spinfer.multi_information).");
  m.def("independent_entropy", [](const Eigen::VectorXd& means, const std::string& convention) {
        return independent_entropy(means, parse_convention(convention));
      }, py::arg("means"), py::arg("convention"), "sum_i H2(p_i) in nats.");
  m.def("gauss_legendre_unit", [](std::int64_t n) {
        std::vector<double> x, w;
        gauss_legendre_unit(n, &x, &w);
        return py::make_tuple(py::array(py::cast(x)), py::array(py::cast(w)));
      }, py::arg("n"), "Gauss-Legendre nodes and weights on [0, 1].");
}

}  // namespace spinfer::py_bind
