#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/version.hpp"

namespace py = pybind11;

PYBIND11_MODULE(_core, m) {
  m.doc() = "spinfer C++ core (use the spinfer package, not this module directly)";
  m.attr("__version__") = SPINFER_VERSION;
  m.def("build_info", &spinfer::build_info, "Compiler, BLAS, OpenMP and Eigen of this build.");

  // Library exceptions -> Python exceptions, translated here exactly once.
  // InputError derives from std::invalid_argument, which pybind11 maps to ValueError.
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const spinfer::FileError& e) {
      PyErr_SetString(PyExc_OSError, e.what());
    } catch (const spinfer::NumericalError& e) {
      PyErr_SetString(PyExc_ArithmeticError, e.what());
    } catch (const spinfer::Interrupted& e) {
      PyErr_SetString(PyExc_KeyboardInterrupt, e.what());
    }
  });

  spinfer::py_bind::bind_data(m);
  spinfer::py_bind::bind_check(m);
  spinfer::py_bind::bind_estimate(m);
  spinfer::py_bind::bind_model(m);
  spinfer::py_bind::bind_io(m);
  spinfer::py_bind::bind_sampler(m);
  spinfer::py_bind::bind_partition(m);
  spinfer::py_bind::bind_fit(m);
  spinfer::py_bind::bind_refine(m);
}
