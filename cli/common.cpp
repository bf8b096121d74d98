#include "common.hpp"

#include <chrono>
#include <ctime>
#include <filesystem>
#include <iostream>

#include <nlohmann/json.hpp>

#include "spinfer/errors.hpp"

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
  if (ctx.common.quiet) return;
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

void check_output_path(const std::string& path, bool force) {
  if (path.empty()) return;
  if (!force && std::filesystem::exists(path))
    throw FileError(path + ": file exists (use --force to overwrite)");
}

}  // namespace spinfer::cli
