// Annealed importance sampling of ln Z (Neal, Stat. Comput. 11:125, 2001) along the linear path
// from an independent reference model; see partition.hpp.
#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <sstream>

#include "partition_internal.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/threads.hpp"

namespace spinfer::detail {
namespace {

// Below this fraction of non-zero couplings the runs use neighbour lists (as the sampler does).
constexpr double kSparseDensity = 0.1;
// Local fields and E_1 - E_0 are recomputed from scratch this often (in intermediate
// distributions) so incremental rounding never accumulates.
constexpr std::int64_t kRefreshEvery = 256;

struct Run {
  Rng rng;
  std::vector<double> v;   // unit values in the model's convention
  std::vector<double> HJ;  // sum_j J_kj v_j
  double D = 0;            // E_1(v) - E_0(v)
  double log_weight = 0;
};

class Annealer {
 public:
  Annealer(const IsingModel& m, const Eigen::VectorXd& g)
      : N_(m.size()), h_(m.fields), g_(g), dh_(m.fields - g),
        lo_(m.convention == Convention::binary ? 0.0 : -1.0) {
    std::int64_t nnz = 0;
    for (std::int64_t k = 0; k < N_; ++k)
      for (std::int64_t j = 0; j < N_; ++j) nnz += (j != k && m.couplings(j, k) != 0.0);
    sparse_ = N_ > 1 && double(nnz) < kSparseDensity * double(N_) * double(N_ - 1);
    if (sparse_) {
      offsets_.assign(std::size_t(N_ + 1), 0);
      for (std::int64_t k = 0; k < N_; ++k) {
        for (std::int64_t j = 0; j < N_; ++j)
          if (j != k && m.couplings(j, k) != 0.0) {
            index_.push_back(std::int32_t(j));
            value_.push_back(m.couplings(j, k));
          }
        offsets_[std::size_t(k + 1)] = std::int64_t(index_.size());
      }
    } else {
      J_ = m.couplings;
    }
  }

  /// x_0 drawn exactly from the independent model P_0(v) ∝ exp(g.v).
  Run start(std::uint64_t seed, std::uint64_t stream) const {
    Run r;
    r.rng = Rng(seed, stream);
    r.v.resize(std::size_t(N_));
    const double span = 1.0 - lo_;
    for (std::int64_t k = 0; k < N_; ++k)
      r.v[std::size_t(k)] = r.rng.uniform() * (1.0 + std::exp(-span * g_(k))) < 1.0 ? 1.0 : lo_;
    refresh(r);
    return r;
  }

  /// Intermediate distribution k of K: weight update, then (k < K) Gibbs sweeps at alpha_k.
  void advance(Run& r, std::int64_t k, std::int64_t K, std::int64_t sweeps) const {
    const double a = double(k) / double(K), a_prev = double(k - 1) / double(K);
    r.log_weight -= (a - a_prev) * r.D;
    if (k == K) return;
    for (std::int64_t s = 0; s < sweeps; ++s) sweep(r, a);
    if (k % kRefreshEvery == 0) refresh(r);
  }

  bool sparse() const { return sparse_; }

 private:
  void refresh(Run& r) const {
    r.HJ.assign(std::size_t(N_), 0.0);
    if (sparse_) {
      for (std::int64_t k = 0; k < N_; ++k) {
        double s = 0;
        for (auto p = offsets_[std::size_t(k)]; p < offsets_[std::size_t(k + 1)]; ++p)
          s += value_[std::size_t(p)] * r.v[std::size_t(index_[std::size_t(p)])];
        r.HJ[std::size_t(k)] = s;
      }
    } else {
      const Eigen::Map<const Eigen::VectorXd> v(r.v.data(), N_);
      Eigen::Map<Eigen::VectorXd>(r.HJ.data(), N_) = J_ * v;
    }
    // E_1 - E_0 = -(h - g).v - 1/2 v.J v
    double D = 0;
    for (std::int64_t i = 0; i < N_; ++i)
      D -= r.v[std::size_t(i)] * (dh_(i) + 0.5 * r.HJ[std::size_t(i)]);
    r.D = D;
  }

  // Heat-bath sweep at E_alpha: local field g_k + alpha (h_k - g_k) + alpha HJ_k.
  void sweep(Run& r, double alpha) const {
    const double span = 1.0 - lo_;
    double* v = r.v.data();
    double* HJ = r.HJ.data();
    for (std::int64_t k = 0; k < N_; ++k) {
      const double x = span * (g_(k) + alpha * (dh_(k) + HJ[k]));
      const double next = r.rng.uniform() * (1.0 + std::exp(-x)) < 1.0 ? 1.0 : lo_;
      const double delta = next - v[k];
      if (delta == 0.0) continue;
      r.D -= delta * (dh_(k) + HJ[k]);
      v[k] = next;
      if (sparse_) {
        for (auto p = offsets_[std::size_t(k)]; p < offsets_[std::size_t(k + 1)]; ++p)
          HJ[index_[std::size_t(p)]] += value_[std::size_t(p)] * delta;
      } else {
        const double* col = J_.data() + k * N_;
        for (std::int64_t j = 0; j < N_; ++j) HJ[j] += col[j] * delta;
      }
    }
  }

