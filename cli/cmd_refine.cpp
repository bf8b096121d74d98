// `spinfer refine`: Boltzmann-learning refinement of a model until its means and correlations
// match the data within sampling noise (refine.hpp).
#include <memory>
#include <optional>

#include <nlohmann/json.hpp>

#include "checkpoint.hpp"
#include "commands.hpp"
#include "spinfer/io.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/refine.hpp"

namespace spinfer::cli {
namespace {

struct RefineArgs {
  std::string model, data, convention, member, expectations = "auto", noise = "bootstrap";
  double threshold = 1.0, l2 = 0, max_seconds = 0;
  std::int64_t max_iterations = 1000;
  CheckpointArgs checkpoint;
};

int run_refine(const Context& ctx, const RefineArgs& a) {
  if (ctx.common.out.empty()) throw InputError("--out is required");
  check_output_path(ctx.common.out, ctx.common.force);
  // Everything the result depends on; not --threads (no effect on results) nor --max-seconds (a
  // wall-clock budget, counted over all runs together).
  CheckpointFile checkpoint(ctx, a.checkpoint, "refine",
                            make_fingerprint({{"model", a.model}, {"data", a.data}},
                                             {{"expectations", a.expectations}, {"noise", a.noise},
                                              {"threshold", a.threshold}, {"l2", a.l2},
                                              {"max_iterations", a.max_iterations}, {"seed", ctx.common.seed},
                                              {"convention", a.convention}, {"member", a.member}}));
  std::optional<nlohmann::json> resume = checkpoint.start();
  const IsingModel start = load_model(a.model);
  check_model_output(ctx, start.size());  // the couplings file too, before the refinement
  ReadOptions ro;
  if (!a.convention.empty()) ro.convention = parse_convention(a.convention);
  ro.member = a.member;
  const SpinMatrix data = read_matrix(a.data, ro);
  RefineOptions o;
  o.expectations = a.expectations;
  o.noise = a.noise;
  o.threshold = a.threshold;
  o.l2 = a.l2;
  o.max_seconds = a.max_seconds;
  o.max_iterations = a.max_iterations;
  o.seed = ctx.common.seed;
  o.threads = ctx.common.threads;
  o.progress = progress_logger(ctx, "refine");
  o.checkpoint = checkpoint.hooks(std::move(resume));
  RefineResult r = refine_moments(data, start, o);
  r.model.provenance.extra["command"] = provenance_json(ctx, {a.model, a.data});
  write_model_output(ctx, r.model);
  checkpoint.remove();
  log_info(ctx, "refine", std::string(r.converged ? "converged" : "stopped (" + r.stop_reason + ")") +
                              " after " + std::to_string(r.iterations) + " iterations: normalised errors " +
                              std::to_string(r.epsilon_mean) + " (means), " +
                              std::to_string(r.epsilon_correlation) + " (correlations)");
  for (const auto& w : r.warnings) log_info(ctx, "warning", "warning: " + w);
  print_summary(nlohmann::json{{"command", "refine"}, {"model", a.model}, {"data", a.data},
                               {"output", ctx.common.out}, {"expectations", r.expectations},
                               {"iterations", r.iterations}, {"converged", r.converged},
                               {"stop_reason", r.stop_reason}, {"epsilon_mean", r.epsilon_mean},
                               {"epsilon_correlation", r.epsilon_correlation}}.dump());
  return kOk;
}

}  // namespace

void add_refine_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<RefineArgs>();
  CLI::App* sub = app.add_subcommand("refine", "Refine a model by Boltzmann learning (moment matching)");
  sub->add_option("MODEL", args->model, "Starting model (.json), e.g. from spinfer fit")->required();
  sub->add_option("DATA", args->data, "Data matrix (.npy, .npz, .csv, .tsv, .txt)")->required();
  sub->add_option("--convention", args->convention, "How the data's values are read; default: detect")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--member", args->member, "Array to read from an .npz archive");
  sub->add_option("--expectations", args->expectations, "auto (exact up to 16 units), exact, sampled")
      ->check(CLI::IsMember({"auto", "exact", "sampled"}));
  sub->add_option("--noise", args->noise, "Data noise for the stopping rule: bootstrap or iid")
      ->check(CLI::IsMember({"bootstrap", "iid"}));
  sub->add_option("--threshold", args->threshold, "Stop when both normalised errors are below this")
      ->check(CLI::PositiveNumber);
  sub->add_option("--l2", args->l2, "L2 penalty on the couplings")->check(CLI::NonNegativeNumber);
  sub->add_option("--max-iterations", args->max_iterations, "Iteration budget")->check(CLI::PositiveNumber);
  sub->add_option("--max-seconds", args->max_seconds, "Wall-clock budget (0: none)")->check(CLI::NonNegativeNumber);
  add_checkpoint_options(*sub, args->checkpoint);
  add_common_options(*sub, ctx.common);
  add_model_output_options(*sub, ctx.common);
  sub->footer(
      "Adjusts fields and couplings with Monte Carlo (or exact) gradients of the likelihood until the\n"
      "model's means and correlations match the data within sampling noise, or a budget runs out.\n"
      "SIGTERM, SIGINT or SIGUSR1 stop it at the next iteration with a checkpoint (exit 128 + signal);\n"
      "--resume continues to the result an uninterrupted run gives.\n\n"
      "Example:\n  spinfer refine model.json recording.npz --out refined.json --seed 4\n"
      "  spinfer refine model.json recording.npz --out refined.json --seed 4 --resume\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_refine(ctx, *args); }; });
}

}  // namespace spinfer::cli
