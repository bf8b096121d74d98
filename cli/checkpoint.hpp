// Checkpoint files of long subcommands (refine, significance; any command whose library call
// takes CheckpointHooks): --checkpoint PATH (default: the --out path + ".checkpoint"),
// --checkpoint-every SECONDS and --resume.
//
// The file is JSON, written atomically:
//   {"format": "spinfer-checkpoint", "format_version": 1, "command": "refine",
//    "fingerprint": {"version": ..., "inputs": {"data": "<fnv1a64>", ...}, "settings": {...}},
//    "state": <the command's state, usually the library's (checkpoint.hpp)>}
// The fingerprint holds the checksum of every input file and every setting that changes the
// result (never --threads: results do not depend on it). --resume refuses a checkpoint whose
// command or fingerprint differs, naming each difference (exit 65); a missing checkpoint with
// --resume is a file error (66); an existing checkpoint is not overwritten by a fresh run
// unless --force. The file is removed once the final output has been written.
#pragma once

#include <functional>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <CLI/CLI.hpp>
#include <nlohmann/json.hpp>

#include "common.hpp"
#include "spinfer/checkpoint.hpp"

namespace spinfer::cli {

struct CheckpointArgs {
  std::string path;            ///< --checkpoint; empty: the --out path + ".checkpoint"
  double every_seconds = 600;  ///< --checkpoint-every
  bool resume = false;         ///< --resume
};

/// Adds --checkpoint, --checkpoint-every and --resume to a subcommand.
void add_checkpoint_options(CLI::App& sub, CheckpointArgs& args);

/// {"version": spinfer version, "inputs": {name: FNV-1a checksum of the file}, "settings": settings}.
/// Inputs are (name, path) pairs; the name (e.g. "data"), not the path, identifies them, so a
/// moved file still matches.
nlohmann::json make_fingerprint(const std::vector<std::pair<std::string, std::string>>& inputs,
                                nlohmann::json settings);

/// One run's checkpoint file.
class CheckpointFile {
 public:
  CheckpointFile(const Context& ctx, const CheckpointArgs& args, std::string command,
                 nlohmann::json fingerprint);

  const std::string& path() const { return path_; }

  /// Call before the computation. With --resume: the saved state, once format, command and
  /// fingerprint have been checked (FileError if the file is missing or unreadable, InputError
  /// if it is not a checkpoint of this command or its fingerprint differs). Without: nullopt,
  /// after refusing (FileError) to replace an existing checkpoint unless --force.
  std::optional<nlohmann::json> start();

  /// Writes `state` atomically (rank 0 only in an MPI job; start() and remove() likewise act on
  /// rank 0, which hands the resumed state to the other ranks).
  void save(const nlohmann::json& state);

  /// Hooks for the library: save() every --checkpoint-every seconds and on interruption;
  /// `wrap` (optional) turns the library's state into the command's.
  spinfer::CheckpointHooks hooks(std::optional<nlohmann::json> resume,
                                 std::function<nlohmann::json(const nlohmann::json&)> wrap = {});

  /// Removes the file (after the final output has been written).
  void remove();

 private:
  std::optional<nlohmann::json> start_here();  // start() of this process alone

  const Context& ctx_;
  CheckpointArgs args_;
  std::string command_, path_;
  nlohmann::json fingerprint_;
};

/// The checkpoint this process wrote last (empty: none), for the message after an interruption.
const std::string& last_checkpoint_written();

/// After an Interrupted: logs "interrupted by SIGTERM; checkpoint written to PATH ..." and
/// returns 128 + the signal number (1 when no signal was received: `what` is then logged).
int exit_after_interruption(const std::string& what);

}  // namespace spinfer::cli
