// Spike-event tables and their binning into a binary matrix (time bins x units).
//
// Binning rule: bins are half-open [t0 + k w, t0 + (k+1) w) with
// t0 = start; only bins lying fully inside [start, stop) and overlapping no gap are kept
// (gap bins are DROPPED, not zero-filled, which would create correlated silence). A unit is
// active (1) in a bin holding at least one of its spikes.
//
// Floating-point edges: a spike's bin is k = floor(x) with x = (t - t0) / w, except that an x
// within tol = kEdgeTolerance * max(1, (|t| + |t0|) / w) of an integer is rounded to that integer
// first. So a spike at t = 0.3 s with w = 0.1 s lands in bin 3 (where it belongs) although
// (0.3 - 0) / 0.1 evaluates to 2.9999999999999996. The scale (|t| + |t0|) / w is the size of the
// rounding error of x (a few ulps of t and t0, divided by w); 1e-10 of it is far above that error
// and far below any physical time resolution (0.4 us for t = 1 h, w = 1 ms). The same rule decides
// how many whole bins fit in [start, stop) and whether a gap boundary touches a bin edge.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "spinfer/spin_matrix.hpp"

namespace spinfer {

/// Relative tolerance of the edge rule above.
constexpr double kEdgeTolerance = 1e-10;

/// Spike events: unit ids (distinct strings) and, per spike, an index into them and a time (s).
struct SpikeTable {
  std::vector<std::string> unit_ids;
  std::vector<std::int32_t> unit;   ///< per spike, index into unit_ids
  std::vector<double> time;         ///< per spike, seconds (finite, >= 0)
  std::string source = "spikes";    ///< file name for messages
};

/// Reads "unit,time" rows from a .csv/.tsv/.txt file. A header row is optional; when present it
/// must name columns "unit" and "time" (any order, other columns ignored); without one the file
/// has exactly two columns, unit then time. Errors name the file, line and column.
SpikeTable read_spike_table(const std::string& path);

/// Builds and validates a table from distinct ids and per-spike indices and times (e.g. from
/// Python). `source` names it in messages.
SpikeTable make_spike_table(std::vector<std::string> unit_ids, std::vector<std::int32_t> unit,
                            std::vector<double> time, const std::string& source = "spikes");

/// InputError unless sizes agree, ids are distinct and non-empty, indices are in range and every
/// time is finite and >= 0 (the message gives the 1-based spike number).
void validate_spike_table(const SpikeTable& table);

struct BinningOptions {
  double bin_width = 0;                                ///< seconds, > 0
  std::optional<double> start, stop;                   ///< seconds; default: first / last spike
  std::vector<std::pair<double, double>> gaps;         ///< [a, b) intervals to exclude
  double min_rate_hz = 0;                              ///< drop units firing below this
};

struct UnitBinning {
  std::string id;
  std::int64_t spikes = 0;            ///< spikes in kept bins
  double rate_hz = 0;                 ///< spikes / (kept bins * bin width)
  std::int64_t active_bins = 0;       ///< kept bins with >= 1 spike
  std::int64_t multi_spike_bins = 0;  ///< kept bins with >= 2 spikes
  bool dropped = false;               ///< below min_rate_hz
};

struct BinningReport {
  double start = 0, stop = 0, bin_width = 0;
  std::int64_t bins_in_window = 0;     ///< whole bins inside [start, stop)
  std::int64_t bins_kept = 0;
  std::int64_t bins_dropped_gaps = 0;
  std::int64_t spikes_total = 0;
  std::int64_t spikes_outside_window = 0;   ///< t < start or t >= stop
  std::int64_t spikes_in_dropped_bins = 0;  ///< in gap bins or the final partial bin
  std::int64_t multi_spike_bins = 0;        ///< over kept units
  std::int64_t active_bins = 0;             ///< over kept units
  std::vector<UnitBinning> units;           ///< every unit, in output order, dropped ones flagged

  std::vector<const UnitBinning*> dropped_units() const;
  nlohmann::json to_json() const;
};

struct BinnedSpikes {
  SpinMatrix matrix;  ///< bins_kept x kept units, binary convention, unit ids as names
  BinningReport report;
};

/// Bins the spikes. Unit order: ids sorted numerically when every id is a number, else
/// lexicographically. Throws InputError for negative or non-finite times, bin_width <= 0,
/// stop <= start, gaps with b <= a, outside [start, stop] or overlapping each other, and when no
/// bin or no unit remains.
BinnedSpikes bin_spikes(const SpikeTable& table, const BinningOptions& options);

}  // namespace spinfer
