#include "checkpoint.hpp"

#include <filesystem>
#include <fstream>
#include <iostream>
#include <sstream>
#include <cstdint>
#include <vector>

#include "signals.hpp"
#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/version.hpp"

namespace spinfer::cli {
namespace {

std::string& last_written() {
  static std::string path;
  return path;
}

/// "settings/seed: 1 in the checkpoint, 2 now; inputs/data: ..." over the flattened values.
std::string differences(const nlohmann::json& saved, const nlohmann::json& now) {
  const nlohmann::json a = saved.flatten(), b = now.flatten();
  std::ostringstream out;
  int count = 0;
  auto add = [&](const std::string& key, const std::string& was, const std::string& is) {
    out << (count++ ? "; " : "") << key.substr(1) << ": " << was << " in the checkpoint, " << is << " now";
  };
  for (auto it = a.begin(); it != a.end(); ++it) {
    if (!b.contains(it.key())) add(it.key(), it.value().dump(), "not set");
    else if (b[it.key()] != it.value()) add(it.key(), it.value().dump(), b[it.key()].dump());
  }
  for (auto it = b.begin(); it != b.end(); ++it)
    if (!a.contains(it.key())) add(it.key(), "not set", it.value().dump());
  return out.str();
}

}  // namespace

void add_checkpoint_options(CLI::App& sub, CheckpointArgs& args) {
  sub.add_option("--checkpoint", args.path, "Checkpoint file (default: the --out path + .checkpoint)");
  sub.add_option("--checkpoint-every", args.every_seconds,
                 "Seconds between checkpoints (also written when stopped by SIGTERM/SIGINT/SIGUSR1)")
      ->check(CLI::NonNegativeNumber);
  sub.add_flag("--resume", args.resume, "Continue from the checkpoint (same inputs and settings)");
}

nlohmann::json make_fingerprint(const std::vector<std::pair<std::string, std::string>>& inputs,
                                nlohmann::json settings) {
  nlohmann::json files = nlohmann::json::object();
  for (const auto& [name, path] : inputs) files[name] = input_fnv1a64(path);
  return {{"version", spinfer::version()}, {"inputs", files}, {"settings", std::move(settings)}};
}

CheckpointFile::CheckpointFile(const Context& ctx, const CheckpointArgs& args, std::string command,
                               nlohmann::json fingerprint)
    : ctx_(ctx), args_(args), command_(std::move(command)), fingerprint_(std::move(fingerprint)) {
  path_ = !args.path.empty() ? args.path : ctx.common.out + ".checkpoint";
  if (path_ == ctx.common.out) throw InputError("--checkpoint must differ from --out");
}

std::optional<nlohmann::json> CheckpointFile::start() {
  if (ctx_.ranks() == 1) return start_here();
  // MPI: rank 0 alone checks and reads the file (another rank could take rank 0's first save for
  // an existing checkpoint, or read a newer one) and hands the state to the others.
  std::vector<std::uint8_t> bytes;
  if (ctx_.root()) {
    const std::optional<nlohmann::json> state = start_here();
    const std::string text = state ? state->dump() : "";
    bytes.push_back(state ? 1 : 0);
    bytes.insert(bytes.end(), text.begin(), text.end());
  }
  ctx_.team->broadcast_bytes(bytes);
  if (bytes.empty() || bytes[0] == 0) return std::nullopt;
  return nlohmann::json::parse(bytes.begin() + 1, bytes.end());
}

std::optional<nlohmann::json> CheckpointFile::start_here() {
  const bool exists = std::filesystem::exists(path_);
  if (!args_.resume) {
    if (exists && !ctx_.common.force)
      throw FileError(path_ + ": a checkpoint exists; pass --resume to continue from it, or --force to start over");
    if (args_.every_seconds > 0)
      log_info(ctx_, "checkpoint", "checkpoints every " + std::to_string(int(args_.every_seconds)) + " s -> " + path_);
    return std::nullopt;
  }
  if (!exists) throw FileError(path_ + ": no checkpoint to resume from (run without --resume to start)");
  std::ifstream in(path_);
  if (!in) throw FileError(path_ + ": cannot open the checkpoint");
  nlohmann::json j;
  try {
    j = nlohmann::json::parse(in);
    if (!j.is_object() || j.value("format", "") != "spinfer-checkpoint" || !j.contains("fingerprint") ||
        !j.contains("state"))
      throw InputError(path_ + ": not a spinfer checkpoint");
    if (j.value("format_version", 0) != 1)
      throw InputError(path_ + ": checkpoint format_version " + j["format_version"].dump() + " is not supported");
    if (j.value("command", "") != command_)
      throw InputError(path_ + ": the checkpoint was written by `spinfer " + j.value("command", "?") +
                       "`, not `spinfer " + command_ + "`");
  } catch (const nlohmann::json::exception& e) {
    throw InputError(path_ + ": not a readable spinfer checkpoint (" + e.what() + ")");
  }
  if (j["fingerprint"] != fingerprint_)
    throw InputError(path_ + ": the checkpoint was written for other inputs or settings (" +
                     differences(j["fingerprint"], fingerprint_) +
                     "); run without --resume and with --force to start over");
  log_info(ctx_, "checkpoint", "resuming from " + path_);
  return std::move(j["state"]);
}

void CheckpointFile::save(const nlohmann::json& state) {
  if (!ctx_.root()) return;  // MPI: every rank holds the same state; rank 0 writes it
  const nlohmann::json file = {{"format", "spinfer-checkpoint"}, {"format_version", 1},
                               {"command", command_},           {"fingerprint", fingerprint_},
                               {"state", state}};
  write_file_atomically(path_, [&](std::ostream& out) { out << file.dump() << "\n"; });
  last_written() = path_;
}

spinfer::CheckpointHooks CheckpointFile::hooks(std::optional<nlohmann::json> resume,
                                               std::function<nlohmann::json(const nlohmann::json&)> wrap) {
  spinfer::CheckpointHooks h;
  h.every_seconds = args_.every_seconds;
  h.resume = std::move(resume);
  h.save = [this, wrap](const nlohmann::json& state) { save(wrap ? wrap(state) : state); };
  return h;
}

void CheckpointFile::remove() {
  if (!ctx_.root()) return;
  std::error_code ec;
  std::filesystem::remove(path_, ec);
  if (ec) log_info(ctx_, "warning", "warning: cannot remove the checkpoint " + path_ + ": " + ec.message());
  if (last_written() == path_) last_written().clear();
}

const std::string& last_checkpoint_written() { return last_written(); }

int exit_after_interruption(const std::string& what) {
  const int signal = stop_signal();
  if (signal == 0) {
    std::cerr << "spinfer: interrupted: " << what << std::endl;
    return kFailure;
  }
  std::cerr << "spinfer: interrupted by " << signal_name(signal);
  if (!last_written().empty())
    std::cerr << "; checkpoint written to " << last_written() << " (continue with --resume)";
  std::cerr << std::endl;
  return kSignalBase + signal;
}

}  // namespace spinfer::cli
