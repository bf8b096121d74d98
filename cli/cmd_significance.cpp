// `spinfer significance`: bootstrap intervals, a group-shift null and Benjamini-Hochberg decisions
// for every coupling (significance.hpp); writes an edge table (CSV).
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <memory>
#include <optional>

#include <nlohmann/json.hpp>

#include "checkpoint.hpp"
#include "commands.hpp"
#include "signals.hpp"
#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/fit.hpp"
#include "spinfer/io.hpp"
#include "spinfer/significance.hpp"

namespace spinfer::cli {
namespace {

struct SignificanceArgs {
  std::string data, method = "pseudo-likelihood", convention, member, l1, l2, model_convention = "spin";
  std::int64_t bootstrap = 100, nulls = 20, block_length = 0;
  double confidence = 0.95, fdr = 0.05;
  CheckpointArgs checkpoint;
};

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string q = "\"";
  for (char c : s) q += c == '"' ? std::string("\"\"") : std::string(1, c);
  return q + "\"";
}

int run_significance(const Context& ctx, const SignificanceArgs& a) {
  if (ctx.common.out.empty()) throw InputError("--out is required");
  check_output_path(ctx.common.out, ctx.common.force);
  // Everything the result depends on (not --threads: results do not depend on it).
  CheckpointFile checkpoint(
      ctx, a.checkpoint, "significance",
      make_fingerprint({{"data", a.data}},
                       {{"method", a.method}, {"l1", a.l1}, {"l2", a.l2}, {"bootstrap", a.bootstrap},
                        {"nulls", a.nulls}, {"block_length", a.block_length}, {"confidence", a.confidence},
                        {"fdr", a.fdr}, {"model_convention", a.model_convention}, {"convention", a.convention},
                        {"member", a.member}, {"seed", ctx.common.seed}}));
  // The command's state: {"penalties": {"l1", "l2"} once chosen on held-out data (else null),
  // "replicates": the library's state (significance.hpp) or null}.
  const std::optional<nlohmann::json> saved = checkpoint.start();
  auto saved_member = [&](const char* key) -> std::optional<nlohmann::json> {
    if (!saved) return std::nullopt;
    if (!saved->is_object() || !saved->contains(key))
      throw InputError(checkpoint.path() + ": the checkpoint's state has no \"" + key + "\"");
    if ((*saved)[key].is_null()) return std::nullopt;
    return (*saved)[key];
  };
  const std::optional<nlohmann::json> saved_penalties = saved_member("penalties");
  std::optional<nlohmann::json> saved_replicates = saved_member("replicates");
  ReadOptions ro;
  if (!a.convention.empty()) ro.convention = parse_convention(a.convention);
  ro.member = a.member;
  const SpinMatrix data = read_matrix(a.data, ro);
  FitOptions fo;
  fo.method = a.method;
  fo.l1 = parse_penalty(a.l1, "--l1");
  fo.l2 = parse_penalty(a.l2, "--l2");
  fo.threads = ctx.common.threads;
  fo.progress = stop_when_signalled();  // every refit stops within a second of a signal
  nlohmann::json penalties;             // null: not chosen here
  // The held-out penalty is chosen once on the full data and reused by every refit.
  if (saved_penalties) {
    try {
      fo.l1 = saved_penalties->at("l1").get<double>();
      fo.l2 = saved_penalties->at("l2").get<double>();
    } catch (const nlohmann::json::exception&) {
      throw InputError(checkpoint.path() + ": the checkpoint's penalties must be numbers l1 and l2");
    }
    penalties = *saved_penalties;
  } else if (fo.l2.value_or(0) == kAutomaticPenalty || fo.l1.value_or(0) == kAutomaticPenalty ||
             (!fo.l1 && !fo.l2 && (a.method == "pseudo-likelihood" || a.method == "screening"))) {
    FitOptions choice = fo;
    choice.progress = progress_logger(ctx, "penalty choice");
    try {
      const IsingModel first = fit_model(data, choice);
      fo.l1 = first.provenance.l1;
      fo.l2 = first.provenance.l2;
    } catch (const Interrupted&) {
      checkpoint.save({{"penalties", nullptr}, {"replicates", nullptr}});  // nothing finished yet
      throw;
    }
    penalties = {{"l1", *fo.l1}, {"l2", *fo.l2}};
  }
  if (!penalties.is_null())
    log_info(ctx, "penalty", "penalties fixed for all refits: l1 = " + std::to_string(*fo.l1) +
                                 ", l2 = " + std::to_string(*fo.l2));
  SignificanceOptions so;
  so.bootstrap_replicates = a.bootstrap;
  so.null_replicates = a.nulls;
  so.block_length = a.block_length;
  so.confidence = a.confidence;
  so.fdr = a.fdr;
  so.convention = parse_convention(a.model_convention);
  so.seed = ctx.common.seed;
  so.progress = progress_logger(ctx, "significance");
  so.checkpoint = checkpoint.hooks(std::move(saved_replicates), [penalties](const nlohmann::json& state) {
    return nlohmann::json{{"penalties", penalties}, {"replicates", state}};
  });
  const SignificanceResult r = coupling_significance(data, [&](const SpinMatrix& d) { return fit_model(d, fo); }, so);
  const std::int64_t N = data.cols();
  struct Row { std::int64_t i, j; };
  std::vector<Row> rows;
  for (std::int64_t i = 0; i < N; ++i)
    for (std::int64_t j = i + 1; j < N; ++j) rows.push_back({i, j});
  std::stable_sort(rows.begin(), rows.end(), [&](const Row& x, const Row& y) {
    return std::abs(r.estimate(x.i, x.j)) > std::abs(r.estimate(y.i, y.j));
  });
  std::int64_t found = 0;
  write_file_atomically(ctx.common.out, [&](std::ostream& out) {
    out << "i,j,source,target,coupling,standard_error,lower,upper,p_value,q_value,significant\n";
    char buf[512];
    for (const Row& w : rows) {
      std::snprintf(buf, sizeof buf, ",%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%s\n", r.estimate(w.i, w.j),
                    r.standard_error(w.i, w.j), r.lower(w.i, w.j), r.upper(w.i, w.j), r.p_value(w.i, w.j),
                    r.q_value(w.i, w.j), r.significant(w.i, w.j) ? "true" : "false");
      out << w.i << "," << w.j << "," << csv_field(data.name(w.i)) << "," << csv_field(data.name(w.j)) << buf;
      found += r.significant(w.i, w.j);
    }
  });
  checkpoint.remove();
  // The smallest possible p-value is 1 / (1 + null values); Benjamini-Hochberg multiplies the
  // smallest by the number of pairs, so with too few null refits nothing can be significant.
  const double floor_q = double(rows.size()) / (1.0 + double(r.null_abs.size()));
  if (floor_q > a.fdr)
    log_info(ctx, "warning", "warning: with " + std::to_string(r.null_abs.size()) +
                                 " null values the smallest attainable q-value is " + std::to_string(floor_q) +
                                 " > FDR " + std::to_string(a.fdr) + "; raise --nulls");
  log_info(ctx, "significance", std::to_string(found) + " of " + std::to_string(rows.size()) +
                                    " couplings significant at FDR " + std::to_string(a.fdr) + " -> " + ctx.common.out);
  log_info(ctx, "significance", "significant couplings are statistical dependencies, not proof of a connection");
  print_summary(nlohmann::json{{"command", "significance"}, {"data", a.data}, {"output", ctx.common.out},
                               {"method", a.method}, {"pairs", rows.size()}, {"significant", found},
                               {"fdr", a.fdr}, {"block_length", r.block_length},
                               {"bootstrap", r.bootstrap_replicates}, {"nulls", r.null_replicates},
                               {"provenance", provenance_json(ctx, {a.data})}}.dump());
  return kOk;
}

}  // namespace

