#include "spinfer/scan.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>

#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"

namespace spinfer {

void locate_specific_heat_peak(TemperatureScan& scan) {
  const auto& x = scan.temperatures;
  const auto& c = scan.specific_heat;
  const std::size_t i = std::size_t(std::max_element(c.begin(), c.end()) - c.begin());
  scan.peak_index = std::int64_t(i);
  scan.peak_temperature = x[i];
  scan.peak_at_edge = i == 0 || i + 1 == x.size();
  if (scan.peak_at_edge) return;
  const double x0 = x[i - 1], x1 = x[i], x2 = x[i + 1];
  const double y0 = c[i - 1], y1 = c[i], y2 = c[i + 1];
  const double num = (x1 - x0) * (x1 - x0) * (y1 - y2) - (x1 - x2) * (x1 - x2) * (y1 - y0);
  const double den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0);
  if (den != 0) scan.peak_temperature = std::clamp(x1 - 0.5 * num / den, x0, x2);
}

TemperatureScan scan_temperatures(const IsingModel& model, std::vector<double> temperatures,
                                  const ScanOptions& options, std::string* method_used) {
  if (temperatures.empty()) throw InputError("temperature scan: no temperatures given");
  for (double t : temperatures)
    if (!(t > 0) || !std::isfinite(t)) throw InputError("temperature scan: temperatures must be positive");
  std::sort(temperatures.begin(), temperatures.end());
  std::string method = options.method;
  if (method == "auto") method = model.size() <= 20 ? "exact" : "tempering";
  if (method_used) *method_used = method;
  if (method == "sampled" || method == "tempering")
    return temperature_scan(model, temperatures, options.sampler, method == "tempering");
  if (method != "exact")
    throw InputError("temperature scan: unknown method '" + method +
                     "' (expected auto, exact, sampled or tempering)");
  TemperatureScan s;
  s.temperatures = temperatures;
  const auto start = std::chrono::steady_clock::now();
  for (double t : temperatures) {
    // Between temperatures (about 0.1 s each at N = 20) the progress callback may stop the scan.
    if (options.sampler.progress) {
      Progress p;
      p.stage = "exact scan";
      p.done = std::int64_t(s.energy.size());
      p.total = std::int64_t(temperatures.size());
      p.elapsed_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
      if (!options.sampler.progress(p)) throw Interrupted("temperature scan interrupted");
    }
    ExactOptions eo;
    eo.temperature = t;
    eo.threads = options.sampler.threads;
    const ExactStatistics e = exact_statistics(model, eo);
    s.energy.push_back(e.mean_energy);
    s.energy_error.push_back(0.0);
    s.specific_heat.push_back(e.specific_heat);
    s.specific_heat_error.push_back(0.0);
  }
  locate_specific_heat_peak(s);
  return s;
}

}  // namespace spinfer
