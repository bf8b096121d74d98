// Progress reports and cooperative interruption for long computations (fits, sampling,
// bootstrap). The callback is called from the calling thread every so often; returning false
// stops the computation, which then throws spinfer::Interrupted and leaves no partial output.
#pragma once

#include <cstdint>
#include <functional>
#include <string>

namespace spinfer {

struct Progress {
  std::string stage;        ///< e.g. "pseudo-likelihood", "sampling"
  std::int64_t done = 0;    ///< work units finished (iterations, units, sweeps, replicates)
  std::int64_t total = 0;   ///< expected total, 0 if unknown
  double objective = 0;     ///< current objective where meaningful, else 0
  double elapsed_s = 0;     ///< seconds since the computation started
};

/// Return true to continue, false to stop (=> spinfer::Interrupted).
using ProgressCallback = std::function<bool(const Progress&)>;

}  // namespace spinfer
