// The pybind11 layer is the only language boundary: it translates exceptions, checks dtypes and
// layouts, and releases the GIL around long calls. One bind_<concern>.cpp per library concern.
#pragma once

#include <pybind11/eigen.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include "spinfer/spin_matrix.hpp"

namespace spinfer::py_bind {

namespace py = pybind11;

void bind_data(py::module_& m);
void bind_fit(py::module_& m);

/// A SpinMatrix viewing a numpy array without a copy when it is a C-contiguous 2-D uint8/bool
/// array; other dtypes and layouts are converted only when `copy` is true, else ValueError.
/// `convention` may be None (detect from the values).
SpinMatrix matrix_from_numpy(const py::array& array, const py::object& convention, bool copy,
                             const std::string& source = "array");

}  // namespace spinfer::py_bind
