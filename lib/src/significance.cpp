#include "spinfer/significance.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <numeric>
#include <optional>
#include <string>

#include "checkpoint_state.hpp"
#include "spinfer/bootstrap.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/rng.hpp"

namespace spinfer {
namespace {

Eigen::MatrixXd couplings_in(const IsingModel& m, Convention c) {
  return m.convention == c ? m.couplings : convert_model(m, c).couplings;
}

// Linear-interpolation quantile of sorted values (numpy's default "linear" method).
double quantile(const std::vector<double>& sorted, double q) {
  const double pos = q * double(sorted.size() - 1);
  const auto lo = std::size_t(std::floor(pos));
  const std::size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (pos - double(lo)) * (sorted[hi] - sorted[lo]);
}

/// The finished work at a consistent point (between refits): the full-data couplings, then per
/// replicate the bootstrap J_ij (i < j, row by row) or the null |J| values (pairs across groups).
struct Finished {
  std::optional<Eigen::MatrixXd> estimate;
  std::vector<std::vector<double>> bootstrap, null;
};

constexpr int kStateVersion = 1;

nlohmann::json state_json(const Finished& f, const SpinMatrix& data, std::int64_t block_length,
                          const SignificanceOptions& o) {
  nlohmann::json s = {{"kind", "significance"},       {"version", kStateVersion},
                      {"units", data.cols()},         {"samples", data.rows()},
                      {"block_length", block_length}, {"seed", o.seed},
                      {"convention", to_string(o.convention)}};
  s["estimate"] = f.estimate ? checkpoint::matrix(*f.estimate) : nlohmann::json();
  s["bootstrap"] = nlohmann::json::array();
  for (const auto& v : f.bootstrap) s["bootstrap"].push_back(checkpoint::numbers(v));
  s["null"] = nlohmann::json::array();
  for (const auto& v : f.null) s["null"].push_back(checkpoint::numbers(v));
  return s;
}

Finished read_state(const nlohmann::json& state, const SpinMatrix& data, std::int64_t block_length,
                    const SignificanceOptions& o) {
  const checkpoint::StateReader r(state, "significance: resume state: ", "significance", kStateVersion);
  const std::int64_t N = data.cols(), P = N * (N - 1) / 2;
  auto same = [&](const std::string& key, std::int64_t expected, const std::string& what) {
    const std::int64_t got = r.integer(key, 0, std::numeric_limits<std::int64_t>::max());
    if (got != expected)
      r.fail("it has " + key + " " + std::to_string(got) + ", " + what + " " + std::to_string(expected));
  };
  same("units", N, "the data have");
  same("samples", data.rows(), "the data have");
  same("block_length", block_length, "this run uses");
  if (r.unsigned_integer("seed") != o.seed)
    r.fail("it was saved with seed " + std::to_string(r.unsigned_integer("seed")) + ", this run has seed " +
           std::to_string(o.seed));
  if (r.text("convention") != to_string(o.convention))
    r.fail("its couplings are in the " + r.text("convention") + " convention, this run reports " +
           to_string(o.convention));
  Finished f;
  if (r.has("estimate")) f.estimate = r.matrix("estimate", N, N);
  const nlohmann::json& boot = r.list("bootstrap");
  if (std::int64_t(boot.size()) > o.bootstrap_replicates)
    r.fail("it has " + std::to_string(boot.size()) + " bootstrap replicates, more than the " +
           std::to_string(o.bootstrap_replicates) + " of this run");
  for (std::size_t b = 0; b < boot.size(); ++b)
    f.bootstrap.push_back(r.numbers_of(boot[b], "bootstrap replicate " + std::to_string(b + 1), P));
  const nlohmann::json& null = r.list("null");
  if (std::int64_t(null.size()) > o.null_replicates)
    r.fail("it has " + std::to_string(null.size()) + " null replicates, more than the " +
           std::to_string(o.null_replicates) + " of this run");
  for (std::size_t s = 0; s < null.size(); ++s) {
    f.null.push_back(r.numbers_of(null[s], "null replicate " + std::to_string(s + 1), -1));
    if (std::int64_t(f.null.back().size()) > P)
      r.fail("null replicate " + std::to_string(s + 1) + " has more values than there are pairs");
  }
  return f;
}

}  // namespace

std::vector<double> benjamini_hochberg(const std::vector<double>& p) {
  const std::size_t m = p.size();
  std::vector<std::size_t> order(m);
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return p[a] < p[b]; });
  std::vector<double> q(m);
  double running = 1.0;
  for (std::size_t r = m; r-- > 0;) {  // step-up: cumulative minimum from the largest p down
    running = std::min(running, p[order[r]] * double(m) / double(r + 1));
    q[order[r]] = std::min(1.0, running);
  }
  return q;
}

