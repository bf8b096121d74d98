// `spinfer sample`: draw configurations from a model file with the Monte Carlo sampler.
#include <memory>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "spinfer/io.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/sampler.hpp"

namespace spinfer::cli {
namespace {

struct SampleArgs {
  std::string model;
  std::int64_t count = 10000;
  std::int64_t chains = 4;
  std::int64_t burn_in = -1, thin = -1;
  double temperature = 1.0;
  std::string method = "gibbs";
  std::vector<double> ladder;
};

int run_sample(const Context& ctx, const SampleArgs& a) {
  if (ctx.root()) check_output_path(ctx.common.out, ctx.common.force);
  const IsingModel model = load_model(a.model);
  SamplerOptions o;
  o.method = a.method;
  o.chains = a.chains;
  o.samples = a.count;
  o.burn_in = a.burn_in;
  o.thin = a.thin;
  o.temperature = a.temperature;
  if (!a.ladder.empty()) o.temperature_ladder = a.ladder;
  o.seed = ctx.common.seed;
  o.threads = ctx.common.threads;
  o.progress = progress_logger(ctx, "sampling");
  o.team = ctx.team;  // MPI ranks share the chains; rank 0 receives every sample
  SampleSet s = sample(model, o);
  if (!ctx.root()) return kOk;
  if (!model.names.empty()) s.samples.set_names(model.names);
  write_matrix(ctx.common.out, s.samples);
  const auto& d = s.diagnostics;
  log_info(ctx, "written", std::to_string(s.samples.rows()) + " samples of " +
                               std::to_string(model.size()) + " units -> " + ctx.common.out +
                               " (R-hat of the energy " + std::to_string(d.rhat_energy) + ")");
  for (const auto& w : d.warnings) log_info(ctx, "warning", "warning: " + w);
  nlohmann::json summary = {{"command", "sample"},
                            {"model", a.model},
                            {"output", ctx.common.out},
                            {"samples", s.samples.rows()},
                            {"units", model.size()},
                            {"convention", to_string(model.convention)},
                            {"burn_in", d.burn_in},
                            {"thin", d.thin},
                            {"rhat_energy", d.rhat_energy},
                            {"ess_energy", d.ess_energy},
                            {"field_resolution", d.field_resolution},
                            {"warnings", d.warnings},
                            {"provenance", provenance_json(ctx, {a.model})}};
  print_summary(summary.dump());
  return kOk;
}

}  // namespace

void add_sample_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<SampleArgs>();
  CLI::App* sub = app.add_subcommand("sample", "Draw samples from a model with Monte Carlo");
  sub->add_option("MODEL", args->model, "Model file (.json)")->required();
  sub->add_option("--count,-n", args->count, "Samples to keep (shared over the chains)")
      ->check(CLI::PositiveNumber);
  sub->add_option("--chains", args->chains, "Independent chains")->check(CLI::PositiveNumber);
  sub->add_option("--method", args->method, "gibbs or metropolis")
      ->check(CLI::IsMember({"gibbs", "metropolis"}));
  sub->add_option("--temperature", args->temperature, "Sample P(v)^(1/T)")->check(CLI::PositiveNumber);
  sub->add_option("--burn-in", args->burn_in, "Sweeps discarded first (default: automatic)");
  sub->add_option("--thin", args->thin, "Sweeps between kept samples (default: automatic)");
  sub->add_option("--ladder", args->ladder,
                  "Temperatures for parallel tempering (for strongly coupled models)")
      ->delimiter(',');
  add_common_options(*sub, ctx.common);
  sub->get_option("--out")->required();
  sub->footer(
      "Samples are written in the model's convention (.npy: uint8 0/1 or int8 -1/+1; .npz and\n"
      ".csv keep unit names). The same --seed gives the same samples for any --threads.\n\n"
      "Example:\n  spinfer sample model.json --count 50000 --seed 7 --out samples.npy\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_sample(ctx, *args); }; });
}

}  // namespace spinfer::cli