void add_significance_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<SignificanceArgs>();
  CLI::App* sub = app.add_subcommand("significance", "Bootstrap intervals and FDR decisions for every coupling");
  sub->add_option("DATA", args->data, "Data matrix (.npy, .npz, .csv, .tsv, .txt)")->required();
  sub->add_option("--method,-m", args->method, "Estimator refitted on every replicate (as in spinfer fit)")
      ->check(CLI::IsMember({"pseudo-likelihood", "screening", "mean-field", "tap", "independent-pair",
                             "sessak-monasson", "bethe"}));
  sub->add_option("--l2", args->l2, "L2 penalty, or 'auto' (chosen once on the full data)");
  sub->add_option("--l1", args->l1, "L1 penalty, or 'auto'");
  sub->add_option("--bootstrap", args->bootstrap, "Block-bootstrap refits")->check(CLI::Range(2, 100000));
  sub->add_option("--nulls", args->nulls, "Shift-surrogate refits for the null")->check(CLI::Range(1, 100000));
  sub->add_option("--block-length", args->block_length, "Bootstrap block (0: from the data)")
      ->check(CLI::NonNegativeNumber);
  sub->add_option("--confidence", args->confidence, "Level of the intervals")->check(CLI::Range(0.5, 0.999));
  sub->add_option("--fdr", args->fdr, "Benjamini-Hochberg false discovery rate")->check(CLI::Range(0.0001, 0.5));
  sub->add_option("--model-convention", args->model_convention, "Convention of the reported couplings")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--convention", args->convention, "How the data's values are read; default: detect")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--member", args->member, "Array to read from an .npz archive");
  add_checkpoint_options(*sub, args->checkpoint);
  add_common_options(*sub, ctx.common);
  sub->footer(
      "Writes an edge table (CSV, strongest first): i, j, source, target, coupling, standard_error,\n"
      "lower, upper, p_value, q_value, significant. Every replicate refits the whole model.\n"
      "SIGTERM, SIGINT or SIGUSR1 stop it with a checkpoint of the finished refits (exit 128 +\n"
      "signal); --resume runs only the rest and gives the uninterrupted result.\n\n"
      "Example:\n  spinfer significance recording.npz --bootstrap 100 --nulls 20 --out edges.csv --seed 1\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_significance(ctx, *args); }; });
}

}  // namespace spinfer::cli
