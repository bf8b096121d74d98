// Temperature scan of a model: mean energy and specific heat C(T) = Var(E) / (N T^2) for
// P_T(v) ∝ exp(-E(v) / T) over a grid of T, with the location of the C(T) peak (as in
// Tkacik et al., PNAS 112:11508, 2015). Exact by enumeration for small models; Monte Carlo (optionally one parallel-tempering
// run across the whole ladder) beyond.
#pragma once

#include <string>
#include <vector>

#include "spinfer/model.hpp"
#include "spinfer/sampler.hpp"

namespace spinfer {

struct ScanOptions {
  std::string method = "auto";   ///< "auto" (exact when N <= 20, else tempering), "exact",
                                 ///< "sampled" (independent runs), "tempering"
  SamplerOptions sampler;        ///< used by the Monte Carlo methods (threads and progress
                                 ///< also by the exact one: progress between temperatures)
};

/// Runs the scan; `temperatures` must be positive (sorted ascending in the result).
/// The exact method reports zero errors; `method` of the result's first run says what was used.
/// Throws Interrupted when sampler.progress returns false.
TemperatureScan scan_temperatures(const IsingModel& model, std::vector<double> temperatures,
                                  const ScanOptions& options, std::string* method_used = nullptr);

/// Sets peak_index, peak_at_edge and peak_temperature of a filled scan: the grid maximum of C(T),
/// refined by the vertex of the parabola through it and its two neighbours (the grid value at an
/// edge of the grid).
void locate_specific_heat_peak(TemperatureScan& scan);

}  // namespace spinfer
