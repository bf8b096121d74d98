// `spinfer merge`: put the shard files of one sharded fit together into the model file.
#include <map>
#include <memory>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "shards.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/unit_fits.hpp"

namespace spinfer::cli {
namespace {

struct MergeArgs {
  std::vector<std::string> shards;
};

// The manifest keys that must agree (everything but the shard number and the command line).
nlohmann::json comparable(nlohmann::json m) {
  m.erase("shard");
  m.erase("command");
  if (m.contains("input")) m["input"].erase("path");  // same bytes under another path is fine
  return m;
}

// The first differing key of two manifests (JSON Patch path, RFC 6902, from nlohmann::json::diff)
// as a dotted name with both values; empty when they agree.
std::string describe_difference(const nlohmann::json& a, const nlohmann::json& b) {
  const nlohmann::json patch = nlohmann::json::diff(a, b);
  if (patch.empty()) return "";
  const nlohmann::json::json_pointer at(patch[0]["path"].get<std::string>());
  std::string dotted = at.to_string().substr(1);
  for (char& c : dotted)
    if (c == '/') c = '.';
  auto value = [&](const nlohmann::json& j) { return j.contains(at) ? j[at].dump() : "(absent)"; };
  return "manifest '" + dotted + "' differs: " + value(a) + " vs " + value(b);
}

int run_merge(const Context& ctx, const MergeArgs& a) {
  if (ctx.common.out.empty()) throw InputError("--out is required");
  check_output_path(ctx.common.out, ctx.common.force);
  std::vector<ShardFile> files;
  for (const std::string& path : a.shards) files.push_back(read_shard_file(path));
  const nlohmann::json reference = comparable(files.front().manifest);
  std::map<std::int64_t, std::string> seen;
  std::int64_t count = 0;
  try {
    count = files.front().manifest.at("shards").get<std::int64_t>();
  } catch (const nlohmann::json::exception&) {
    throw InputError(a.shards.front() + ": the manifest has no shard count");
  }
  for (std::size_t k = 0; k < files.size(); ++k) {
    const nlohmann::json& m = files[k].manifest;
    const std::string diff = describe_difference(reference, comparable(m));
    if (!diff.empty())
      throw InputError(a.shards[k] + ": does not belong to the same fit as " + a.shards.front() +
                       " (" + diff + ")");
    const std::int64_t index = m.value("shard", std::int64_t(0));
    if (index < 1 || index > count)
      throw InputError(a.shards[k] + ": shard number " + std::to_string(index) + " is not in 1.." +
                       std::to_string(count));
    if (seen.count(index))
      throw InputError(a.shards[k] + ": shard " + std::to_string(index) + " is also given as " +
                       seen[index]);
    seen[index] = a.shards[k];
  }
  std::string missing;
  std::int64_t n_missing = 0;
  for (std::int64_t i = 1; i <= count; ++i)
    if (!seen.count(i)) {
      if (n_missing++ < 20) missing += (missing.empty() ? "" : ", ") + std::to_string(i);
    }
  if (n_missing)
    throw InputError("missing " + std::to_string(n_missing) + " of " + std::to_string(count) +
                     " shards: " + missing + (n_missing > 20 ? ", ..." : ""));

  std::vector<UnitFits> parts;
  for (const ShardFile& f : files) parts.push_back(f.fits);
  const nlohmann::json& settings = files.front().manifest["settings"];
  const std::string out_convention = settings.value("model_convention", "").empty()
                                         ? settings.value("data_convention", "spin")
                                         : settings.value("model_convention", "spin");
  IsingModel model = assemble_unit_fits(parts, parse_convention(out_convention));
  Provenance& p = model.provenance;
  p.seed = ctx.common.seed;
  p.extra["command"] = provenance_json(ctx, a.shards);
  p.extra["merged_from"] = {{"shards", count},
                            {"input", files.front().manifest["input"]},
                            {"fit_command", files.front().manifest.value("command", nlohmann::json())}};
  write_model_output(ctx, model);
  log_info(ctx, "written", "model -> " + ctx.common.out + " (" + std::to_string(count) +
                               " shards, " + std::to_string(model.size()) + " units, " +
                               (p.converged ? "converged" : "NOT converged") + ")");
  print_summary(nlohmann::json{{"command", "merge"}, {"output", ctx.common.out},
                               {"shards", count}, {"units", model.size()},
                               {"method", p.method}, {"l1", p.l1}, {"l2", p.l2},
                               {"converged", p.converged}, {"objective", p.objective},
                               {"convention", to_string(model.convention)}}.dump());
  return kOk;
}

}  // namespace

void add_merge_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<MergeArgs>();
  CLI::App* sub = app.add_subcommand("merge", "Merge the shard files of a sharded fit into a model");
  sub->add_option("SHARDS", args->shards, "Shard files written by `spinfer fit --shard K/N`")
      ->required()
      ->check(CLI::ExistingFile);
  add_common_options(*sub, ctx.common);
  add_model_output_options(*sub, ctx.common);
  sub->footer(
      "Every shard must come from the same input file (checksum) and settings, and shards 1..N\n"
      "must all be present exactly once; otherwise nothing is written (exit 65). The model equals\n"
      "the unsharded fit.\n\n"
      "Example:\n  spinfer merge part-*.json --out model.json\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_merge(ctx, *args); }; });
}

}  // namespace spinfer::cli
