#include "spinfer/version.hpp"

#include <sstream>

#include <Eigen/Core>
#include <omp.h>

extern "C" char* openblas_get_config(void);
extern "C" char* openblas_get_corename(void);
extern "C" int openblas_get_num_threads(void);

namespace spinfer {

std::string version() { return SPINFER_VERSION; }

std::string build_info() {
  std::ostringstream out;
  out << "compiler: " << SPINFER_COMPILER << "\n"
      << "build type: " << SPINFER_BUILD_TYPE << "\n"
      << "BLAS: OpenBLAS (" << openblas_get_config() << "; core " << openblas_get_corename()
      << ", " << openblas_get_num_threads() << " threads)\n"
      << "OpenMP: " << _OPENMP << " (max threads " << omp_get_max_threads() << ")\n"
      << "Eigen: " << EIGEN_WORLD_VERSION << "." << EIGEN_MAJOR_VERSION << "."
      << EIGEN_MINOR_VERSION << "\n";
  return out.str();
}

}  // namespace spinfer
