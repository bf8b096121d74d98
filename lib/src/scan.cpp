#include "spinfer/scan.hpp"

#include <algorithm>
#include <cmath>

#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"

namespace spinfer {

double refine_peak(const std::vector<double>& x, const std::vector<double>& y, std::size_t k) {
  if (k == 0 || k + 1 >= x.size()) return x[k];
  // Lagrange parabola through (x0,y0), (x1,y1), (x2,y2); vertex where its derivative vanishes.
  const double x0 = x[k - 1], x1 = x[k], x2 = x[k + 1];
  const double y0 = y[k - 1], y1 = y[k], y2 = y[k + 1];
  const double d0 = (x0 - x1) * (x0 - x2), d1 = (x1 - x0) * (x1 - x2), d2 = (x2 - x0) * (x2 - x1);
  const double a = y0 / d0 + y1 / d1 + y2 / d2;
  const double b = -(y0 * (x1 + x2) / d0 + y1 * (x0 + x2) / d1 + y2 * (x0 + x1) / d2);
  if (!(a < 0)) return x1;  // not a maximum: keep the grid point
  return std::clamp(-b / (2 * a), x0, x2);
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
  for (double t : temperatures) {
    ExactOptions eo;
    eo.temperature = t;
    eo.threads = options.sampler.threads;
    const ExactStatistics e = exact_statistics(model, eo);
    s.energy.push_back(e.mean_energy);
    s.energy_error.push_back(0.0);
    s.specific_heat.push_back(e.specific_heat);
    s.specific_heat_error.push_back(0.0);
  }
  const auto it = std::max_element(s.specific_heat.begin(), s.specific_heat.end());
  s.peak_index = it - s.specific_heat.begin();
  s.peak_at_edge = s.peak_index == 0 || s.peak_index + 1 == std::int64_t(temperatures.size());
  s.peak_temperature = refine_peak(s.temperatures, s.specific_heat, std::size_t(s.peak_index));
  return s;
}

}  // namespace spinfer
