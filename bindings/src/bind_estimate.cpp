// fit_model (every estimator by name) and coupling significance. Options cross as a dict built by
// spinfer/estimate.py; unknown keys are rejected there.
#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/fit.hpp"
#include "spinfer/significance.hpp"
#include "spinfer/unit_fits.hpp"

namespace spinfer::py_bind {
namespace {

double penalty(const py::handle& v) {
  if (py::isinstance<py::str>(v)) {
    if (v.cast<std::string>() == "auto") return kAutomaticPenalty;
    throw InputError("penalty: expected a number >= 0 or 'auto'");
  }
  const double x = v.cast<double>();
  if (!(x >= 0)) throw InputError("penalty: expected a number >= 0 or 'auto'");
  return x;
}

FitOptions fit_options(const py::dict& d) {
  FitOptions o;
  for (auto item : d) {
    const std::string k = item.first.cast<std::string>();
    const py::handle v = item.second;
    if (v.is_none()) continue;
    if (k == "method") o.method = v.cast<std::string>();
    else if (k == "symmetric") o.symmetric = v.cast<bool>();
    else if (k == "logarithmic") o.logarithmic = v.cast<bool>();
    else if (k == "l1") o.l1 = penalty(v);
    else if (k == "l2") o.l2 = penalty(v);
    else if (k == "shrinkage") o.shrinkage = v.cast<double>();
    else if (k == "mean_field_fallback") o.mean_field_fallback = v.cast<bool>();
    else if (k == "max_iterations") o.max_iterations = v.cast<int>();
    else if (k == "tolerance") o.tolerance = v.cast<double>();
    else if (k == "threads") o.threads = v.cast<int>();
    else if (k == "representation") o.representation = v.cast<std::string>();
    else if (k == "convention") o.convention = parse_convention(v.cast<std::string>());
    else if (k == "warm_start") o.warm_start = model_from_dict(v.cast<py::dict>());
    else if (k == "progress") o.progress = progress_callback(py::reinterpret_borrow<py::object>(v));
    else throw InputError("fit: unknown option '" + k + "'");
  }
  return o;
}

py::array_t<double> mat(const Eigen::MatrixXd& m) { return py::cast(m); }

}  // namespace

void bind_estimate(py::module_& m) {
  m.def("fit_methods", &fit_methods);
  m.def("fit_model", [](const SpinMatrix& data, const py::dict& options) {
        const FitOptions o = fit_options(options);
        IsingModel model;
        {
          py::gil_scoped_release release;
          model = fit_model(data, o);
        }
        return model_to_dict(model);
      }, py::arg("data"), py::arg("options"));

  m.def("fit_units", [](const SpinMatrix& data, const py::dict& options,
                        const std::vector<std::int64_t>& units) {
        const FitOptions o = fit_options(options);
        UnitFits f;
        {
          py::gil_scoped_release release;
          f = fit_model_units(data, o, units);
        }
        py::dict out;
        out["units"] = py::cast(f.units);
        out["coefficients"] = mat(f.coefficients);
        out["fields"] = py::cast(Eigen::VectorXd(f.fields));
        out["iterations"] = py::cast(f.iterations);
        out["objective"] = py::cast(f.objective);
        out["unconverged"] = py::cast(f.unconverged);
        out["names"] = py::cast(f.names);
        out["l1"] = f.provenance.l1;
        out["l2"] = f.provenance.l2;
        out["converged"] = f.unconverged.empty();
        out["extra"] = json_to_py(f.provenance.extra);
        return out;
      }, py::arg("data"), py::arg("options"), py::arg("units"));

  m.def("coupling_significance", [](const SpinMatrix& data, const py::dict& options,
                                    std::int64_t bootstrap, std::int64_t nulls, std::int64_t block_length,
                                    double confidence, double fdr, const std::string& convention,
                                    std::uint64_t seed, const py::object& progress) {
        FitOptions fo = fit_options(options);
        fo.progress = nullptr;  // progress is reported per refit below
        SignificanceOptions so;
        so.bootstrap_replicates = bootstrap;
        so.null_replicates = nulls;
        so.block_length = block_length;
        so.confidence = confidence;
        so.fdr = fdr;
        so.convention = parse_convention(convention);
        so.seed = seed;
        so.progress = progress_callback(progress);
        SignificanceResult r;
        {
          py::gil_scoped_release release;
          r = coupling_significance(data, [&](const SpinMatrix& d) { return fit_model(d, fo); }, so);
        }
        py::dict out;
        out["convention"] = to_string(r.convention);
        out["estimate"] = mat(r.estimate);
        out["standard_error"] = mat(r.standard_error);
        out["lower"] = mat(r.lower);
        out["upper"] = mat(r.upper);
        out["p_value"] = mat(r.p_value);
        out["q_value"] = mat(r.q_value);
        out["significant"] = py::cast(Eigen::MatrixXi(r.significant));
        out["null_abs"] = py::cast(r.null_abs);
        out["block_length"] = r.block_length;
        out["bootstrap_replicates"] = r.bootstrap_replicates;
        out["null_replicates"] = r.null_replicates;
        out["confidence"] = r.confidence;
        out["fdr"] = r.fdr;
        return out;
      }, py::arg("data"), py::arg("options"), py::arg("bootstrap") = 100, py::arg("nulls") = 20,
      py::arg("block_length") = 0, py::arg("confidence") = 0.95, py::arg("fdr") = 0.05,
      py::arg("convention") = "spin", py::arg("seed") = 0, py::arg("progress") = py::none());

  m.def("benjamini_hochberg", &benjamini_hochberg, py::arg("p"));
  m.def("circular_shift_surrogate", [](const SpinMatrix& d, std::int64_t min_offset, std::uint64_t seed,
                                       std::int64_t replicate) {
        std::vector<std::uint8_t> g;
        SpinMatrix s = circular_shift_surrogate(d, min_offset, seed, replicate, &g);
        return py::make_tuple(s, py::cast(g));
      }, py::arg("data"), py::arg("min_offset"), py::arg("seed"), py::arg("replicate"));
}

}  // namespace spinfer::py_bind