SpinMatrix circular_shift_surrogate(const SpinMatrix& data, std::int64_t min_offset,
                                    std::uint64_t seed, std::int64_t replicate,
                                    std::vector<std::uint8_t>* shifted) {
  const std::int64_t T = data.rows(), N = data.cols();
  if (data.weighted()) throw InputError("significance: shift surrogates need unweighted data");
  if (T < 2 * min_offset + 1)
    throw InputError("significance: the recording is too short for shifts of at least " +
                     std::to_string(min_offset) + " samples");
  if (N < 2) throw InputError("significance: need at least 2 units");
  Rng rng(seed ^ 0x5b1f7ULL, std::uint64_t(replicate));
  // Split the units into two random non-empty groups; the second group is rotated as a block.
  std::vector<std::uint8_t> group(static_cast<std::size_t>(N));
  do {
    for (auto& g : group) g = std::uint8_t(rng.below(2));
  } while (std::count(group.begin(), group.end(), 1) == 0 || std::count(group.begin(), group.end(), 0) == 0);
  // Offset uniform in [min_offset, T - min_offset].
  const std::int64_t shift = min_offset + std::int64_t(rng.below(std::uint64_t(T - 2 * min_offset + 1)));
  std::vector<std::uint8_t> out(static_cast<std::size_t>(T * N));
  for (std::int64_t t = 0; t < T; ++t) {
    const std::uint8_t* src = data.row(t);
    std::uint8_t* moved = out.data() + ((t + shift) % T) * N;
    std::uint8_t* kept = out.data() + t * N;
    for (std::int64_t i = 0; i < N; ++i) (group[std::size_t(i)] ? moved : kept)[i] = src[i];
  }
  SpinMatrix s(std::move(out), T, N, data.convention());
  s.set_names(data.names());
  if (shifted) *shifted = group;
  return s;
}

