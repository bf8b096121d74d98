// `spinfer bin`: spike events (unit, time in seconds) to a binary matrix of time bins x units.
#include <cmath>
#include <memory>
#include <sstream>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "spinfer/io.hpp"
#include "spinfer/spikes.hpp"

namespace spinfer::cli {
namespace {

struct BinArgs {
  std::string spikes;
  double bin_width = 0;
  double start = std::nan(""), stop = std::nan("");
  std::vector<std::string> gaps;
  double min_rate = 0;
};

// "A:B" in seconds; nullopt if malformed.
std::optional<std::pair<double, double>> parse_gap(const std::string& text) {
  const std::size_t colon = text.find(':');
  if (colon == std::string::npos) return std::nullopt;
  try {
    std::size_t used_a = 0, used_b = 0;
    const std::string a = text.substr(0, colon), b = text.substr(colon + 1);
    const double va = std::stod(a, &used_a), vb = std::stod(b, &used_b);
    if (used_a != a.size() || used_b != b.size()) return std::nullopt;
    return std::make_pair(va, vb);
  } catch (const std::exception&) {
    return std::nullopt;
  }
}

void log_report(const Context& ctx, const BinningReport& r) {
  std::ostringstream s;
  s << "bins: " << r.bins_kept << " kept of " << r.bins_in_window << " in [" << r.start << " s, "
    << r.stop << " s), " << r.bins_dropped_gaps << " dropped for gaps; spikes: " << r.spikes_total
    << " (" << r.spikes_outside_window << " outside the window, " << r.spikes_in_dropped_bins
    << " in dropped bins); active bins with 2+ spikes: " << r.multi_spike_bins << " of "
    << r.active_bins;
  log_info(ctx, "binned", s.str());
  for (const UnitBinning* u : r.dropped_units()) {
    std::ostringstream d;
    d << "unit " << u->id << " dropped: " << u->rate_hz << " Hz is below the minimum rate";
    log_info(ctx, "unit_dropped", d.str());
  }
}

int run_bin(const Context& ctx, const BinArgs& a) {
  check_output_path(ctx.common.out, ctx.common.force);
  BinningOptions o;
  o.bin_width = a.bin_width;
  if (!std::isnan(a.start)) o.start = a.start;
  if (!std::isnan(a.stop)) o.stop = a.stop;
  for (const std::string& g : a.gaps) o.gaps.push_back(*parse_gap(g));  // checked by CLI11
  o.min_rate_hz = a.min_rate;
  const BinnedSpikes b = bin_spikes(read_spike_table(a.spikes), o);
  write_matrix(ctx.common.out, b.matrix);
  log_report(ctx, b.report);
  nlohmann::json report = b.report.to_json();
  report.erase("units");  // per-unit detail is long; the summary keeps the totals
  print_summary(nlohmann::json{{"command", "bin"},
                               {"input", a.spikes},
                               {"output", ctx.common.out},
                               {"samples", b.matrix.rows()},
                               {"units", b.matrix.cols()},
                               {"report", report}}
                    .dump());
  return kOk;
}

}  // namespace

void add_bin_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<BinArgs>();
  CLI::App* sub = app.add_subcommand("bin", "Bin spike times into a binary matrix (time bins x units)");
  sub->add_option("SPIKES", args->spikes,
                  "Spike table (.csv/.tsv/.txt) with columns unit, time (seconds); header optional")
      ->required();
  sub->add_option("--bin-width", args->bin_width, "Bin width in seconds, e.g. 0.02")->required();
  sub->add_option("--start", args->start, "Start of the window in seconds (default: first spike)");
  sub->add_option("--stop", args->stop, "End of the window in seconds (default: last spike)");
  sub->add_option("--gap", args->gaps, "Interval A:B (seconds) to leave out; repeatable")
      ->check(CLI::Validator(
          [](std::string& v) { return parse_gap(v) ? std::string() : "expected A:B in seconds, got " + v; },
          "A:B"));
  sub->add_option("--min-rate", args->min_rate, "Drop units firing below this rate (Hz)");
  add_common_options(*sub, ctx.common);
  sub->get_option("--out")->required();
  sub->footer(
      "Bins are [start + k w, start + (k+1) w); only whole bins inside [start, stop) and outside\n"
      "every gap are kept (gap bins are dropped, not zero-filled). A unit is 1 in a bin holding at\n"
      "least one of its spikes. The report goes to stderr and into the JSON summary line.\n\n"
      "Example:\n  spinfer bin spikes.csv --bin-width 0.02 --gap 120:135.5 --min-rate 0.5 --out binned.npz\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_bin(ctx, *args); }; });
}

}  // namespace spinfer::cli