  std::int64_t N_;
  Eigen::VectorXd h_, g_, dh_;
  double lo_;
  bool sparse_ = false;
  Eigen::MatrixXd J_;
  std::vector<std::int64_t> offsets_;
  std::vector<std::int32_t> index_;
  std::vector<double> value_;
};

double log_mean_exp(const std::vector<double>& x) {
  double top = -std::numeric_limits<double>::infinity();
  for (double v : x) top = std::max(top, v);
  double s = 0;
  for (double v : x) s += std::exp(v - top);
  return top + std::log(s / double(x.size()));
}

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

}  // namespace

void run_ais(const IsingModel& model, const PartitionOptions& o, LogPartitionEstimate& out) {
  const auto t0 = std::chrono::steady_clock::now();
  const Annealer annealer(model, out.base_fields);
  const std::int64_t R = o.ais_runs, K = o.ais_steps, N = model.size();
  const int threads = resolve_threads(o.threads);

  std::vector<Run> runs;
  runs.reserve(std::size_t(R));
  for (std::int64_t r = 0; r < R; ++r) runs.push_back(annealer.start(o.seed, std::uint64_t(r)));

  // Rounds of intermediate distributions, sized from the measured speed to last about 0.2 s;
  // progress runs between rounds on this thread. Each run depends only on its own stream, so
  // the round boundaries never change results.
  const double updates_per_step = double(R) * double(N) * double(o.ais_sweeps);
  std::int64_t round = std::max<std::int64_t>(1, std::int64_t(2e5 / updates_per_step));
  for (std::int64_t begin = 1; begin <= K;) {
    const std::int64_t end = std::min(K + 1, begin + round);
    const auto t = std::chrono::steady_clock::now();
    parallel_for(R, threads, [&](std::int64_t r) {
      for (std::int64_t k = begin; k < end; ++k) annealer.advance(runs[std::size_t(r)], k, K, o.ais_sweeps);
    });
    const double took = seconds_since(t);
    const double factor = took > 0 ? std::clamp(0.2 / took, 0.25, 4.0) : 4.0;
    round = std::max<std::int64_t>(1, std::int64_t(double(end - begin) * factor));
    begin = end;
    if (o.progress) {
      Progress p;
      p.stage = "annealed importance sampling";
      p.done = end - 1;
      p.total = K;
      p.elapsed_s = seconds_since(t0);
      if (!o.progress(p)) throw Interrupted("log-partition estimate interrupted during annealed importance sampling");
    }
  }

  out.runs = R;
  out.steps = K;
  out.sweeps = o.ais_sweeps;
  out.log_weights.resize(std::size_t(R));
  for (std::int64_t r = 0; r < R; ++r) out.log_weights[std::size_t(r)] = runs[std::size_t(r)].log_weight;
  const double lme = log_mean_exp(out.log_weights);
  out.value = out.base_log_partition + lme;
  out.lower_bound = true;

  // Weights relative to their mean: w_r / mean(w). Delta method: se(ln mean w) = sd(w) / (sqrt(R) mean w).
  double s1 = 0, s2 = 0;
  for (double lw : out.log_weights) {
    const double w = std::exp(lw - lme);
    s1 += w;
    s2 += w * w;
  }
  out.effective_runs = s2 > 0 ? s1 * s1 / s2 : 0.0;
  const double var = std::max(0.0, (s2 - s1 * s1 / double(R)) / double(R - 1));
  out.error = std::sqrt(var / double(R));  // mean(w / mean w) = 1

  out.bootstrap_error = std::numeric_limits<double>::quiet_NaN();
  if (o.bootstrap > 1) {
    // Replicate b resamples the runs with its own stream (above every run's stream index).
    std::vector<double> reps(std::size_t(o.bootstrap));
    parallel_for(o.bootstrap, threads, [&](std::int64_t b) {
      Rng rng(o.seed, (std::uint64_t(1) << 63) + std::uint64_t(b));
      std::vector<double> pick(static_cast<std::size_t>(R));
      for (auto& x : pick) x = out.log_weights[std::size_t(rng.below(std::uint64_t(R)))];
      reps[std::size_t(b)] = log_mean_exp(pick);
    });
    double m = 0;
    for (double x : reps) m += x;
    m /= double(reps.size());
    double v = 0;
    for (double x : reps) v += (x - m) * (x - m);
    out.bootstrap_error = std::sqrt(v / double(reps.size() - 1));
  }

  if (out.effective_runs < 0.1 * double(R)) {
    std::ostringstream w;
    w << "annealed importance sampling: the effective number of runs is " << out.effective_runs
      << " of " << R << "; a few runs dominate, so the value is probably too low and the error "
      << "underestimated: raise ais_steps (or ais_sweeps)";
    out.warnings.push_back(w.str());
  }
  out.seconds = seconds_since(t0);
}

}  // namespace spinfer::detail
