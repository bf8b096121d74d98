// `spinfer scan`: energy and specific heat of a model over a temperature grid (scan.hpp).
#include <memory>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/scan.hpp"

namespace spinfer::cli {
namespace {

struct ScanArgs {
  std::string model, grid = "0.5:2.0:16", method = "auto";
  std::int64_t samples = 20000, chains = 4;
};

std::vector<double> parse_grid(const std::string& g) {
  // "lo:hi:count" (evenly spaced) or a comma-separated list.
  std::vector<double> t;
  try {
    if (g.find(':') != std::string::npos) {
      const auto a = g.find(':'), b = g.find(':', a + 1);
      if (b == std::string::npos) throw InputError("");
      const double lo = std::stod(g.substr(0, a)), hi = std::stod(g.substr(a + 1, b - a - 1));
      const long n = std::stol(g.substr(b + 1));
      if (n < 1 || n > 10000) throw InputError("");
      for (long k = 0; k < n; ++k) t.push_back(n == 1 ? lo : lo + (hi - lo) * double(k) / double(n - 1));
    } else {
      std::size_t p = 0;
      while (p <= g.size()) {
        const auto q = std::min(g.find(',', p), g.size());
        t.push_back(std::stod(g.substr(p, q - p)));
        p = q + 1;
      }
    }
  } catch (const std::exception&) {
    throw InputError("--temperatures '" + g + "': expected LOW:HIGH:COUNT or a comma-separated list");
  }
  return t;
}

int run_scan(const Context& ctx, const ScanArgs& a) {
  check_output_path(ctx.common.out, ctx.common.force);
  const IsingModel model = load_model(a.model);
  ScanOptions o;
  o.method = a.method;
  o.sampler.samples = a.samples;
  o.sampler.chains = a.chains;
  o.sampler.seed = ctx.common.seed;
  o.sampler.threads = ctx.common.threads;
  o.sampler.progress = progress_logger(ctx, "scan");
  std::string used;
  const TemperatureScan s = scan_temperatures(model, parse_grid(a.grid), o, &used);
  nlohmann::json j = {{"format", "spinfer-scan"},
                      {"format_version", 1},
                      {"method", used},
                      {"units", model.size()},
                      {"temperatures", s.temperatures},
                      {"energy", s.energy},
                      {"energy_error", s.energy_error},
                      {"specific_heat", s.specific_heat},
                      {"specific_heat_error", s.specific_heat_error},
                      {"peak_temperature", s.peak_temperature},
                      {"peak_at_edge", s.peak_at_edge},
                      {"swap_acceptance", s.swap_acceptance},
                      {"provenance", provenance_json(ctx, {a.model})}};
  if (!ctx.common.out.empty())
    write_file_atomically(ctx.common.out, [&](std::ostream& out) { out << j.dump(1) << "\n"; });
  log_info(ctx, "scan", "specific heat peaks at T = " + std::to_string(s.peak_temperature) +
                            (s.peak_at_edge ? " (at the edge of the grid: widen it)" : "") + " [" + used + "]");
  log_info(ctx, "scan", "a peak is not by itself evidence of criticality: subsampling and common input produce peaks too");
  print_summary(nlohmann::json{{"command", "scan"}, {"model", a.model}, {"output", ctx.common.out},
                               {"method", used}, {"peak_temperature", s.peak_temperature},
                               {"peak_at_edge", s.peak_at_edge}}.dump());
  return kOk;
}

}  // namespace

void add_scan_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<ScanArgs>();
  CLI::App* sub = app.add_subcommand("scan", "Energy and specific heat over a temperature grid");
  sub->add_option("MODEL", args->model, "Model file (.json)")->required();
  sub->add_option("--temperatures,-t", args->grid, "LOW:HIGH:COUNT or a comma-separated list");
  sub->add_option("--method", args->method, "auto (exact up to 20 units, else tempering), exact, sampled, tempering")
      ->check(CLI::IsMember({"auto", "exact", "sampled", "tempering"}));
  sub->add_option("--samples", args->samples, "Monte Carlo samples per temperature")->check(CLI::PositiveNumber);
  sub->add_option("--chains", args->chains, "Independent chains")->check(CLI::PositiveNumber);
  add_common_options(*sub, ctx.common);
  sub->footer(
      "T = 1 is the fitted model; P_T(v) is proportional to P(v)^(1/T). Writes SCAN.json with\n"
      "energy and specific heat C(T) = Var(E)/(N T^2) and their errors, and the peak location.\n\n"
      "Example:\n  spinfer scan model.json --temperatures 0.6:1.8:25 --out scan.json --seed 3\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_scan(ctx, *args); }; });
}

}  // namespace spinfer::cli
