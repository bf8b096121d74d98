// Binning spike events into a binary (bins x units) matrix; see spikes.hpp for the rules.
#include <algorithm>
#include <cmath>
#include <iomanip>
#include <sstream>
#include <numeric>

#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/spikes.hpp"

namespace spinfer {
namespace {

// Bin coordinate x = (t - t0) / w, rounded to the nearest integer when within the tolerance of
// the edge rule (spikes.hpp).
double bin_coordinate(double t, double t0, double w) {
  const double x = (t - t0) / w;
  const double tol = kEdgeTolerance * std::max(1.0, (std::fabs(t) + std::fabs(t0)) / w);
  const double r = std::round(x);
  return std::fabs(x - r) <= tol ? r : x;
}

std::string number(double v) {
  std::ostringstream s;
  s << std::setprecision(10) << v;
  return s.str();
}

std::string seconds(double t) { return number(t) + " s"; }

struct Window {
  double start = 0, stop = 0, width = 0;
  std::int64_t bins = 0;  // whole bins in [start, stop)
};

Window resolve_window(const SpikeTable& table, const BinningOptions& o) {
  const std::string& src = table.source;
  if (!std::isfinite(o.bin_width) || o.bin_width <= 0)
    throw InputError(src + ": the bin width must be a positive number of seconds");
  if (!std::isfinite(o.min_rate_hz) || o.min_rate_hz < 0)
    throw InputError(src + ": the minimum rate must be a non-negative number of Hz");
  if (table.time.empty()) throw InputError(src + ": no spikes");
  const auto [lo, hi] = std::minmax_element(table.time.begin(), table.time.end());
  Window w;
  w.start = o.start.value_or(*lo);
  w.stop = o.stop.value_or(*hi);
  w.width = o.bin_width;
  if (!std::isfinite(w.start) || !std::isfinite(w.stop))
    throw InputError(src + ": start and stop must be finite");
  if (w.stop <= w.start)
    throw InputError(src + ": stop (" + seconds(w.stop) + ") must be after start (" +
                     seconds(w.start) + ")");
  w.bins = std::int64_t(std::floor(bin_coordinate(w.stop, w.start, w.width)));
  if (w.bins < 1)
    throw InputError(src + ": the window [" + seconds(w.start) + ", " + seconds(w.stop) +
                     ") is shorter than one bin of " + seconds(w.width));
  return w;
}

// Gaps sorted by start, each inside the window and not overlapping the next.
std::vector<std::pair<double, double>> checked_gaps(const BinningOptions& o, const Window& w,
                                                    const std::string& src) {
  auto gaps = o.gaps;
  std::sort(gaps.begin(), gaps.end());
  for (std::size_t k = 0; k < gaps.size(); ++k) {
    const auto [a, b] = gaps[k];
    const std::string name = "gap " + seconds(a) + " to " + seconds(b);
    if (!std::isfinite(a) || !std::isfinite(b) || b <= a)
      throw InputError(src + ": " + name + ": the end must be after the start");
    if (a < w.start || b > w.stop)
      throw InputError(src + ": " + name + " lies outside the window [" + seconds(w.start) +
                       ", " + seconds(w.stop) + ")");
    if (k > 0 && a < gaps[k - 1].second)
      throw InputError(src + ": " + name + " overlaps the gap " + seconds(gaps[k - 1].first) +
                       " to " + seconds(gaps[k - 1].second));
  }
  return gaps;
}

// Row of each bin in the output, or -1 for a bin overlapping a gap.
std::vector<std::int64_t> rows_of_bins(const Window& w,
                                       const std::vector<std::pair<double, double>>& gaps,
                                       std::int64_t* dropped) {
  std::vector<char> in_gap(std::size_t(w.bins), 0);
  for (const auto& [a, b] : gaps) {
    // Bins k with [t0 + k w, t0 + (k+1) w) meeting (a, b) in more than a point.
    const double xa = bin_coordinate(a, w.start, w.width);
    const double xb = bin_coordinate(b, w.start, w.width);
    const std::int64_t first = std::int64_t(std::floor(xa));
    const std::int64_t last = std::int64_t(std::ceil(xb)) - 1;
    for (std::int64_t k = std::max<std::int64_t>(first, 0); k <= std::min(last, w.bins - 1); ++k)
      in_gap[std::size_t(k)] = 1;
  }
  std::vector<std::int64_t> row(std::size_t(w.bins), -1);
  std::int64_t next = 0;
  *dropped = 0;
  for (std::size_t k = 0; k < row.size(); ++k) {
    if (in_gap[k]) ++*dropped;
    else row[k] = next++;
  }
  return row;
}

// Output order of the units: numerically when every id is a number, else lexicographically.
std::vector<std::size_t> unit_order(const std::vector<std::string>& ids) {
  std::vector<std::size_t> order(ids.size());
  std::iota(order.begin(), order.end(), 0);
  std::vector<double> value(ids.size());
  bool numeric = true;
  for (std::size_t k = 0; k < ids.size() && numeric; ++k) {
    const std::optional<double> v = parse_number(ids[k]);
    numeric = v && std::isfinite(*v);
    if (numeric) value[k] = *v;
  }
  std::sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    if (numeric && value[a] != value[b]) return value[a] < value[b];
    return ids[a] < ids[b];
  });
  return order;
}

}  // namespace

std::vector<const UnitBinning*> BinningReport::dropped_units() const {
  std::vector<const UnitBinning*> out;
  for (const UnitBinning& u : units)
    if (u.dropped) out.push_back(&u);
  return out;
}

