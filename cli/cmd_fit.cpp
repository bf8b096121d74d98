// `spinfer fit`: fit a pairwise model with any estimator (fit.hpp) and write the model file.
#include <memory>
#include <optional>

#include <nlohmann/json.hpp>

#include "checkpoint.hpp"
#include "commands.hpp"
#include "shards.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/fit.hpp"
#include "spinfer/io.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/unit_fits.hpp"
#include "spinfer/version.hpp"

namespace spinfer::cli {
namespace {

struct FitArgs {
  std::string data, method = "pseudo-likelihood", convention, member, output_convention, l1, l2;
  std::string variant, shard;
  double shrinkage = 0;
  bool fallback = false, drop_constant = false, shard_from_slurm = false;
  int max_iterations = 1000;
  double tolerance = 1e-5;
  CheckpointArgs checkpoint;
};

// Everything a fit's result depends on (not --threads: results do not depend on it).
nlohmann::json fit_settings(const FitArgs& a) {
  return {{"method", a.method}, {"variant", a.variant}, {"l1", a.l1}, {"l2", a.l2},
          {"convention", a.convention}, {"member", a.member},
          {"model_convention", a.output_convention}, {"drop_constant", a.drop_constant},
          {"shrinkage", a.shrinkage}, {"mean_field_fallback", a.fallback},
          {"max_iterations", a.max_iterations}, {"tolerance", a.tolerance},
          {"shard", a.shard}, {"shard_from_slurm", a.shard_from_slurm}};
}

// Everything that must agree between the shards of one fit (checked by `spinfer merge`).
nlohmann::json shard_manifest(const Context& ctx, const FitArgs& a, const SpinMatrix& data,
                              ShardChoice shard) {
  return {{"input", {{"path", a.data}, {"fnv1a64", input_fnv1a64(a.data)}}},
          {"settings",
           {{"method", a.method}, {"variant", a.variant.empty() ? "per-variable" : a.variant},
            {"l1", a.l1}, {"l2", a.l2}, {"convention", a.convention}, {"member", a.member},
            {"model_convention", a.output_convention}, {"drop_constant", a.drop_constant},
            {"max_iterations", a.max_iterations}, {"tolerance", a.tolerance},
            {"data_convention", to_string(data.convention())}}},
          {"shard", shard.index},
          {"shards", shard.count},
          {"samples", data.rows()},
          {"units", data.cols()},
          {"version", version()},
          {"command", provenance_json(ctx, {a.data})}};
}

int run_fit_shard(const Context& ctx, const FitArgs& a, const SpinMatrix& data,
                  const FitOptions& o, ShardChoice shard) {
  const std::vector<std::int64_t> units = shard_units(data.cols(), shard.index - 1, shard.count);
  log_info(ctx, "fit", "shard " + std::to_string(shard.index) + "/" + std::to_string(shard.count) +
                           ": fitting units " + std::to_string(units.front() + 1) + ".." +
                           std::to_string(units.back() + 1) + " of " + std::to_string(data.cols()) +
                           " (" + std::to_string(data.rows()) + " samples) with " + a.method);
  ShardFile file;
  file.fits = fit_model_units(data, o, units);
  if (!ctx.root()) return kOk;  // MPI: every rank holds the same fits; rank 0 writes them
  file.manifest = shard_manifest(ctx, a, data, shard);
  write_shard_file(ctx.common.out, file);
  const Provenance& p = file.fits.provenance;
  log_info(ctx, "written", "shard -> " + ctx.common.out + " (merge all " +
                               std::to_string(shard.count) + " with `spinfer merge`)");
  if (!file.fits.unconverged.empty())
    log_info(ctx, "warning", "warning: " + std::to_string(file.fits.unconverged.size()) +
                                 " units did not converge; raise --max-iterations");
  print_summary(nlohmann::json{{"command", "fit"}, {"data", a.data}, {"output", ctx.common.out},
                               {"method", a.method}, {"shard", shard.index}, {"shards", shard.count},
                               {"units_fitted", units.size()}, {"samples", data.rows()},
                               {"units", data.cols()}, {"l1", p.l1}, {"l2", p.l2},
                               {"converged", file.fits.unconverged.empty()}}.dump());
  return kOk;
}

// Whether MPI ranks split the per-variable problems (local_fit.hpp, LocalFitRequest::team).
bool shares_units(const FitOptions& o, const SpinMatrix& data) {
  return (o.method == "pseudo-likelihood" || o.method == "screening") && !o.symmetric &&
         o.team && data.cols() >= o.team->size();
}

int run_fit(const Context& ctx, const FitArgs& a) {
  if (ctx.common.out.empty()) throw InputError("--out is required");
  if (ctx.root()) check_output_path(ctx.common.out, ctx.common.force);
  nlohmann::json settings = fit_settings(a);
  if (a.shard_from_slurm) settings["shard"] = [] {
    const ShardChoice c = shard_from_slurm();
    return std::to_string(c.index) + "/" + std::to_string(c.count);
  }();
  CheckpointFile checkpoint(ctx, a.checkpoint, "fit", make_fingerprint({{"data", a.data}}, settings));
  std::optional<nlohmann::json> resume = checkpoint.start();
  ReadOptions ro;
  if (!a.convention.empty()) ro.convention = parse_convention(a.convention);
  ro.member = a.member;
  SpinMatrix data = read_matrix(a.data, ro);
  if (a.drop_constant) {
    ConstantUnits dropped;
    data = drop_constant_units(data, &dropped);
    if (!dropped.empty()) log_info(ctx, "dropped", "dropped " + dropped.describe(data));
  }
  FitOptions o;
  o.method = a.method;
  o.symmetric = a.variant == "symmetric";
  o.logarithmic = a.variant == "logarithmic";
  if ((o.symmetric && a.method != "pseudo-likelihood" && a.method != "screening") ||
      (o.logarithmic && a.method != "screening"))
    throw InputError("--variant " + a.variant + " does not apply to method " + a.method);
  o.l1 = parse_penalty(a.l1, "--l1");
  o.l2 = parse_penalty(a.l2, "--l2");
  o.shrinkage = a.shrinkage;
  o.mean_field_fallback = a.fallback;
  o.max_iterations = a.max_iterations;
  o.tolerance = a.tolerance;
  o.threads = ctx.common.threads;
  if (!a.output_convention.empty()) o.convention = parse_convention(a.output_convention);
  o.progress = progress_logger(ctx, a.method);
  o.checkpoint = checkpoint.hooks(std::move(resume));
  // MPI: every rank reads the whole file; the ranks share out the samples (symmetric objective,
  // held-out penalty choice, shards) or the units (per-variable final fit).
  o.team = ctx.team;
  if (!a.shard.empty() && a.shard_from_slurm)
    throw InputError("--shard and --shard-from-slurm exclude each other");
  if (!a.shard.empty() || a.shard_from_slurm) {
    const int rc = run_fit_shard(ctx, a, data, o, a.shard_from_slurm ? shard_from_slurm() : parse_shard(a.shard));
    checkpoint.remove();
    return rc;
  }
  if (ctx.root()) check_model_output(ctx, data.cols());  // the couplings file too, before the fit
  log_info(ctx, "fit", "fitting " + std::to_string(data.rows()) + " samples x " +
                           std::to_string(data.cols()) + " units with " + a.method +
                           (ctx.ranks() > 1 ? " on " + std::to_string(ctx.ranks()) + " ranks" +
                                                  (shares_units(o, data) ? " (units shared out)"
                                                   : o.method == "pseudo-likelihood" || o.method == "screening"
                                                       ? " (samples shared out)" : " (each computes all)")
                                            : ""));
  IsingModel model = fit_model(data, o);
  model.provenance.seed = ctx.common.seed;
  if (!ctx.root()) return kOk;  // every rank holds the same model; rank 0 writes it
  model.provenance.extra["command"] = provenance_json(ctx, {a.data});
  write_model_output(ctx, model);
  checkpoint.remove();
  const Provenance& p = model.provenance;
  log_info(ctx, "written", "model -> " + ctx.common.out + " (" + to_string(model.convention) +
                               " convention; " + std::to_string(p.iterations) + " iterations, " +
                               (p.converged ? "converged" : "NOT converged") + ")");
  if (!p.converged) log_info(ctx, "warning", "warning: the fit did not converge; raise --max-iterations");
  print_summary(nlohmann::json{{"command", "fit"}, {"data", a.data}, {"output", ctx.common.out},
                               {"method", a.method}, {"samples", data.rows()}, {"units", data.cols()},
                               {"l1", p.l1}, {"l2", p.l2}, {"iterations", p.iterations},
                               {"converged", p.converged}, {"objective", p.objective},
                               {"convention", to_string(model.convention)}}.dump());
  return kOk;
}

}  // namespace

void add_fit_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<FitArgs>();
  CLI::App* sub = app.add_subcommand("fit", "Fit fields and couplings to a binary recording");
  sub->add_option("DATA", args->data, "Data matrix (.npy, .npz, .csv, .tsv, .txt)")->required();
  sub->add_option("--method,-m", args->method,
                  "pseudo-likelihood, screening, mean-field, tap, independent-pair, sessak-monasson, bethe")
      ->check(CLI::IsMember({"pseudo-likelihood", "screening", "mean-field", "tap", "independent-pair",
                             "sessak-monasson", "bethe"}));
  sub->add_option("--variant", args->variant,
                  "per-variable (default) or symmetric (pseudo-likelihood, screening); logarithmic (screening)")
      ->check(CLI::IsMember({"per-variable", "symmetric", "logarithmic"}));
  sub->add_option("--l2", args->l2, "L2 penalty per sample, or 'auto' (held-out choice; default for pseudo-likelihood)");
  sub->add_option("--l1", args->l1, "L1 penalty per sample, or 'auto' (held-out choice; default for screening)");
  sub->add_option("--shrinkage", args->shrinkage, "Closed forms: shrink C towards its diagonal (0..1)")
      ->check(CLI::Range(0.0, 1.0));
  sub->add_flag("--mean-field-fallback", args->fallback,
                "Closed forms: use the mean-field value where TAP/Bethe have no real root");
  sub->add_option("--convention", args->convention, "How the data's values are read; default: detect")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--model-convention", args->output_convention,
                  "Convention of the written model; default: the data's")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--member", args->member, "Array to read from an .npz archive");
  sub->add_flag("--drop-constant", args->drop_constant, "Drop units that are never or always active");
  sub->add_option("--shard", args->shard,
                  "Fit only shard K/N of the per-variable problems (e.g. 3/10); --out gets a shard "
                  "file for `spinfer merge`");
  sub->add_flag("--shard-from-slurm", args->shard_from_slurm,
                "Take K/N from SLURM_ARRAY_TASK_ID (- SLURM_ARRAY_TASK_MIN + 1) and SLURM_ARRAY_TASK_COUNT");
  sub->add_option("--max-iterations", args->max_iterations, "Iteration budget")->check(CLI::PositiveNumber);
  sub->add_option("--tolerance", args->tolerance, "Largest per-sample gradient entry at convergence")
      ->check(CLI::PositiveNumber);
  add_common_options(*sub, ctx.common);
  add_checkpoint_options(*sub, args->checkpoint);
  add_model_output_options(*sub, ctx.common);
  sub->footer(
      "Penalties are per sample (the objectives are averages over samples). Without --l2/--l1,\n"
      "pseudo-likelihood chooses l2 and screening chooses l1 on held-out data (the last 20% of\n"
      "the rows, a contiguous block). The model file is JSON (format spinfer-model; see README).\n\n"
      "Shards: per-variable pseudo-likelihood and screening are N independent problems; --shard K/N\n"
      "fits units [(K-1)N_units/N, K N_units/N) and writes a shard file; `spinfer merge` checks the\n"
      "shards (same input checksum and settings, all K present once) and writes the model, equal\n"
      "to the unsharded fit. Automatic penalties are chosen identically in every shard.\n\n"
      "Checkpoints (pseudo-likelihood, screening): SIGTERM, SIGINT or SIGUSR1 stop the fit after\n"
      "the current round with a checkpoint (exit 128 + signal); --resume continues it to the same\n"
      "model, bit for bit. A stop during the held-out penalty choice repeats that choice.\n\n"
      "Example:\n  spinfer fit recording.npz --method pseudo-likelihood --out model.json\n"
      "  spinfer fit recording.npz --l2 1e-4 --shard 2/8 --out part-2.json\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_fit(ctx, *args); }; });
}

}  // namespace spinfer::cli
