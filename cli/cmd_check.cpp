// `spinfer check`: does a model reproduce a recording within sampling noise? (check.hpp)
#include <cstdio>
#include <memory>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "spinfer/atomic_file.hpp"
#include "spinfer/check.hpp"
#include "spinfer/io.hpp"
#include "spinfer/model_io.hpp"

namespace spinfer::cli {
namespace {

struct CheckArgs {
  std::string model, data, convention, member;
  std::int64_t triplets = 200, replicates = 100, block_length = 0, model_samples = 0;
  std::int64_t exact_limit = 20;
};

std::string fmt(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.3g", v);
  return buf;
}

int run_check(const Context& ctx, const CheckArgs& a) {
  check_output_path(ctx.common.out, ctx.common.force);
  const IsingModel model = load_model(a.model);
  ReadOptions ro;
  if (!a.convention.empty()) ro.convention = parse_convention(a.convention);
  ro.member = a.member;
  const SpinMatrix data = read_matrix(a.data, ro);
  CheckOptions o;
  o.triplets = a.triplets;
  o.bootstrap_replicates = a.replicates;
  o.block_length = a.block_length;
  o.model_samples = a.model_samples;
  o.exact_limit = a.exact_limit;
  o.seed = ctx.common.seed;
  o.threads = ctx.common.threads;
  o.progress = progress_logger(ctx, "check");
  const CheckResult r = check_model(model, data, o);
  nlohmann::json j = check_to_json(r, data.names().empty() ? model.names : data.names());
  j["provenance"] = provenance_json(ctx, {a.model, a.data});
  if (!ctx.common.out.empty())
    write_file_atomically(ctx.common.out, [&](std::ostream& out) { out << j.dump(1) << "\n"; });
  log_info(ctx, "check", "model statistics: " + r.model_statistics + "; bootstrap blocks of " +
                             std::to_string(r.block_length) + " samples x " +
                             std::to_string(r.bootstrap_replicates) + " replicates");
  log_info(ctx, "check", "statistic       normalised error (pairwise / independent)   within 2 sigma");
  for (const Comparison* c : {&r.means, &r.correlations, &r.triplets, &r.active_counts}) {
    std::string line = c->name;
    line.resize(16, ' ');
    line += fmt(c->normalised_error) + " / " + fmt(c->normalised_error_independent);
    line.resize(60, ' ');
    line += fmt(c->within_2sigma) + " / " + fmt(c->within_2sigma_independent);
    log_info(ctx, "check", line);
  }
  log_info(ctx, "check", "(a normalised error near 1 means the model matches the data within sampling noise)");
  nlohmann::json summary = {{"command", "check"},
                            {"model", a.model},
                            {"data", a.data},
                            {"output", ctx.common.out},
                            {"summary", j["summary"]},
                            {"log_likelihood_per_sample", j["log_likelihood_per_sample"]}};
  print_summary(summary.dump());
  return kOk;
}

}  // namespace

void add_check_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<CheckArgs>();
  CLI::App* sub = app.add_subcommand("check", "Compare a model with data within sampling noise");
  sub->add_option("MODEL", args->model, "Model file (.json)")->required();
  sub->add_option("DATA", args->data, "Data matrix (.npy, .npz, .csv, .tsv, .txt)")->required();
  sub->add_option("--convention", args->convention, "How the data's values are read; default: detect")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--member", args->member, "Array to read from an .npz archive");
  sub->add_option("--triplets", args->triplets, "Random triples of units to compare")
      ->check(CLI::NonNegativeNumber);
  sub->add_option("--replicates", args->replicates, "Block-bootstrap replicates for the data noise")
      ->check(CLI::Range(2, 100000));
  sub->add_option("--block-length", args->block_length,
                  "Bootstrap block length in samples (0: from the data's autocorrelation)")
      ->check(CLI::NonNegativeNumber);
  sub->add_option("--model-samples", args->model_samples,
                  "Monte Carlo samples for models too large to enumerate (0: max(20000, 2 T))")
      ->check(CLI::NonNegativeNumber);
  sub->add_option("--exact-limit", args->exact_limit, "Enumerate all states up to this many units")
      ->check(CLI::Range(0, 20));
  add_common_options(*sub, ctx.common);
  sub->footer(
      "Writes CHECK.json (format spinfer-check; see README) with, for means, connected\n"
      "correlations, random triplets and P(K): data, data noise, model, independent model,\n"
      "z-scores, normalised errors and the fraction within 2 sigma.\n\n"
      "Example:\n  spinfer check model.json recording.npz --out check.json --seed 1\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_check(ctx, *args); }; });
}

}  // namespace spinfer::cli
