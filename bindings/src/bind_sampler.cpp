// Monte Carlo sampling, model statistics and temperature scans from plain arrays.
// Options arrive as a dict (the Python wrapper in spinfer/sampling.py builds it); unknown keys are
// rejected. Long calls run without the GIL; the progress callback takes the GIL briefly to run
// Python signal handlers (Ctrl-C -> KeyboardInterrupt) and an optional user callable.
#include <memory>

#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/sampler.hpp"

namespace spinfer::py_bind {

/// A Python callable shared without touching its reference count off the GIL.
static std::shared_ptr<py::object> shared_callable(const py::object& f) {
  auto* held = new py::object(f);
  return std::shared_ptr<py::object>(held, [](py::object* p) {
    py::gil_scoped_acquire gil;
    delete p;
  });
}

ProgressCallback progress_callback(const py::object& user) {
  std::shared_ptr<py::object> f = user.is_none() ? nullptr : shared_callable(user);
  return [f](const Progress& p) -> bool {
    py::gil_scoped_acquire gil;
    if (PyErr_CheckSignals() != 0) throw py::error_already_set();  // e.g. KeyboardInterrupt
    if (!f) return true;
    py::dict d;
    d["stage"] = p.stage;
    d["done"] = p.done;
    d["total"] = p.total;
    d["objective"] = p.objective;
    d["elapsed_s"] = p.elapsed_s;
    const py::object r = (*f)(d);
    return r.is_none() || r.cast<bool>();
  };
}

IsingModel model_from_arrays(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                             const std::string& convention) {
  IsingModel m;
  m.convention = parse_convention(convention);
  m.fields = fields;
  m.couplings = couplings;
  validate_model(m, "model");
  return m;
}

namespace {

SamplerOptions options_from_dict(const py::dict& d) {
  SamplerOptions o;
  for (const auto& item : d) {
    const auto key = item.first.cast<std::string>();
    const py::handle v = item.second;
    if (key == "method") o.method = v.cast<std::string>();
    else if (key == "scan") o.scan = v.cast<std::string>();
    else if (key == "chains") o.chains = v.cast<std::int64_t>();
    else if (key == "samples") o.samples = v.cast<std::int64_t>();
    else if (key == "burn_in") o.burn_in = v.is_none() ? -1 : v.cast<std::int64_t>();
    else if (key == "thin") o.thin = v.is_none() ? -1 : v.cast<std::int64_t>();
    else if (key == "pilot_sweeps") o.pilot_sweeps = v.cast<std::int64_t>();
    else if (key == "max_pilot_sweeps") o.max_pilot_sweeps = v.cast<std::int64_t>();
    else if (key == "temperature") o.temperature = v.cast<double>();
    else if (key == "ladder") {
      if (!v.is_none()) o.temperature_ladder = v.cast<std::vector<double>>();
    } else if (key == "storage") o.storage = v.cast<std::string>();
    else if (key == "start") o.start = v.cast<std::string>();
    else if (key == "sparse_density_threshold") o.sparse_density_threshold = v.cast<double>();
    else if (key == "seed") o.seed = v.cast<std::uint64_t>();
    else if (key == "threads") o.threads = v.cast<int>();
    else if (key == "progress") o.progress = progress_callback(py::reinterpret_borrow<py::object>(v));
    else throw InputError("sampler: unknown option '" + key + "'");
  }
  if (!o.progress) o.progress = progress_callback(py::none());
  if (o.burn_in < -1 || o.thin < -1)
    throw InputError("sampler: burn_in and thin must be non-negative (None = automatic)");
  return o;
}

py::dict diagnostics_dict(const SamplerDiagnostics& d) {
  py::dict r;
  r["method"] = d.method;
  r["scan"] = d.scan;
  r["storage"] = d.storage;
  r["coupling_density"] = d.coupling_density;
  r["units"] = d.units;
  r["chains"] = d.chains;
  r["burn_in"] = d.burn_in;
  r["thin"] = d.thin;
  r["automatic_burn_in"] = d.automatic_burn_in;
  r["automatic_thin"] = d.automatic_thin;
  r["pilot_sweeps"] = d.pilot_sweeps;
  r["pilot_tau_energy"] = d.pilot_tau_energy;
  r["sweeps_per_chain"] = d.sweeps_per_chain;
  r["temperature"] = d.temperature;
  r["rhat_energy"] = d.rhat_energy;
  r["rhat_magnetisation"] = d.rhat_magnetisation;
  r["ess_energy"] = d.ess_energy;
  r["ess_magnetisation"] = d.ess_magnetisation;
  r["tau_energy"] = d.tau_energy;
  r["tau_magnetisation"] = d.tau_magnetisation;
  r["acceptance_rate"] = py::array(py::cast(d.acceptance_rate));
  r["mean_acceptance_rate"] = d.mean_acceptance_rate;
  r["ladder"] = py::array(py::cast(d.ladder));
  r["swap_acceptance"] = py::array(py::cast(d.swap_acceptance));
  r["ladder_acceptance"] = py::array(py::cast(d.ladder_acceptance));
  r["seconds"] = d.seconds;
  r["updates"] = d.updates;
  r["lock_step_groups"] = d.lock_step_groups;
  r["field_resolution"] = d.field_resolution;
  r["warnings"] = d.warnings;
  return r;
}

py::tuple sample_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                    const std::string& convention, const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const SamplerOptions o = options_from_dict(options);
  SampleSet s;
  {
    py::gil_scoped_release release;
    s = sample(model, o);
  }
  const auto rows = s.samples.rows(), cols = s.samples.cols();
  py::array out;
  if (model.convention == Convention::binary) {
    py::array_t<std::uint8_t> a({rows, cols});
    std::copy(s.samples.data(), s.samples.data() + rows * cols, a.mutable_data());
    out = a;
  } else {
    py::array_t<std::int8_t> a({rows, cols});
    std::int8_t* p = a.mutable_data();
    const std::uint8_t* b = s.samples.data();
    for (std::int64_t k = 0; k < rows * cols; ++k) p[k] = b[k] ? 1 : -1;
    out = a;
  }
  py::dict d = diagnostics_dict(s.diagnostics);
  d["energy"] = py::array(py::cast(s.energies));
  d["chain"] = py::array(py::cast(s.chain));
  return py::make_tuple(out, d);
}

py::dict statistics_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                       const std::string& convention, const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const SamplerOptions o = options_from_dict(options);
  ModelStatistics st;
  {
    py::gil_scoped_release release;
    st = model_statistics(model, o);
  }
  py::dict r;
  r["convention"] = to_string(st.convention);
  r["temperature"] = st.temperature;
  r["mean"] = st.means.value;
  r["mean_error"] = st.means.error;
  r["second"] = st.second.value;
  r["second_error"] = st.second.error;
  r["connected"] = st.connected.value;
  r["connected_error"] = st.connected.error;
  r["active_count"] = st.active_count.value;
  r["active_count_error"] = st.active_count.error;
  r["energy"] = st.energy.value;
  r["energy_error"] = st.energy.error;
  r["specific_heat"] = st.specific_heat.value;
  r["specific_heat_error"] = st.specific_heat.error;
  r["batches"] = st.batches;
  r["error_method"] = st.error_method;
  r["diagnostics"] = diagnostics_dict(st.diagnostics);
  return r;
}

