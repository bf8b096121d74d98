// The pybind11 layer is the only language boundary: it translates exceptions, checks dtypes and
// layouts, and releases the GIL around long calls. One bind_<concern>.cpp per library concern.
#pragma once

#include <pybind11/eigen.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <nlohmann/json.hpp>

#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer::py_bind {

namespace py = pybind11;

void bind_data(py::module_& m);
void bind_check(py::module_& m);
void bind_estimate(py::module_& m);
void bind_model(py::module_& m);
void bind_io(py::module_& m);
void bind_sampler(py::module_& m);
void bind_partition(py::module_& m);

// Shared conversions (defined in bind_model.cpp and bind_sampler.cpp).
py::dict model_to_dict(const IsingModel& m);
IsingModel model_from_dict(const py::dict& d);
/// A validated model from plain arrays and a convention name (bind_sampler.cpp).
IsingModel model_from_arrays(const Eigen::VectorXd& fields, const Eigen::MatrixXd& couplings,
                             const std::string& convention);
py::object json_to_py(const nlohmann::json& j);
/// Progress callback for long calls: takes the GIL briefly, runs Python signal handlers (Ctrl-C
/// -> KeyboardInterrupt) and an optional user callable(dict) -> bool.
ProgressCallback progress_callback(const py::object& user);
void bind_fit(py::module_& m);
void bind_refine(py::module_& m);

/// A SpinMatrix viewing a numpy array without a copy when it is a C-contiguous 2-D uint8/bool
/// array; other dtypes and layouts are converted only when `copy` is true, else ValueError.
/// `convention` may be None (detect from the values).
SpinMatrix matrix_from_numpy(const py::array& array, const py::object& convention, bool copy,
                             const std::string& source = "array");

}  // namespace spinfer::py_bind
