// Subcommands of the `spinfer` command. Each lives in its own cmd_<verb>.cpp, registers its
// options on a CLI11 subcommand and runs library calls only (no numerics here).
#pragma once

#include <CLI/CLI.hpp>

#include "common.hpp"

namespace spinfer::cli {

// (subcommands are added here as they land)
void add_stats_command(CLI::App& app, Context& ctx);
void add_bin_command(CLI::App& app, Context& ctx);
void add_convert_command(CLI::App& app, Context& ctx);
void add_fit_command(CLI::App& app, Context& ctx);
void add_sample_command(CLI::App& app, Context& ctx);
void add_check_command(CLI::App& app, Context& ctx);
void add_scan_command(CLI::App& app, Context& ctx);
void add_report_command(CLI::App& app, Context& ctx);
void add_refine_command(CLI::App& app, Context& ctx);
void add_significance_command(CLI::App& app, Context& ctx);
void add_merge_command(CLI::App& app, Context& ctx);

}  // namespace spinfer::cli
