// Pseudo-likelihood, interaction screening and penalty paths. Fits return plain dicts
// {fields, couplings, convention, names, provenance}; the Python layer (fitting.py) documents them.
#include <Python.h>

#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/penalty_path.hpp"
#include "spinfer/pseudo_likelihood.hpp"
#include "spinfer/screening.hpp"

namespace spinfer::py_bind {
namespace {

std::optional<IsingModel> model_from(const py::object& fields, const py::object& couplings,
                                     const std::string& convention) {
  if (fields.is_none()) return std::nullopt;
  IsingModel m;
  m.fields = fields.cast<Eigen::VectorXd>();
  m.couplings = couplings.cast<Eigen::MatrixXd>();
  m.convention = parse_convention(convention);
  return m;
}

// Progress from Python (GIL re-acquired); Ctrl-C is honoured even without a user callback.
ProgressCallback progress_from(const py::object& callback) {
  py::object cb = callback;
  return [cb](const Progress& p) -> bool {
    py::gil_scoped_acquire gil;
    if (PyErr_CheckSignals() != 0) throw py::error_already_set();
    if (cb.is_none()) return true;
    py::dict d;
    d["stage"] = p.stage;
    d["done"] = p.done;
    d["total"] = p.total;
    d["objective"] = p.objective;
    d["elapsed_s"] = p.elapsed_s;
    py::object r = cb(d);
    return r.is_none() || r.cast<bool>();
  };
}

double penalty_value(const py::object& v, const char* name) {
  if (v.is_none()) return automatic_penalty;
  if (py::isinstance<py::str>(v)) {
    if (v.cast<std::string>() == "auto") return automatic_penalty;
    throw InputError(std::string(name) + ": expected a number >= 0 or 'auto'");
  }
  const double x = v.cast<double>();
  if (!(x >= 0)) throw InputError(std::string(name) + ": expected a number >= 0 or 'auto'");
  return x;
}

}  // namespace

void bind_fit(py::module_& m) {
  m.def("fit_pseudo_likelihood",
        [](const SpinMatrix& data, const py::object& l1, const py::object& l2, bool symmetric,
           int max_iterations, double tolerance, int threads, const py::object& warm_fields,
           const py::object& warm_couplings, const std::string& warm_convention,
           const py::object& progress, const std::string& representation) {
          PseudoLikelihoodOptions o;
          o.symmetric = symmetric;
          o.l1 = penalty_value(l1, "l1");
          o.l2 = penalty_value(l2, "l2");
          o.max_iterations = max_iterations;
          o.tolerance = tolerance;
          o.threads = threads;
          o.warm_start = model_from(warm_fields, warm_couplings, warm_convention);
          o.progress = progress_from(progress);
          o.representation = representation;
          IsingModel r;
          {
            py::gil_scoped_release release;
            r = fit_pseudo_likelihood(data, o);
          }
          return model_to_dict(r);
        },
        py::arg("data"), py::arg("l1"), py::arg("l2"), py::arg("symmetric"),
        py::arg("max_iterations"), py::arg("tolerance"), py::arg("threads"),
        py::arg("warm_fields"), py::arg("warm_couplings"), py::arg("warm_convention"),
        py::arg("progress"), py::arg("representation"));

  m.def("fit_screening",
        [](const SpinMatrix& data, bool logarithmic, const py::object& l1, const py::object& l2,
           bool symmetric, int max_iterations, double tolerance, int threads,
           const py::object& warm_fields, const py::object& warm_couplings,
           const std::string& warm_convention, const py::object& progress,
           const std::string& representation) {
          ScreeningOptions o;
          o.logarithmic = logarithmic;
          o.symmetric = symmetric;
          o.l1 = penalty_value(l1, "l1");
          o.l2 = penalty_value(l2, "l2");
          o.max_iterations = max_iterations;
          o.tolerance = tolerance;
          o.threads = threads;
          o.warm_start = model_from(warm_fields, warm_couplings, warm_convention);
          o.progress = progress_from(progress);
          o.representation = representation;
          IsingModel r;
          {
            py::gil_scoped_release release;
            r = fit_screening(data, o);
          }
          return model_to_dict(r);
        },
        py::arg("data"), py::arg("logarithmic"), py::arg("l1"), py::arg("l2"),
        py::arg("symmetric"), py::arg("max_iterations"), py::arg("tolerance"), py::arg("threads"),
        py::arg("warm_fields"), py::arg("warm_couplings"), py::arg("warm_convention"),
        py::arg("progress"), py::arg("representation"));

  m.def("penalty_path",
        [](const SpinMatrix& data, const std::string& estimator, const std::string& kind,
           const std::vector<double>& penalties, int grid_points, int folds,
           bool one_standard_error, bool symmetric, double other_penalty, int max_iterations,
           double tolerance, int threads, const std::string& representation,
           const py::object& progress) {
          PenaltyPathOptions o;
          o.estimator = estimator;
          o.kind = kind;
          o.penalties = penalties;
          o.grid_points = grid_points;
          o.folds = folds;
          o.one_standard_error = one_standard_error;
          o.symmetric = symmetric;
          o.other_penalty = other_penalty;
          o.max_iterations = max_iterations;
          o.tolerance = tolerance;
          o.threads = threads;
          o.representation = representation;
          o.progress = progress_from(progress);
          PenaltyPath p;
          {
            py::gil_scoped_release release;
            p = penalty_path(data, o);
          }
          py::dict d;
          d["penalties"] = p.penalties;
          d["mean_score"] = p.mean_score;
          d["se_score"] = p.se_score;
          d["chosen"] = p.chosen;
          d["kind"] = p.kind;
          d["rule"] = p.rule;
          d["folds"] = p.folds;
          return d;
        },
        py::arg("data"), py::arg("estimator"), py::arg("kind"), py::arg("penalties"),
        py::arg("grid_points"), py::arg("folds"), py::arg("one_standard_error"),
        py::arg("symmetric"), py::arg("other_penalty"), py::arg("max_iterations"),
        py::arg("tolerance"), py::arg("threads"), py::arg("representation"),
        py::arg("progress"));

  m.def("pseudo_log_likelihood",
        [](const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
           const std::string& convention, const SpinMatrix& data, int threads) {
          IsingModel model;
          model.fields = fields;
          model.couplings = couplings;
          model.convention = parse_convention(convention);
          py::gil_scoped_release release;
          return pseudo_log_likelihood(model, data, threads);
        },
        py::arg("fields"), py::arg("couplings"), py::arg("convention"), py::arg("data"),
        py::arg("threads"));

  m.def("default_penalty_grid", &default_penalty_grid, py::arg("kind"), py::arg("samples"),
        py::arg("units"), py::arg("points") = 9);
}

}  // namespace spinfer::py_bind
