#include "spinfer/chain_diagnostics.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "spinfer/errors.hpp"

namespace spinfer {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::size_t shortest(const ChainSeries& chains) {
  if (chains.empty()) return 0;
  std::size_t n = chains[0].size();
  for (const auto& c : chains) n = std::min(n, c.size());
  return n;
}

/// Chains truncated to a common length, optionally cut into halves (dropping a middle draw when
/// the length is odd).
ChainSeries prepare(const ChainSeries& chains, bool split) {
  const std::size_t n = shortest(chains);
  ChainSeries out;
  for (const auto& c : chains) {
    if (split) {
      const std::size_t half = n / 2;
      out.emplace_back(c.begin(), c.begin() + std::ptrdiff_t(half));
      out.emplace_back(c.begin() + std::ptrdiff_t(n - half), c.begin() + std::ptrdiff_t(n));
    } else {
      out.emplace_back(c.begin(), c.begin() + std::ptrdiff_t(n));
    }
  }
  return out;
}

struct Moments2 {
  std::vector<double> means;
  double W = 0;         // mean within-chain variance (divisor n - 1)
  double var_plus = 0;  // BDA3 eq. 11.3
};

Moments2 chain_moments(const ChainSeries& chains) {
  const std::size_t M = chains.size(), n = chains[0].size();
  Moments2 r;
  r.means.resize(M);
  for (std::size_t m = 0; m < M; ++m) {
    double s = 0;
    for (double x : chains[m]) s += x;
    r.means[m] = s / double(n);
    double v = 0;
    for (double x : chains[m]) v += (x - r.means[m]) * (x - r.means[m]);
    r.W += v / double(n - 1);
  }
  r.W /= double(M);
  double grand = 0;
  for (double mu : r.means) grand += mu;
  grand /= double(M);
  double b_over_n = 0;  // B/n = variance of the chain means
  if (M > 1) {
    for (double mu : r.means) b_over_n += (mu - grand) * (mu - grand);
    b_over_n /= double(M - 1);
  }
  r.var_plus = double(n - 1) / double(n) * r.W + b_over_n;
  return r;
}

}  // namespace

double split_rhat(const ChainSeries& chains) {
  if (shortest(chains) < 4) return kNaN;
  const ChainSeries halves = prepare(chains, true);
  const Moments2 mo = chain_moments(halves);
  if (mo.var_plus <= 0) return 1.0;
  if (mo.W <= 0) return std::numeric_limits<double>::infinity();
  return std::sqrt(mo.var_plus / mo.W);
}

AutocorrelationTime autocorrelation_time(const ChainSeries& chains, bool split) {
  AutocorrelationTime out;
  if (shortest(chains) < 4) return {kNaN, kNaN, 0};
  const ChainSeries cs = prepare(chains, split);
  const std::size_t M = cs.size(), n = cs[0].size();
  const double total = double(M) * double(n);
  const Moments2 mo = chain_moments(cs);
  if (mo.var_plus <= 0) return {1.0, total, 0};

  // rho_t from the mean autocovariance over chains (divisor n, as in BDA3 / Geyer).
  auto rho = [&](std::size_t t) {
    double acov = 0;
    for (std::size_t m = 0; m < M; ++m) {
      const auto& x = cs[m];
      const double mu = mo.means[m];
      double s = 0;
      for (std::size_t i = 0; i + t < n; ++i) s += (x[i] - mu) * (x[i + t] - mu);
      acov += s / double(n);
    }
    acov /= double(M);
    return 1.0 - (mo.W - acov) / mo.var_plus;
  };

  // Geyer's initial monotone sequence over pairs P_k = rho_2k + rho_2k+1 (rho_0 = 1 by definition).
  double sum_pairs = 0;
  double previous = std::numeric_limits<double>::infinity();
  std::size_t t = 0;
  while (t + 1 < n) {
    const double r0 = t == 0 ? 1.0 : rho(t);
    const double pair = r0 + rho(t + 1);
    if (!(pair > 0)) break;
    const double capped = std::min(pair, previous);
    sum_pairs += capped;
    previous = capped;
    t += 2;
  }
  out.lags = std::int64_t(t);
  // Antithetic chains can give tau < 1; ESS is capped at S log10 S (Vehtari et al. 2021, §3.2).
  out.tau = std::max(-1.0 + 2.0 * sum_pairs, 1.0 / std::log10(std::max(total, 10.0)));
  out.ess = total / out.tau;
  return out;
}

MeanWithError batch_means(const ChainSeries& chains, std::int64_t batches_per_chain) {
  if (batches_per_chain < 1) throw InputError("batch_means: batches_per_chain must be >= 1");
  MeanWithError r;
  double sum = 0;
  std::int64_t count = 0;
  std::vector<double> batch;
  for (const auto& c : chains) {
    for (double x : c) sum += x;
    count += std::int64_t(c.size());
    const std::int64_t len = std::int64_t(c.size()) / batches_per_chain;
    if (len == 0) continue;
    for (std::int64_t b = 0; b < batches_per_chain; ++b) {
      double s = 0;
      for (std::int64_t i = b * len; i < (b + 1) * len; ++i) s += c[std::size_t(i)];
      batch.push_back(s / double(len));
    }
  }
  if (count == 0) throw InputError("batch_means: no draws");
  r.mean = sum / double(count);
  r.batches = std::int64_t(batch.size());
  if (r.batches < 2) {
    r.error = kNaN;
    return r;
  }
  double mb = 0;
  for (double x : batch) mb += x;
  mb /= double(batch.size());
  double v = 0;
  for (double x : batch) v += (x - mb) * (x - mb);
  v /= double(batch.size() - 1);
  r.error = std::sqrt(v / double(batch.size()));
  return r;
}

}  // namespace spinfer
