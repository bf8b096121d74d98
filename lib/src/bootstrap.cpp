#include "spinfer/bootstrap.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <random>

#include "spinfer/errors.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {

std::int64_t default_block_length(const SpinMatrix& data) {
  const std::int64_t T = data.rows();
  if (T < 40) return 1;
  std::vector<double> k(static_cast<std::size_t>(T));
  double mean = 0;
  for (std::int64_t t = 0; t < T; ++t) {
    const std::uint8_t* r = data.row(t);
    double s = 0;
    for (std::int64_t i = 0; i < data.cols(); ++i) s += r[i];
    k[std::size_t(t)] = s;
    mean += s;
  }
  mean /= double(T);
  double var = 0;
  for (double& v : k) {
    v -= mean;
    var += v * v;
  }
  if (var <= 0) return 1;
  // Integrated autocorrelation time tau = 1/2 + sum_{l>=1} rho(l), Sokal's window M >= 5 tau.
  const std::int64_t max_lag = std::min<std::int64_t>(T / 20, 10000);
  double tau = 0.5;
  for (std::int64_t lag = 1; lag <= max_lag; ++lag) {
    double c = 0;
    for (std::int64_t t = 0; t + lag < T; ++t) c += k[std::size_t(t)] * k[std::size_t(t + lag)];
    tau += c / var;
    if (double(lag) >= 5.0 * tau) break;
  }
  const auto L = std::int64_t(std::ceil(10.0 * std::max(tau, 0.5)));
  return std::clamp<std::int64_t>(L, 1, std::max<std::int64_t>(1, T / 20));
}

std::vector<double> block_bootstrap_weights(std::int64_t rows, std::int64_t block_length,
                                            std::uint64_t seed, std::int64_t replicate) {
  if (block_length < 1) throw InputError("bootstrap: block length must be at least 1");
  const std::int64_t blocks = (rows + block_length - 1) / block_length;
  // One generator per replicate, seeded from (seed, replicate): independent of thread count.
  std::seed_seq seq{std::uint32_t(seed), std::uint32_t(seed >> 32), std::uint32_t(replicate),
                    std::uint32_t(std::uint64_t(replicate) >> 32), 0x5eedU};
  std::mt19937_64 gen(seq);
  std::vector<double> block_count(static_cast<std::size_t>(blocks), 0.0);
  for (std::int64_t b = 0; b < blocks; ++b) {
    // Uniform block index; the modulo bias is below 2^-40 for any realistic block count.
    block_count[std::size_t(gen() % std::uint64_t(blocks))] += 1.0;
  }
  std::vector<double> w(static_cast<std::size_t>(rows));
  for (std::int64_t t = 0; t < rows; ++t) w[std::size_t(t)] = block_count[std::size_t(t / block_length)];
  return w;
}

DataNoise bootstrap_noise(const SpinMatrix& data, Convention convention,
                          const std::vector<std::array<std::int64_t, 3>>& triples,
                          const BlockBootstrapOptions& options) {
  if (options.replicates < 2) throw InputError("bootstrap: need at least 2 replicates");
  if (data.rows() < 2) throw InputError("bootstrap: need at least 2 samples");
  const std::int64_t N = data.cols();
  const std::int64_t L = options.block_length > 0 ? options.block_length : default_block_length(data);
  // Welford accumulators of every statistic over replicates.
  Eigen::VectorXd m1 = Eigen::VectorXd::Zero(N), m2 = Eigen::VectorXd::Zero(N);
  Eigen::MatrixXd c1 = Eigen::MatrixXd::Zero(N, N), c2 = Eigen::MatrixXd::Zero(N, N);
  Eigen::MatrixXd r1 = Eigen::MatrixXd::Zero(N, N), r2 = Eigen::MatrixXd::Zero(N, N);
  Eigen::VectorXd k1 = Eigen::VectorXd::Zero(N + 1), k2 = Eigen::VectorXd::Zero(N + 1);
  const std::size_t Q = triples.size();
  std::vector<double> q1(Q, 0.0), q2(Q, 0.0);
  StatsOptions so;
  so.threads = options.threads;
  const auto start = std::chrono::steady_clock::now();
  SpinMatrix resample = data;
  for (std::int64_t r = 0; r < options.replicates; ++r) {
    std::vector<double> w = block_bootstrap_weights(data.rows(), L, options.seed, r);
    if (data.weighted())
      for (std::int64_t t = 0; t < data.rows(); ++t) w[std::size_t(t)] *= data.weight(t);
    resample.set_weights(std::move(w));
    const Moments mo = compute_moments(resample, convention, so);
    const Eigen::VectorXd pk = active_count_distribution(resample, options.threads);
    m1 += mo.mean;
    m2 += mo.mean.cwiseAbs2();
    c1 += mo.connected;
    c2 += mo.connected.cwiseAbs2();
    r1 += mo.second;
    r2 += mo.second.cwiseAbs2();
    k1 += pk;
    k2 += pk.cwiseAbs2();
    if (Q) {
      const std::vector<double> tr = connected_triplets(resample, triples, convention, options.threads);
      for (std::size_t q = 0; q < Q; ++q) {
        q1[q] += tr[q];
        q2[q] += tr[q] * tr[q];
      }
    }
    if (options.progress) {
      Progress p;
      p.stage = "bootstrap";
      p.done = r + 1;
      p.total = options.replicates;
      p.elapsed_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
      if (!options.progress(p)) throw Interrupted("bootstrap interrupted");
    }
  }
  const double R = double(options.replicates);
  auto sd = [R](double s1, double s2) { return std::sqrt(std::max(0.0, (s2 - s1 * s1 / R) / (R - 1))); };
  DataNoise out;
  out.block_length = L;
  out.replicates = options.replicates;
  out.mean_se = m1.binaryExpr(m2, sd);
  out.connected_se = c1.binaryExpr(c2, sd);
  out.second_se = r1.binaryExpr(r2, sd);
  out.count_se = k1.binaryExpr(k2, sd);
  out.triplet_se.resize(Q);
  for (std::size_t q = 0; q < Q; ++q) out.triplet_se[q] = sd(q1[q], q2[q]);
  return out;
}

}  // namespace spinfer