SignificanceResult coupling_significance(const SpinMatrix& data, const Fitter& fit,
                                         const SignificanceOptions& o) {
  if (o.bootstrap_replicates < 2) throw InputError("significance: need at least 2 bootstrap replicates");
  if (o.null_replicates < 1) throw InputError("significance: need at least 1 null replicate");
  if (!(o.confidence > 0 && o.confidence < 1)) throw InputError("significance: confidence must be in (0, 1)");
  if (!(o.fdr > 0 && o.fdr < 1)) throw InputError("significance: the false discovery rate must be in (0, 1)");
  checkpoint::check_hooks(o.checkpoint, "significance");
  const std::int64_t N = data.cols();
  SignificanceResult r;
  r.convention = o.convention;
  r.confidence = o.confidence;
  r.fdr = o.fdr;
  r.block_length = o.block_length > 0 ? o.block_length : default_block_length(data);
  r.bootstrap_replicates = o.bootstrap_replicates;
  r.null_replicates = o.null_replicates;
  Finished f;
  if (o.checkpoint.resume) f = read_state(*o.checkpoint.resume, data, r.block_length, o);
  const auto start = std::chrono::steady_clock::now();
  const std::int64_t total = 1 + o.bootstrap_replicates + o.null_replicates;
  std::int64_t done = (f.estimate ? 1 : 0) + std::int64_t(f.bootstrap.size() + f.null.size());
  auto tick = [&](const char* stage) {
    ++done;
    if (!o.progress) return;
    Progress p;
    p.stage = stage;
    p.done = done;
    p.total = total;
    p.elapsed_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    if (!o.progress(p)) throw Interrupted("significance interrupted");
  };

  // Every refit is one step; replicates draw from their own streams (seed, replicate), so the
  // ones not finished before an interruption are simply run on resume.
  checkpoint::SaveClock clock(o.checkpoint);
  const std::size_t P = std::size_t(N * (N - 1) / 2);
  try {
    if (!f.estimate) {
      f.estimate = couplings_in(fit(data), o.convention);
      tick("fit");
      if (clock.due()) clock.save(state_json(f, data, r.block_length, o));
    }
    // Bootstrap replicates.
    SpinMatrix resample = data;
    for (auto b = std::int64_t(f.bootstrap.size()); b < o.bootstrap_replicates; ++b) {
      std::vector<double> w = block_bootstrap_weights(data.rows(), r.block_length, o.seed, b);
      if (data.weighted())
        for (std::int64_t t = 0; t < data.rows(); ++t) w[std::size_t(t)] *= data.weight(t);
      resample.set_weights(std::move(w));
      const Eigen::MatrixXd J = couplings_in(fit(resample), o.convention);
      std::vector<double> upper;
      upper.reserve(P);
      for (std::int64_t i = 0; i < N; ++i)
        for (std::int64_t j = i + 1; j < N; ++j) upper.push_back(J(i, j));
      f.bootstrap.push_back(std::move(upper));
      tick("bootstrap");
      if (clock.due()) clock.save(state_json(f, data, r.block_length, o));
    }
    // Shift surrogates: null |J| of the pairs split across the two groups.
    for (auto s = std::int64_t(f.null.size()); s < o.null_replicates; ++s) {
      std::vector<std::uint8_t> group;
      const SpinMatrix surrogate = circular_shift_surrogate(data, r.block_length, o.seed, s, &group);
      const Eigen::MatrixXd J = couplings_in(fit(surrogate), o.convention);
      std::vector<double> values;
      for (std::int64_t i = 0; i < N; ++i)
        for (std::int64_t j = i + 1; j < N; ++j)
          if (group[std::size_t(i)] != group[std::size_t(j)]) values.push_back(std::abs(J(i, j)));
      f.null.push_back(std::move(values));
      tick("null");
      if (clock.due()) clock.save(state_json(f, data, r.block_length, o));
    }
  } catch (const Interrupted&) {
    // From `tick` or from inside a refit (its own progress callback): the refit in progress is
    // dropped, everything finished is saved.
    if (clock.enabled()) clock.save(state_json(f, data, r.block_length, o));
    throw;
  }

  r.estimate = *f.estimate;
  // Every J_ij's values over the bootstrap replicates; the null values pooled.
  std::vector<std::vector<double>> boot(P);
  for (const auto& upper : f.bootstrap)
    for (std::size_t k = 0; k < P; ++k) boot[k].push_back(upper[k]);
  for (const auto& values : f.null) r.null_abs.insert(r.null_abs.end(), values.begin(), values.end());
  std::sort(r.null_abs.begin(), r.null_abs.end());

  r.standard_error = r.lower = r.upper = r.p_value = r.q_value = Eigen::MatrixXd::Zero(N, N);
  r.significant = Eigen::MatrixXi::Zero(N, N);
  std::vector<double> p(P);
  std::size_t k = 0;
  const double alpha = 1.0 - o.confidence;
  for (std::int64_t i = 0; i < N; ++i) {
    for (std::int64_t j = i + 1; j < N; ++j, ++k) {
      std::vector<double>& v = boot[k];
      std::sort(v.begin(), v.end());
      double mean = 0, sq = 0;
      for (double x : v) mean += x;
      mean /= double(v.size());
      for (double x : v) sq += (x - mean) * (x - mean);
      const double se = std::sqrt(sq / double(v.size() - 1));
      const double lo = quantile(v, alpha / 2), hi = quantile(v, 1 - alpha / 2);
      const double a = std::abs(r.estimate(i, j));
      // Null values at least as large as |J_ij|.
      const auto exceed = r.null_abs.end() - std::lower_bound(r.null_abs.begin(), r.null_abs.end(), a);
      p[k] = (1.0 + double(exceed)) / (1.0 + double(r.null_abs.size()));
      r.standard_error(i, j) = r.standard_error(j, i) = se;
      r.lower(i, j) = r.lower(j, i) = lo;
      r.upper(i, j) = r.upper(j, i) = hi;
      r.p_value(i, j) = r.p_value(j, i) = p[k];
    }
  }
  const std::vector<double> q = benjamini_hochberg(p);
  k = 0;
  for (std::int64_t i = 0; i < N; ++i)
    for (std::int64_t j = i + 1; j < N; ++j, ++k) {
      r.q_value(i, j) = r.q_value(j, i) = q[k];
      r.significant(i, j) = r.significant(j, i) = q[k] <= o.fdr ? 1 : 0;
    }
  return r;
}

}  // namespace spinfer
