// Moment-matching refinement (Boltzmann learning). Options arrive as a dict built by
// spinfer/refinement.py; unknown keys are rejected. The fit runs without the GIL; the progress
// callback polls Python's signal handlers (Ctrl-C -> KeyboardInterrupt).
#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/refine.hpp"

namespace spinfer::py_bind {
namespace {

RefineOptions options_from_dict(const py::dict& d) {
  RefineOptions o;
  for (const auto& item : d) {
    const auto key = item.first.cast<std::string>();
    const py::handle v = item.second;
    if (key == "expectations") o.expectations = v.cast<std::string>();
    else if (key == "l2") o.l2 = v.cast<double>();
    else if (key == "max_iterations") o.max_iterations = v.cast<std::int64_t>();
    else if (key == "max_seconds") o.max_seconds = v.is_none() ? 0.0 : v.cast<double>();
    else if (key == "threads") o.threads = v.cast<int>();
    else if (key == "seed") o.seed = v.cast<std::uint64_t>();
    else if (key == "threshold") o.threshold = v.cast<double>();
    else if (key == "noise") o.noise = v.cast<std::string>();
    else if (key == "bootstrap_replicates") o.bootstrap_replicates = v.cast<std::int64_t>();
    else if (key == "block_length") o.block_length = v.is_none() ? 0 : v.cast<std::int64_t>();
    else if (key == "preconditioner") o.preconditioner = v.cast<std::string>();
    else if (key == "learning_rate") o.learning_rate = v.cast<double>();
    else if (key == "momentum") o.momentum = v.cast<double>();
    else if (key == "max_step") o.max_step = v.cast<double>();
    else if (key == "samples") o.samples = v.is_none() ? 0 : v.cast<std::int64_t>();
    else if (key == "chains") o.chains = v.cast<std::int64_t>();
    else if (key == "sweeps_between_samples") o.sweeps_between_samples = v.cast<std::int64_t>();
    else if (key == "burn_in") o.burn_in = v.cast<std::int64_t>();
    else if (key == "sampler") o.sampler = v.cast<std::string>();
    else if (key == "monte_carlo_ratio") o.monte_carlo_ratio = v.cast<double>();
    else if (key == "max_check_samples") o.max_check_samples = v.is_none() ? 0 : v.cast<std::int64_t>();
    else if (key == "patience") o.patience = v.cast<std::int64_t>();
    else if (key == "exact_tolerance") o.exact_tolerance = v.cast<double>();
    else if (key == "progress") o.progress = progress_callback(py::reinterpret_borrow<py::object>(v));
    else throw InputError("refine: unknown option '" + key + "'");
  }
  if (!o.progress) o.progress = progress_callback(py::none());
  return o;
}

py::dict report_dict(const RefineResult& r) {
  py::dict d;
  d["expectations"] = r.expectations;
  d["iterations"] = r.iterations;
  d["converged"] = r.converged;
  d["stop_reason"] = r.stop_reason;
  d["epsilon_mean"] = r.epsilon_mean;
  d["epsilon_correlation"] = r.epsilon_correlation;
  d["max_z_mean"] = r.max_z_mean;
  d["max_z_correlation"] = r.max_z_correlation;
  d["monte_carlo_ratio"] = r.monte_carlo_ratio;
  d["max_gradient"] = r.max_gradient;
  if (r.expectations == "exact") d["log_likelihood"] = r.log_likelihood;
  py::dict traj;
  const std::size_t n = r.trajectory.size();
  py::array_t<std::int64_t> it(static_cast<py::ssize_t>(n)), samples(static_cast<py::ssize_t>(n));
  py::array_t<bool> check(static_cast<py::ssize_t>(n));
  std::vector<py::array_t<double>> cols;
  const char* names[] = {"epsilon_mean", "epsilon_correlation", "debiased_epsilon_mean",
                         "debiased_epsilon_correlation", "max_z_mean", "max_z_correlation",
                         "monte_carlo_ratio", "max_gradient", "learning_rate"};
  for (std::size_t k = 0; k < 9; ++k) cols.emplace_back(static_cast<py::ssize_t>(n));
  for (std::size_t i = 0; i < n; ++i) {
    const RefineIteration& t = r.trajectory[i];
    it.mutable_data()[i] = t.iteration;
    samples.mutable_data()[i] = t.samples;
    check.mutable_data()[i] = t.check;
    const double v[] = {t.epsilon_mean, t.epsilon_correlation, t.debiased_epsilon_mean,
                        t.debiased_epsilon_correlation, t.max_z_mean, t.max_z_correlation,
                        t.monte_carlo_ratio, t.max_gradient, t.learning_rate};
    for (std::size_t k = 0; k < 9; ++k) cols[k].mutable_data()[i] = v[k];
  }
  traj["iteration"] = it;
  for (std::size_t k = 0; k < 9; ++k) traj[names[k]] = cols[k];
  traj["samples"] = samples;
  traj["check"] = check;
  d["trajectory"] = traj;
  d["mean_sigma"] = r.mean_sigma;
  d["correlation_sigma"] = r.correlation_sigma;
  d["noise"] = r.noise;
  d["block_length"] = r.block_length;
  d["preconditioner"] = r.preconditioner;
  d["step_scale"] = r.step_scale;
  d["samples_per_iteration"] = r.samples_per_iteration;
  d["final_samples_per_iteration"] = r.final_samples_per_iteration;
  d["seconds"] = r.seconds;
  d["warnings"] = r.warnings;
  return d;
}

}  // namespace

void bind_refine(py::module_& m) {
  m.def("refine", [](const SpinMatrix& data, const py::dict& start, const py::dict& options) {
        const IsingModel model = model_from_dict(start);
        const RefineOptions o = options_from_dict(options);
        RefineResult r;
        {
          py::gil_scoped_release release;
          r = refine_moments(data, model, o);
        }
        return py::make_tuple(model_to_dict(r.model), report_dict(r));
      }, py::arg("data"), py::arg("start"), py::arg("options"),
      "Boltzmann-learning refinement (see spinfer.refine).");
}

}  // namespace spinfer::py_bind