py::dict scan_py(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                 const std::string& convention, const std::vector<double>& temperatures,
                 bool parallel_tempering, const py::dict& options) {
  const IsingModel model = model_from_arrays(fields, couplings, convention);
  const SamplerOptions o = options_from_dict(options);
  TemperatureScan sc;
  {
    py::gil_scoped_release release;
    sc = temperature_scan(model, temperatures, o, parallel_tempering);
  }
  py::dict r;
  r["temperatures"] = py::array(py::cast(sc.temperatures));
  r["energy"] = py::array(py::cast(sc.energy));
  r["energy_error"] = py::array(py::cast(sc.energy_error));
  r["specific_heat"] = py::array(py::cast(sc.specific_heat));
  r["specific_heat_error"] = py::array(py::cast(sc.specific_heat_error));
  r["peak_index"] = sc.peak_index;
  r["peak_temperature"] = sc.peak_temperature;
  r["peak_at_edge"] = sc.peak_at_edge;
  r["parallel_tempering"] = sc.parallel_tempering;
  r["swap_acceptance"] = py::array(py::cast(sc.swap_acceptance));
  py::list runs;
  for (const auto& d : sc.runs) runs.append(diagnostics_dict(d));
  r["runs"] = runs;
  return r;
}

}  // namespace

void bind_sampler(py::module_& m) {
  m.def("sample", &sample_py, py::arg("fields"), py::arg("couplings"), py::arg("convention"),
        py::arg("options"), "Monte Carlo samples and diagnostics (see spinfer.sample).");
  m.def("model_statistics", &statistics_py, py::arg("fields"), py::arg("couplings"),
        py::arg("convention"), py::arg("options"),
        "Model statistics with batch-means errors (see spinfer.model_statistics).");
  m.def("temperature_scan", &scan_py, py::arg("fields"), py::arg("couplings"),
        py::arg("convention"), py::arg("temperatures"), py::arg("parallel_tempering"),
        py::arg("options"), "Energy and specific heat per temperature (see spinfer.temperature_scan).");
}

}  // namespace spinfer::py_bind
