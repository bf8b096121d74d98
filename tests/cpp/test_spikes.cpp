// Spike binning on a hand-worked example, and every rejected input.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>

#include "spinfer/errors.hpp"
#include "spinfer/spikes.hpp"

using namespace spinfer;

namespace {

SpikeTable table(const std::vector<std::pair<std::string, double>>& spikes) {
  std::vector<std::string> ids;
  std::vector<std::int32_t> unit;
  std::vector<double> time;
  for (const auto& [id, t] : spikes) {
    auto it = std::find(ids.begin(), ids.end(), id);
    if (it == ids.end()) it = ids.insert(ids.end(), id);
    unit.push_back(std::int32_t(it - ids.begin()));
    time.push_back(t);
  }
  return make_spike_table(ids, unit, time, "test");
}

}  // namespace

TEST_CASE("binning: hand-worked example with a gap, edge spikes and a rate cut") {
  // Window [0, 1) s, w = 0.1 s: bins k = 0..9, bin k = [0.1 k, 0.1 (k+1)).
  // Gap [0.4, 0.6) overlaps bins 4 and 5 only (bin 3 ends and bin 6 starts at its edges), so
  // the kept bins are 0 1 2 3 6 7 8 9 -> 8 rows; 2 bins dropped.
  //   unit a: 0.05 -> bin 0; 0.12, 0.18 -> bin 1 (two spikes); 0.61 -> bin 6; 1.2 >= stop: outside
  //   unit b: 0.3 -> bin 3 although 0.3 / 0.1 = 2.9999999999999996 in floating point;
  //           0.45 -> bin 4 (gap: a spike in a dropped bin); 0.7 -> bin 7 (0.7/0.1 = 6.999...);
  //           1.0 = stop: outside ([start, stop) is half-open)
  //   unit c: 0.95 -> bin 9; rate = 1 spike / (8 bins * 0.1 s) = 1.25 Hz < 2 Hz: dropped
  // Rates of the kept units: a = 4 / 0.8 = 5 Hz, b = 2 / 0.8 = 2.5 Hz.
  const SpikeTable t = table({{"a", 0.05}, {"b", 0.3}, {"a", 0.12}, {"a", 0.18}, {"c", 0.95},
                              {"b", 0.45}, {"a", 0.61}, {"b", 0.7}, {"a", 1.2}, {"b", 1.0}});
  BinningOptions o;
  o.bin_width = 0.1;
  o.start = 0.0;
  o.stop = 1.0;
  o.gaps = {{0.4, 0.6}};
  o.min_rate_hz = 2.0;
  const BinnedSpikes b = bin_spikes(t, o);
  const int expected[8][2] = {
      {1, 0},  // bin 0
      {1, 0},  // bin 1 (a twice)
      {0, 0},  // bin 2
      {0, 1},  // bin 3
      {1, 0},  // bin 6
      {0, 1},  // bin 7
      {0, 0},  // bin 8
      {0, 0},  // bin 9 (c was dropped)
  };
  REQUIRE(b.matrix.rows() == 8);
  REQUIRE(b.matrix.cols() == 2);
  for (int r = 0; r < 8; ++r)
    for (int i = 0; i < 2; ++i) CHECK(b.matrix.active(r, i) == bool(expected[r][i]));
  CHECK(b.matrix.names() == std::vector<std::string>{"a", "b"});
  const BinningReport& rep = b.report;
  CHECK(rep.bins_in_window == 10);
  CHECK(rep.bins_kept == 8);
  CHECK(rep.bins_dropped_gaps == 2);
  CHECK(rep.spikes_total == 10);
  CHECK(rep.spikes_outside_window == 2);
  CHECK(rep.spikes_in_dropped_bins == 1);
  CHECK(rep.multi_spike_bins == 1);
  CHECK(rep.active_bins == 5);
  REQUIRE(rep.units.size() == 3);
  CHECK(rep.units[0].rate_hz == doctest::Approx(5.0));
  CHECK(rep.units[0].multi_spike_bins == 1);
  CHECK(rep.units[1].rate_hz == doctest::Approx(2.5));
  CHECK(rep.units[2].id == "c");
  CHECK(rep.units[2].dropped);
  CHECK(rep.units[2].rate_hz == doctest::Approx(1.25));
  CHECK(rep.dropped_units().size() == 1);
  CHECK(rep.to_json()["units_dropped"][0]["id"] == "c");
}

TEST_CASE("binning: default window, numeric id order, partial final bin") {
  // Spikes from 1.0 to 1.35 s with w = 0.1: whole bins [1.0, 1.1) [1.1, 1.2) [1.2, 1.3); the
  // final 0.05 s are a partial bin, and the last spike (t = stop) lies outside [start, stop).
  const SpikeTable t = table({{"10", 1.0}, {"2", 1.15}, {"3", 1.25}, {"10", 1.28}, {"2", 1.35}});
  BinningOptions o;
  o.bin_width = 0.1;
  const BinnedSpikes b = bin_spikes(t, o);
  CHECK(b.matrix.names() == std::vector<std::string>{"2", "3", "10"});
  CHECK(b.report.bins_in_window == 3);
  CHECK(b.report.spikes_outside_window == 1);
  const int expected[3][3] = {{0, 0, 1}, {1, 0, 0}, {0, 1, 1}};
  REQUIRE(b.matrix.rows() == 3);
  for (int r = 0; r < 3; ++r)
    for (int i = 0; i < 3; ++i) CHECK(b.matrix.active(r, i) == bool(expected[r][i]));
}

TEST_CASE("binning: bad input is rejected") {
  const SpikeTable t = table({{"a", 0.1}, {"b", 0.5}});
  BinningOptions o;
  o.bin_width = 0.1;
  o.start = 0.0;
  o.stop = 1.0;
  BinningOptions bad = o;
  bad.bin_width = 0;
  CHECK_THROWS_AS(bin_spikes(t, bad), InputError);
  bad = o;
  bad.stop = 0.0;
  CHECK_THROWS_WITH_AS(bin_spikes(t, bad), "test: stop (0 s) must be after start (0 s)", InputError);
  bad = o;
  bad.gaps = {{0.9, 1.5}};
  CHECK_THROWS_WITH_AS(bin_spikes(t, bad),
                       "test: gap 0.9 s to 1.5 s lies outside the window [0 s, 1 s)", InputError);
  bad = o;
  bad.gaps = {{0.2, 0.5}, {0.4, 0.6}};
  CHECK_THROWS_WITH_AS(bin_spikes(t, bad), "test: gap 0.4 s to 0.6 s overlaps the gap 0.2 s to 0.5 s",
                       InputError);
  bad = o;
  bad.gaps = {{0.5, 0.5}};
  CHECK_THROWS_AS(bin_spikes(t, bad), InputError);
  bad = o;
  bad.gaps = {{0.0, 1.0}};
  CHECK_THROWS_WITH_AS(bin_spikes(t, bad), "test: every bin of the window lies in a gap", InputError);
  bad = o;
  bad.stop = 0.05;
  CHECK_THROWS_AS(bin_spikes(t, bad), InputError);  // shorter than one bin
  CHECK_THROWS_WITH_AS(make_spike_table({"a"}, {0, 0}, {0.1, -0.2}, "s"),
                       "s: spike 2: spike time -0.2 is negative", InputError);
  CHECK_THROWS_AS(make_spike_table({"a"}, {0}, {std::nan("")}, "s"), InputError);
  CHECK_THROWS_AS(make_spike_table({"a", "a"}, {0}, {0.1}, "s"), InputError);
}
