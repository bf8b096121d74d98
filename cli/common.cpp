#include "common.hpp"

#include <chrono>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <map>
#include <memory>
#include <unistd.h>
#include <cstdio>
#include <iostream>

#include <nlohmann/json.hpp>

#include "signals.hpp"
#include "spinfer/checksum.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/fit.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/version.hpp"

namespace spinfer::cli {

void add_common_options(CLI::App& sub, Common& c, bool with_out) {
  sub.add_option("--threads", c.threads,
                 "Worker threads; 0 = automatic (SLURM_CPUS_PER_TASK, OMP_NUM_THREADS, CPU mask)")
      ->check(CLI::NonNegativeNumber);
  sub.add_option("--seed", c.seed, "Random seed (results are identical for any thread count)");
  if (with_out) sub.add_option("--out,-o", c.out, "Output file (written atomically)");
  sub.add_flag("--force", c.force, "Overwrite an existing output file");
  sub.add_flag("--quiet,-q", c.quiet, "Only errors on stderr");
  sub.add_option("--log-format", c.log_format, "Log lines on stderr: plain or json")
      ->check(CLI::IsMember({"plain", "json"}));
}

void log_info(const Context& ctx, const std::string& event, const std::string& message) {
  if (ctx.common.quiet || !ctx.root()) return;
  if (ctx.common.log_format == "json") {
    const auto now = std::chrono::system_clock::to_time_t(std::chrono::system_clock::now());
    char ts[32];
    std::strftime(ts, sizeof ts, "%Y-%m-%dT%H:%M:%SZ", std::gmtime(&now));
    nlohmann::json j = {{"ts", ts}, {"level", "info"}, {"event", event}, {"message", message}};
    std::cerr << j.dump() << std::endl;
  } else {
    std::cerr << "spinfer: " << message << std::endl;
  }
}

void print_summary(const std::string& json_line) { std::cout << json_line << std::endl; }

spinfer::ProgressCallback progress_logger(const Context& ctx, const std::string& stage) {
  catch_stop_signals();
  auto last = std::make_shared<double>(0.0);
  const Context* c = &ctx;
  return [c, stage, last](const spinfer::Progress& p) {
    if (stop_signal() != 0) return false;  // stop at the next consistent point (signals.hpp)
    // A terminal gets a line every 2 s; a log file (cluster job) every 30 s.
    const double every = ::isatty(2) ? 2.0 : 30.0;
    if (p.elapsed_s - *last < every) return true;
    *last = p.elapsed_s;
    std::string msg = stage + ": " + std::to_string(p.done);
    if (p.total > 0) msg += "/" + std::to_string(p.total);
    msg += " (" + std::to_string(int(p.elapsed_s)) + " s)";
    log_info(*c, "progress", msg);
    return true;
  };
}

const std::string& input_fnv1a64(const std::string& path) {
  static std::map<std::string, std::string> known;  // the CLI asks from one thread
  auto it = known.find(path);
  if (it == known.end()) it = known.emplace(path, file_fnv1a64(path)).first;
  return it->second;
}

nlohmann::json provenance_json(const Context& ctx, const std::vector<std::string>& inputs) {
  nlohmann::json files = nlohmann::json::array();
  for (const auto& f : inputs) files.push_back({{"path", f}, {"fnv1a64", input_fnv1a64(f)}});
  return {{"command_line", ctx.argv}, {"version", spinfer::version()}, {"seed", ctx.common.seed},
          {"threads", ctx.common.threads}, {"ranks", ctx.ranks()}, {"inputs", files}};
}

std::optional<double> parse_penalty(const std::string& text, const std::string& option) {
  if (text.empty()) return std::nullopt;
  if (text == "auto") return kAutomaticPenalty;
  try {
    std::size_t used = 0;
    const double v = std::stod(text, &used);
    if (used == text.size() && v >= 0) return v;
  } catch (const std::exception&) {
  }
  throw InputError(option + " '" + text + "': expected a number >= 0 or 'auto'");
}

void check_output_path(const std::string& path, bool force) {
  if (path.empty()) return;
  if (!force && std::filesystem::exists(path))
    throw FileError(path + ": file exists (use --force to overwrite)");
}

void add_model_output_options(CLI::App& sub, Common& c) {
  sub.add_option("--couplings-file", c.couplings_file,
                 "Where the model's couplings go: auto (inline up to " +
                     std::to_string(kInlineCouplingsMaxUnits) +
                     " units, else a sibling OUT.couplings.npy), inline, npy")
      ->check(CLI::IsMember({"auto", "inline", "npy"}));
}

void check_model_output(const Context& ctx, Eigen::Index units) {
  check_output_path(ctx.common.out, ctx.common.force);
  if (couplings_in_sibling(units, parse_couplings_storage(ctx.common.couplings_file, "--couplings-file")))
    check_output_path(couplings_sibling_path(ctx.common.out), ctx.common.force);
}

void write_model_output(const Context& ctx, const IsingModel& model) {
  check_model_output(ctx, model.size());
  const CouplingsStorage storage = parse_couplings_storage(ctx.common.couplings_file, "--couplings-file");
  save_model(ctx.common.out, model, storage);
  if (couplings_in_sibling(model.size(), storage))
    log_info(ctx, "written", "couplings -> " + couplings_sibling_path(ctx.common.out));
}

}  // namespace spinfer::cli
