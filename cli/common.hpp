// Shared pieces of the command line: exit codes, logging to stderr, common options.
#pragma once

#include <functional>
#include <optional>
#include <string>
#include <vector>

#include <CLI/CLI.hpp>
#include <nlohmann/json.hpp>

#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/team.hpp"

namespace spinfer::cli {

/// Documented exit codes (README, "Exit codes").
enum ExitCode : int {
  kOk = 0,
  kFailure = 1,       ///< unexpected internal failure
  kUsage = 2,         ///< bad command line
  kBadInput = 65,     ///< input data rejected (non-binary values, ragged rows, ...)
  kFileError = 66,    ///< a file cannot be opened, read or written, or exists without --force
  kNumerical = 70,    ///< no finite answer (singular matrix, divergence)
  kSignalBase = 128,  ///< + signal number: stopped by SIGTERM/SIGINT/SIGUSR1 (signals.hpp)
};

/// Options every subcommand shares.
struct Common {
  int threads = 0;          ///< 0 = automatic
  std::uint64_t seed = 0;
  std::string out;
  bool force = false;
  bool quiet = false;
  std::string log_format = "plain";  ///< plain | json
  std::string couplings_file = "auto";  ///< auto | inline | npy (commands that write a model)
};

struct Context {
  Common common;
  std::vector<std::string> argv;           ///< the full command line, for provenance
  std::function<int()> run;                ///< set by the chosen subcommand
  /// The ranks of an MPI job (main.cpp; a SoloTeam otherwise). Only rank 0 logs, writes outputs
  /// and prints the summary.
  const spinfer::Team* team = nullptr;
  bool root() const { return !team || team->root(); }
  int ranks() const { return team ? team->size() : 1; }
};

/// Adds --threads/--seed/--out/--force/--quiet/--log-format to a subcommand.
void add_common_options(CLI::App& sub, Common& c, bool with_out = true);

/// Log a message on stderr (plain "spinfer: ..." line or one JSON object per line); rank 0 only.
void log_info(const Context& ctx, const std::string& event, const std::string& message);

/// Print the final machine-readable summary line on stdout (a JSON object).
void print_summary(const std::string& json_line);

/// A progress callback that logs a plain line (or a JSON line) on stderr at most every few seconds,
/// and stops the computation once a stop signal is pending (installs the handlers; signals.hpp).
spinfer::ProgressCallback progress_logger(const Context& ctx, const std::string& stage);

/// FNV-1a 64 of an input file, read once per process: a fit asks for its data file's checksum
/// for the checkpoint fingerprint, the provenance and each shard manifest, and the file can be
/// gigabytes. (Inputs do not change during a run; if they did, the run's results would not
/// match any one checksum anyway.)
const std::string& input_fnv1a64(const std::string& path);

/// Provenance for outputs: command line, version, seed, threads, MPI ranks, and a checksum of
/// each input.
nlohmann::json provenance_json(const Context& ctx, const std::vector<std::string>& inputs);

/// A penalty option: empty -> unset (the method's default), "auto" -> chosen on held-out data,
/// else a number >= 0 (InputError otherwise, naming the option).
std::optional<double> parse_penalty(const std::string& text, const std::string& option);

/// Refuse to overwrite an existing output unless --force (throws spinfer::FileError).
void check_output_path(const std::string& path, bool force);

/// Adds --couplings-file to a subcommand that writes a model file (to --out).
void add_model_output_options(CLI::App& sub, Common& c);

/// Refuses (FileError) an existing --out, or an existing sibling couplings file when a model of
/// `units` units would have one, unless --force. Call it as soon as the size is known, so a long
/// fit does not end in a refusal.
void check_model_output(const Context& ctx, Eigen::Index units);

/// Writes the model to --out (and its sibling couplings file, as --couplings-file decides) after
/// check_model_output, and logs where the couplings went.
void write_model_output(const Context& ctx, const IsingModel& model);

}  // namespace spinfer::cli
