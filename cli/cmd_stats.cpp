// `spinfer stats`: a readable summary of a data matrix, and its moments as JSON.
#include <algorithm>
#include <cmath>
#include <iomanip>
#include <iostream>
#include <memory>
#include <sstream>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/io.hpp"
#include "spinfer/stats.hpp"
#include "spinfer/threads.hpp"

namespace spinfer::cli {
namespace {

struct StatsArgs {
  std::string data, convention, member;
  bool drop_constant = false;
};

std::vector<std::string> names_of(const SpinMatrix& m, const std::vector<std::int64_t>& cols) {
  std::vector<std::string> out;
  for (std::int64_t c : cols) out.push_back(m.name(c));
  return out;
}

// Mean Pearson correlation over pairs of non-constant units (NaN if there is no such pair).
double mean_pair_correlation(const Moments& mo) {
  double sum = 0;
  std::int64_t pairs = 0;
  for (std::int64_t i = 0; i < mo.mean.size(); ++i)
    for (std::int64_t j = i + 1; j < mo.mean.size(); ++j) {
      const double vv = mo.connected(i, i) * mo.connected(j, j);
      if (vv > 0) {
        sum += mo.connected(i, j) / std::sqrt(vv);
        ++pairs;
      }
    }
  return pairs ? sum / double(pairs) : std::nan("");
}

void print_readable(const SpinMatrix& m, const Eigen::VectorXd& activity, double mean_corr,
                    const Eigen::VectorXd& pk, const std::string& constant, bool dropped) {
  std::ostringstream s;
  s << std::setprecision(4);
  s << "samples: " << m.rows() << "   units: " << m.cols()
    << "   convention: " << to_string(m.convention()) << "\n";
  s << "activity per unit (fraction of samples active):\n";
  const std::int64_t shown = std::min<std::int64_t>(m.cols(), 30);
  for (std::int64_t i = 0; i < shown; ++i) s << "  " << m.name(i) << ": " << activity(i) << "\n";
  if (shown < m.cols()) s << "  ... (" << m.cols() - shown << " more; see --out)\n";
  s << "mean pairwise correlation (Pearson): " << mean_corr << "\n";
  s << "P(K active units):";
  for (std::int64_t k = 0; k < std::min<std::int64_t>(pk.size(), 8); ++k)
    s << "  K=" << k << ": " << pk(k);
  s << (pk.size() > 8 ? "  ...\n" : "\n");
  if (!constant.empty()) s << (dropped ? "dropped constant " : "constant ") << constant << "\n";
  std::cerr << s.str();
}

nlohmann::json stats_json(const std::string& source, const SpinMatrix& m, const Moments& mo,
                          const Eigen::VectorXd& activity, const Eigen::VectorXd& pk,
                          double mean_corr, const nlohmann::json& constant) {
  nlohmann::json connected = nlohmann::json::array();
  for (std::int64_t i = 0; i < mo.connected.rows(); ++i)
    connected.push_back(std::vector<double>(mo.connected.row(i).begin(), mo.connected.row(i).end()));
  std::vector<std::string> names;
  for (std::int64_t i = 0; i < m.cols(); ++i) names.push_back(m.name(i));
  return {{"source", source},
          {"convention", to_string(mo.convention)},
          {"samples", m.rows()},
          {"units", m.cols()},
          {"names", names},
          {"activity", std::vector<double>(activity.begin(), activity.end())},
          {"mean", std::vector<double>(mo.mean.begin(), mo.mean.end())},
          {"connected_correlations", connected},
          {"mean_pair_correlation", mean_corr},
          {"active_count_distribution", std::vector<double>(pk.begin(), pk.end())},
          {"constant_units", constant}};
}

int run_stats(const Context& ctx, const StatsArgs& a) {
  check_output_path(ctx.common.out, ctx.common.force);
  ReadOptions ro;
  if (!a.convention.empty()) ro.convention = parse_convention(a.convention);
  ro.member = a.member;
  SpinMatrix m = read_matrix(a.data, ro);
  if (m.names().empty()) {  // name columns by position now, so they keep it after dropping
    std::vector<std::string> names;
    for (std::int64_t i = 0; i < m.cols(); ++i) names.push_back(m.name(i));
    m.set_names(std::move(names));
  }
  const ConstantUnits constant = find_constant_units(m);
  const nlohmann::json constant_json = {{"never_active", names_of(m, constant.never_active)},
                                        {"always_active", names_of(m, constant.always_active)},
                                        {"dropped", a.drop_constant}};
  std::vector<std::string> constant_names = names_of(m, constant.never_active);
  for (const std::string& n : names_of(m, constant.always_active)) constant_names.push_back(n);
  SpinMatrix shown = a.drop_constant ? drop_constant_units(m) : m;
  if (shown.cols() == 0) throw InputError(a.data + ": every unit is constant");

  StatsOptions so;
  so.threads = resolve_threads(ctx.common.threads);
  const Moments mo = compute_moments(shown, shown.convention(), so);
  const Eigen::VectorXd activity = compute_means(shown, Convention::binary, so.threads);
  const Eigen::VectorXd pk = active_count_distribution(shown, so.threads);
  const double mean_corr = mean_pair_correlation(mo);
  print_readable(shown, activity, mean_corr, pk, constant.empty() ? "" : constant.describe(m),
                 a.drop_constant);
  if (!ctx.common.out.empty()) {
    const nlohmann::json j = stats_json(a.data, shown, mo, activity, pk, mean_corr, constant_json);
    write_file_atomically(ctx.common.out, [&](std::ostream& o) { o << j.dump(2) << '\n'; });
    log_info(ctx, "written", "statistics written to " + ctx.common.out);
  }
  nlohmann::json summary = {{"command", "stats"},
                            {"input", a.data},
                            {"samples", shown.rows()},
                            {"units", shown.cols()},
                            {"convention", to_string(shown.convention())},
                            {"mean_activity", activity.mean()},
                            {"mean_pair_correlation", mean_corr},
                            {"constant_units", constant_names},
                            {"dropped_constant", a.drop_constant},
                            {"output", ctx.common.out.empty() ? nlohmann::json() : nlohmann::json(ctx.common.out)}};
  print_summary(summary.dump());
  return kOk;
}

}  // namespace

void add_stats_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<StatsArgs>();
  CLI::App* sub = app.add_subcommand("stats", "Summarise a data matrix: activity, correlations, P(K)");
  sub->add_option("DATA", args->data, "Data matrix (.npy, .npz, .csv, .tsv, .txt)")->required();
  sub->add_option("--convention", args->convention,
                  "How the file's values are read: binary (0/1) or spin (-1/+1); default: detect")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--member", args->member, "Array to read from an .npz archive");
  sub->add_flag("--drop-constant", args->drop_constant,
                "Leave out units that are never or always active (they are listed either way)");
  add_common_options(*sub, ctx.common);
  sub->footer(
      "Prints a readable summary on stderr and a one-line JSON summary on stdout; --out writes\n"
      "means, connected correlations and P(K) (in the data's convention) as JSON.\n\n"
      "Example:\n  spinfer stats recording.npy --drop-constant --out recording-stats.json\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_stats(ctx, *args); }; });
}

}  // namespace spinfer::cli