nlohmann::json BinningReport::to_json() const {
  nlohmann::json per_unit = nlohmann::json::array(), dropped = nlohmann::json::array();
  for (const UnitBinning& u : units) {
    nlohmann::json j = {{"id", u.id},          {"spikes", u.spikes},
                        {"rate_hz", u.rate_hz}, {"active_bins", u.active_bins},
                        {"multi_spike_bins", u.multi_spike_bins}, {"dropped", u.dropped}};
    if (u.dropped) dropped.push_back({{"id", u.id}, {"rate_hz", u.rate_hz}});
    per_unit.push_back(std::move(j));
  }
  return {{"start_s", start},
          {"stop_s", stop},
          {"bin_width_s", bin_width},
          {"bins_in_window", bins_in_window},
          {"bins_kept", bins_kept},
          {"bins_dropped_gaps", bins_dropped_gaps},
          {"spikes_total", spikes_total},
          {"spikes_outside_window", spikes_outside_window},
          {"spikes_in_dropped_bins", spikes_in_dropped_bins},
          {"active_bins", active_bins},
          {"multi_spike_bins", multi_spike_bins},
          {"multi_spike_fraction", active_bins ? double(multi_spike_bins) / double(active_bins) : 0.0},
          {"units_dropped", dropped},
          {"units", per_unit}};
}

BinnedSpikes bin_spikes(const SpikeTable& table, const BinningOptions& options) {
  const std::string& src = table.source;
  validate_spike_table(table);
  const SpikeTable& checked = table;
  const Window w = resolve_window(checked, options);
  const auto gaps = checked_gaps(options, w, src);
  BinningReport rep;
  const std::vector<std::int64_t> row = rows_of_bins(w, gaps, &rep.bins_dropped_gaps);
  rep.start = w.start;
  rep.stop = w.stop;
  rep.bin_width = w.width;
  rep.bins_in_window = w.bins;
  rep.bins_kept = w.bins - rep.bins_dropped_gaps;
  rep.spikes_total = std::int64_t(checked.time.size());
  if (rep.bins_kept == 0) throw InputError(src + ": every bin of the window lies in a gap");

  // Per (kept bin, unit) spike counts, saturating at 2 (we only need 0, 1, 2+).
  const std::size_t n_units = checked.unit_ids.size();
  std::vector<std::uint8_t> counts(std::size_t(rep.bins_kept) * n_units, 0);
  std::vector<std::int64_t> unit_spikes(n_units, 0);
  const double stop_x = bin_coordinate(w.stop, w.start, w.width);
  for (std::size_t s = 0; s < checked.time.size(); ++s) {
    const double x = bin_coordinate(checked.time[s], w.start, w.width);
    if (x < 0 || x >= stop_x) {
      ++rep.spikes_outside_window;
      continue;
    }
    const std::int64_t k = std::int64_t(std::floor(x));
    if (k >= w.bins || row[std::size_t(k)] < 0) {
      ++rep.spikes_in_dropped_bins;
      continue;
    }
    std::uint8_t& c = counts[std::size_t(row[std::size_t(k)]) * n_units + std::size_t(checked.unit[s])];
    c = std::uint8_t(std::min(2, c + 1));
    ++unit_spikes[std::size_t(checked.unit[s])];
  }

  // Per-unit active and multi-spike bin counts, in one row-major pass over the counts.
  std::vector<std::int64_t> active(n_units, 0), multi(n_units, 0);
  for (std::int64_t r = 0; r < rep.bins_kept; ++r) {
    const std::uint8_t* c = counts.data() + std::size_t(r) * n_units;
    for (std::size_t u = 0; u < n_units; ++u) {
      active[u] += c[u] >= 1;
      multi[u] += c[u] >= 2;
    }
  }
  const double duration = double(rep.bins_kept) * w.width;
  std::vector<std::size_t> keep;  // original unit indices, in output order
  for (std::size_t u : unit_order(checked.unit_ids)) {
    UnitBinning ub;
    ub.id = checked.unit_ids[u];
    ub.spikes = unit_spikes[u];
    ub.rate_hz = double(ub.spikes) / duration;
    ub.active_bins = active[u];
    ub.multi_spike_bins = multi[u];
    ub.dropped = ub.rate_hz < options.min_rate_hz;
    if (!ub.dropped) {
      keep.push_back(u);
      rep.active_bins += ub.active_bins;
      rep.multi_spike_bins += ub.multi_spike_bins;
    }
    rep.units.push_back(std::move(ub));
  }
  if (keep.empty())
    throw InputError(src + ": every unit fires below the minimum rate of " +
                     number(options.min_rate_hz) + " Hz");

  std::vector<std::uint8_t> bits(std::size_t(rep.bins_kept) * keep.size());
  std::vector<std::string> names;
  for (std::size_t u : keep) names.push_back(checked.unit_ids[u]);
  for (std::int64_t r = 0; r < rep.bins_kept; ++r) {
    const std::uint8_t* c = counts.data() + std::size_t(r) * n_units;
    std::uint8_t* out = bits.data() + std::size_t(r) * keep.size();
    for (std::size_t j = 0; j < keep.size(); ++j) out[j] = c[keep[j]] ? 1 : 0;
  }
  SpinMatrix m(std::move(bits), rep.bins_kept, std::int64_t(keep.size()), Convention::binary);
  m.set_names(std::move(names));
  return {std::move(m), std::move(rep)};
}

}  // namespace spinfer
