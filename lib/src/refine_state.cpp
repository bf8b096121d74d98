#include "refine_state.hpp"

#include "checkpoint_state.hpp"

namespace spinfer::detail {
namespace {

constexpr int kVersion = 1;

nlohmann::json iteration_json(const RefineIteration& it) {
  using checkpoint::number;
  return {{"iteration", it.iteration},
          {"epsilon_mean", number(it.epsilon_mean)},
          {"epsilon_correlation", number(it.epsilon_correlation)},
          {"debiased_epsilon_mean", number(it.debiased_epsilon_mean)},
          {"debiased_epsilon_correlation", number(it.debiased_epsilon_correlation)},
          {"max_z_mean", number(it.max_z_mean)},
          {"max_z_correlation", number(it.max_z_correlation)},
          {"monte_carlo_ratio", number(it.monte_carlo_ratio)},
          {"max_gradient", number(it.max_gradient)},
          {"samples", it.samples},
          {"learning_rate", number(it.learning_rate)},
          {"check", it.check}};
}

RefineIteration read_iteration(const nlohmann::json& j, std::int64_t expected, const checkpoint::StateReader& r) {
  const std::string what = "trajectory entry " + std::to_string(expected);
  if (!j.is_object()) r.fail("\"" + what + "\" must be an object");
  RefineIteration it;
  auto get = [&](const char* key) -> const nlohmann::json& {
    if (!j.contains(key)) r.fail(what + ": missing \"" + key + "\"");
    return j[key];
  };
  if (!get("iteration").is_number_integer() || get("iteration").get<std::int64_t>() != expected)
    r.fail(what + ": \"iteration\" must be " + std::to_string(expected));
  it.iteration = expected;
  it.epsilon_mean = r.number_of(get("epsilon_mean"), what + " epsilon_mean");
  it.epsilon_correlation = r.number_of(get("epsilon_correlation"), what + " epsilon_correlation");
  it.debiased_epsilon_mean = r.number_of(get("debiased_epsilon_mean"), what + " debiased_epsilon_mean");
  it.debiased_epsilon_correlation =
      r.number_of(get("debiased_epsilon_correlation"), what + " debiased_epsilon_correlation");
  it.max_z_mean = r.number_of(get("max_z_mean"), what + " max_z_mean");
  it.max_z_correlation = r.number_of(get("max_z_correlation"), what + " max_z_correlation");
  it.monte_carlo_ratio = r.number_of(get("monte_carlo_ratio"), what + " monte_carlo_ratio");
  it.max_gradient = r.number_of(get("max_gradient"), what + " max_gradient");
  if (!get("samples").is_number_integer()) r.fail(what + ": \"samples\" must be an integer");
  it.samples = get("samples").get<std::int64_t>();
  it.learning_rate = r.number_of(get("learning_rate"), what + " learning_rate");
  if (!get("check").is_boolean()) r.fail(what + ": \"check\" must be true or false");
  it.check = get("check").get<bool>();
  return it;
}

}  // namespace

nlohmann::json refine_state(const RefineLoop& loop, bool sampled, std::int64_t units, const RefineOptions& o,
                            double elapsed_seconds, const std::vector<RefineIteration>& trajectory,
                            const std::vector<std::string>& warnings) {
  using namespace checkpoint;
  nlohmann::json s = {{"kind", "refine"},
                      {"version", kVersion},
                      {"expectations", sampled ? "sampled" : "exact"},
                      {"units", units},
                      {"seed", o.seed},
                      {"started", loop.started}};
  if (!loop.started) return s;
  s["iteration"] = loop.iteration;
  s["elapsed_seconds"] = number(elapsed_seconds);
  s["fields"] = vector(loop.p.h);
  s["couplings"] = matrix(loop.p.J);
  if (sampled) {
    s["samples"] = loop.samples;
    s["learning_rate"] = number(loop.rate);
    s["velocity_fields"] = vector(loop.vh);
    s["velocity_couplings"] = matrix(loop.vJ);
    nlohmann::json window = nlohmann::json::array();
    for (const auto& [err2, q] : loop.window)
      window.push_back({{"error2", number(err2)}, {"fields", vector(q.h)}, {"couplings", matrix(q.J)}});
    s["window"] = std::move(window);
    s["best"] = number(loop.best);
    s["since_best"] = loop.since_best;
    s["chains"] = bits(loop.chains, o.chains, units);
  }
  nlohmann::json traj = nlohmann::json::array();
  for (std::int64_t k = 0; k + 1 < loop.iteration; ++k) traj.push_back(iteration_json(trajectory[std::size_t(k)]));
  s["trajectory"] = std::move(traj);
  s["warnings"] = warnings;
  return s;
}

RefineLoop read_refine_state(const nlohmann::json& state, bool sampled, std::int64_t units, const RefineOptions& o) {
  const checkpoint::StateReader r(state, "refine: resume state: ", "refine", kVersion);
  const std::string expectations = sampled ? "sampled" : "exact";
  if (r.text("expectations") != expectations)
    r.fail("it was saved with " + r.text("expectations") + " expectations, this run uses " + expectations);
  const std::int64_t saved_units = r.integer("units", 0, std::numeric_limits<std::int64_t>::max());
  if (saved_units != units)
    r.fail("it has " + std::to_string(saved_units) + " units, the data have " + std::to_string(units));
  if (r.unsigned_integer("seed") != o.seed)
    r.fail("it was saved with seed " + std::to_string(r.unsigned_integer("seed")) + ", this run has seed " +
           std::to_string(o.seed));
  const nlohmann::json& started = r.at("started");
  if (!started.is_boolean()) r.fail("\"started\" must be true or false");
  RefineLoop loop;
  loop.started = started.get<bool>();
  if (!loop.started) return loop;
  loop.iteration = r.integer("iteration", 1, o.max_iterations);
  loop.elapsed_seconds = r.number("elapsed_seconds");
  loop.p.h = r.vector("fields", units);
  loop.p.J = r.matrix("couplings", units, units);
  if (sampled) {
    loop.samples = r.integer("samples", 1, std::numeric_limits<std::int64_t>::max());
    loop.rate = r.number("learning_rate");
    loop.vh = r.vector("velocity_fields", units);
    loop.vJ = r.matrix("velocity_couplings", units, units);
    const nlohmann::json& window = r.list("window");
    for (std::size_t k = 0; k < window.size(); ++k) {
      const std::string what = "window entry " + std::to_string(k + 1);
      const nlohmann::json& w = window[k];
      if (!w.is_object() || !w.contains("error2") || !w.contains("fields") || !w.contains("couplings"))
        r.fail(what + " must have error2, fields and couplings");
      RefineParams q;
      const std::vector<double> h = r.numbers_of(w["fields"], what + " fields", units);
      q.h = Eigen::Map<const Eigen::VectorXd>(h.data(), units);
      q.J = r.matrix_of(w["couplings"], what + " couplings", units, units);
      loop.window.emplace_back(r.number_of(w["error2"], what + " error2"), std::move(q));
    }
    loop.best = r.number("best");
    loop.since_best = r.integer("since_best", 0, std::numeric_limits<std::int64_t>::max());
    const nlohmann::json& chains = r.list("chains");
    if (std::int64_t(chains.size()) != o.chains)
      r.fail("it has " + std::to_string(chains.size()) + " persistent chains, this run has " +
             std::to_string(o.chains));
    loop.chains = r.bits("chains", o.chains, units);
  }
  const nlohmann::json& traj = r.list("trajectory");
  if (std::int64_t(traj.size()) != loop.iteration - 1)
    r.fail("\"trajectory\" has " + std::to_string(traj.size()) + " entries, expected " +
           std::to_string(loop.iteration - 1));
  for (std::size_t k = 0; k < traj.size(); ++k)
    loop.trajectory.push_back(read_iteration(traj[k], std::int64_t(k) + 1, r));
  const nlohmann::json& warnings = r.list("warnings");
  for (const auto& w : warnings) {
    if (!w.is_string()) r.fail("\"warnings\" must be a list of strings");
    loop.warnings.push_back(w.get<std::string>());
  }
  return loop;
}

}  // namespace spinfer::detail
