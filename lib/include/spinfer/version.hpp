// Library version and build information (also printed by `spinfer --version` and exposed as
// spinfer.__version__ / spinfer.build_info()).
#pragma once

#include <string>

namespace spinfer {

/// Semantic version, e.g. "0.1.0".
std::string version();

/// One line per item: compiler, build type, BLAS vendor and its core/thread settings,
/// OpenMP version and thread maximum, Eigen version.
std::string build_info();

}  // namespace spinfer
