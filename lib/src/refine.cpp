// Boltzmann learning: moment matching with sampled (persistent chains) or exact expectations.
// Formulas and choices are documented in refine.hpp.
#include "spinfer/refine.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <deque>
#include <limits>
#include <sstream>

#include "checkpoint_state.hpp"
#include "refine_state.hpp"
#include "spinfer/bootstrap.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/sampler.hpp"
#include "spinfer/stats.hpp"
#include "spinfer/threads.hpp"
#include "spinfer/version.hpp"

namespace spinfer {
namespace {

using Clock = std::chrono::steady_clock;

double seconds_since(Clock::time_point t0) {
  return std::chrono::duration<double>(Clock::now() - t0).count();
}

/// Seed of one sampling call: (seed, iteration, call) mixed through splitmix64.
std::uint64_t call_seed(std::uint64_t seed, std::uint64_t iteration, std::uint64_t call) {
  std::uint64_t x = seed;
  std::uint64_t a = splitmix64(x) ^ (iteration * 0x9e3779b97f4a7c15ULL);
  a = splitmix64(a) ^ (call * 0xd1b54a32d192ed03ULL);
  return splitmix64(a);
}

void check_options(const RefineOptions& o) {
  auto bad = [](const std::string& what) { throw InputError("refine: " + what); };
  if (o.expectations != "auto" && o.expectations != "exact" && o.expectations != "sampled")
    bad("expectations must be \"auto\", \"exact\" or \"sampled\", got \"" + o.expectations + "\"");
  if (o.noise != "bootstrap" && o.noise != "iid")
    bad("noise must be \"bootstrap\" or \"iid\", got \"" + o.noise + "\"");
  if (o.preconditioner != "auto" && o.preconditioner != "full" && o.preconditioner != "diagonal" &&
      o.preconditioner != "none")
    bad("preconditioner must be \"auto\", \"full\", \"diagonal\" or \"none\", got \"" +
        o.preconditioner + "\"");
  if (o.sampler != "gibbs" && o.sampler != "metropolis")
    bad("sampler must be \"gibbs\" or \"metropolis\", got \"" + o.sampler + "\"");
  if (!(o.l2 >= 0) || !std::isfinite(o.l2)) bad("l2 must be finite and >= 0");
  if (o.max_iterations < 1) bad("max_iterations must be >= 1");
  if (!(o.max_seconds >= 0) || !std::isfinite(o.max_seconds)) bad("max_seconds must be >= 0 (0 = no limit)");
  if (!(o.threshold > 0) || !std::isfinite(o.threshold)) bad("threshold must be positive");
  if (o.bootstrap_replicates < 2) bad("bootstrap_replicates must be >= 2");
  if (o.block_length < 0) bad("block_length must be >= 0 (0 = automatic)");
  if (!(o.learning_rate > 0) || !std::isfinite(o.learning_rate)) bad("learning_rate must be positive");
  if (!(o.momentum >= 0) || !(o.momentum < 1)) bad("momentum must be in [0, 1)");
  if (o.samples < 0) bad("samples must be >= 0 (0 = automatic)");
  if (o.chains < 2) bad("chains must be >= 2 (the Monte Carlo error comes from their spread)");
  if (o.sweeps_between_samples < 1) bad("sweeps_between_samples must be >= 1");
  if (o.burn_in < 0) bad("burn_in must be >= 0");
  if (!(o.monte_carlo_ratio > 0) || !std::isfinite(o.monte_carlo_ratio)) bad("monte_carlo_ratio must be positive");
  if (o.max_check_samples < 0) bad("max_check_samples must be >= 0 (0 = automatic)");
  if (o.patience < 1) bad("patience must be >= 1");
  if (!(o.max_step > 0)) bad("max_step must be positive");
  if (!(o.exact_tolerance > 0)) bad("exact_tolerance must be positive");
  checkpoint::check_hooks(o.checkpoint, "refine");
}

/// The data side: spin moments and their noise.
struct Target {
  Eigen::VectorXd m;        // <s_i>
  Eigen::MatrixXd c;        // <s_i s_j>
  Eigen::VectorXd sigma_m;
  Eigen::MatrixXd sigma_c;
};

/// Errors of model moments against the data; se_* are Monte Carlo errors (null for exact).
struct Errors {
  double eps_m = 0, eps_c = 0, deb_m = 0, deb_c = 0, z_m = 0, z_c = 0, mc_ratio = 0;
};

Errors compare(const Target& d, const Eigen::VectorXd& mm, const Eigen::MatrixXd& mc,
               const Eigen::VectorXd* se_m, const Eigen::MatrixXd* se_c) {
  const std::int64_t N = d.m.size();
  Errors e;
  double sm = 0, sc = 0, bm = 0, bc = 0;
  for (std::int64_t i = 0; i < N; ++i) {
    const double z = (mm(i) - d.m(i)) / d.sigma_m(i);
    sm += z * z;
    e.z_m = std::max(e.z_m, std::abs(z));
    if (se_m) bm += std::pow((*se_m)(i) / d.sigma_m(i), 2);
  }
  const double pairs = double(N) * double(N - 1) / 2.0;
  for (std::int64_t j = 1; j < N; ++j)
    for (std::int64_t i = 0; i < j; ++i) {
      const double z = (mc(i, j) - d.c(i, j)) / d.sigma_c(i, j);
      sc += z * z;
      e.z_c = std::max(e.z_c, std::abs(z));
      if (se_c) bc += std::pow((*se_c)(i, j) / d.sigma_c(i, j), 2);
    }
  sm /= double(N);
  bm /= double(N);
  sc = pairs > 0 ? sc / pairs : 0.0;
  bc = pairs > 0 ? bc / pairs : 0.0;
  e.eps_m = std::sqrt(sm);
  e.eps_c = std::sqrt(sc);
  e.deb_m = std::sqrt(std::max(0.0, sm - bm));
  e.deb_c = std::sqrt(std::max(0.0, sc - bc));
  e.mc_ratio = (se_m || se_c) ? std::sqrt((bm * double(N) + bc * pairs) / (double(N) + pairs)) : 0.0;
  return e;
}

Target data_target(const SpinMatrix& data, const RefineOptions& o, RefineResult& res) {
  StatsOptions so;
  so.threads = o.threads;
  const Moments mo = compute_moments(data, Convention::spin, so);
  Target t;
  t.m = mo.mean;
  t.c = mo.second;
  const std::int64_t N = data.cols();
  // Effective number of samples: rows, or Kish's (sum w)^2 / sum w^2 for weighted data.
  double B = double(data.rows());
  if (data.weighted()) {
    double s1 = 0, s2 = 0;
    for (double w : data.weights()) {
      s1 += w;
      s2 += w * w;
    }
    B = s2 > 0 ? s1 * s1 / s2 : 1.0;
  }
  if (o.noise == "iid") {
    // iid noise (Cocco & Monasson 2011): sigma^2 = (1 - m^2) / B and (1 - c^2) / B
    t.sigma_m = ((1.0 - t.m.array().square()).max(0.0) / B).sqrt();
    t.sigma_c = ((1.0 - t.c.array().square()).max(0.0) / B).sqrt();
  } else {
    BlockBootstrapOptions bo;
    bo.replicates = o.bootstrap_replicates;
    bo.block_length = o.block_length;
    bo.seed = o.seed;
    bo.threads = o.threads;
    if (o.progress) {
      bo.progress = [&o](const Progress& p) {
        Progress q = p;
        q.stage = "boltzmann learning (data noise)";
        return o.progress(q);
      };
    }
    const DataNoise dn = bootstrap_noise(data, Convention::spin, {}, bo);
    t.sigma_m = dn.mean_se;
    t.sigma_c = dn.second_se;
    res.block_length = dn.block_length;
  }
  const double floor = 1.0 / B;
  t.sigma_m = t.sigma_m.cwiseMax(floor);
  t.sigma_c = t.sigma_c.cwiseMax(floor);
  res.mean_sigma = t.sigma_m;
  res.correlation_sigma = t.sigma_c;
  res.noise = o.noise;

  // A pair missing one of its four joint states has an infinite maximum-likelihood coupling.
  if (o.l2 == 0) {
    std::vector<std::string> pairs;
    std::int64_t count = 0;
    for (std::int64_t j = 1; j < N; ++j)
      for (std::int64_t i = 0; i < j; ++i) {
        const double a = t.m(i), b = t.m(j), c = t.c(i, j);
        const double p[4] = {1 + a + b + c, 1 + a - b - c, 1 - a + b - c, 1 - a - b + c};
        if (*std::min_element(p, p + 4) <= 1e-12) {
          if (++count <= 5) pairs.push_back(data.name(i) + " & " + data.name(j));
        }
      }
    if (count > 0) {
      std::ostringstream w;
      w << count << " pair(s) of units never show one of their four joint states (";
      for (std::size_t k = 0; k < pairs.size(); ++k) w << (k ? "; " : "") << pairs[k];
      w << (count > 5 ? "; ..." : "")
        << "): their maximum-likelihood couplings are infinite; set l2 > 0 for finite ones";
      res.warnings.push_back(w.str());
    }
  }
  return t;
}

using Params = detail::RefineParams;
using detail::RefineLoop;

IsingModel spin_model(const Params& p) {
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = p.h;
  m.couplings = p.J;
  return m;
}

void require_finite(const Params& p, std::int64_t iteration) {
  if (!p.h.allFinite() || !p.J.allFinite() || p.h.cwiseAbs().maxCoeff() > 1e6 ||
      (p.J.size() > 0 && p.J.cwiseAbs().maxCoeff() > 1e6))
    throw NumericalError("refine: the parameters diverged at iteration " + std::to_string(iteration) +
                         "; lower learning_rate or momentum, or set l2 > 0");
}

/// The gradient of L: g_h = m^D - <s>, g_J = c^D - <ss> - l2 J (zero diagonal).
void gradient(const Target& d, const Params& p, const Eigen::VectorXd& mm, const Eigen::MatrixXd& mc,
              double l2, Eigen::VectorXd& gh, Eigen::MatrixXd& gJ) {
  gh = d.m - mm;
  gJ = d.c - mc - l2 * p.J;
  gJ.diagonal().setZero();
}

double max_abs(const Eigen::VectorXd& gh, const Eigen::MatrixXd& gJ) {
  double g = gh.size() ? gh.cwiseAbs().maxCoeff() : 0.0;
  if (gJ.size()) g = std::max(g, gJ.cwiseAbs().maxCoeff());
  return g;
}

// ---- sampled expectations ---------------------------------------------------------------------

/// Model moments from persistent chains with batch-means errors.
struct SampledMoments {
  Eigen::VectorXd mean, mean_se;
  Eigen::MatrixXd second, second_se;
  std::int64_t samples = 0;
};

/// Welford accumulator of per-batch values (one flat vector per batch).
class Welford {
 public:
  void add(const Eigen::VectorXd& x) {
    if (n_ == 0) {
      mean_ = Eigen::VectorXd::Zero(x.size());
      m2_ = Eigen::VectorXd::Zero(x.size());
    }
    ++n_;
    const Eigen::VectorXd delta = x - mean_;
    mean_ += delta / double(n_);
    m2_ += delta.cwiseProduct(x - mean_);
  }
  const Eigen::VectorXd& mean() const { return mean_; }
  Eigen::VectorXd error() const { return (m2_ / double(n_ - 1) / double(n_)).cwiseMax(0.0).cwiseSqrt(); }

 private:
  std::int64_t n_ = 0;
  Eigen::VectorXd mean_, m2_;
};

class ChainSampler {
 public:
  ChainSampler(std::int64_t units, const RefineOptions& o, Clock::time_point t0)
      : N_(units), o_(o), t0_(t0),
        batches_per_chain_(std::max<std::int64_t>(1, (32 + o.chains - 1) / o.chains)) {}

  /// Multiple of chains x batches that is >= n.
  std::int64_t round_up(std::int64_t n) const {
    const std::int64_t unit = o_.chains * batches_per_chain_;
    return std::max<std::int64_t>(1, (n + unit - 1) / unit) * unit;
  }

  void burn_in(const Params& p) {
    SamplerOptions so = options(call_seed(o_.seed, 0, 0));
    so.burn_in = o_.burn_in;
    so.samples = o_.chains;
    continue_chains(spin_model(p), states_, so);
  }

  /// The persistent chains (chains x units, 1 = +1), for checkpoints.
  const std::vector<std::uint8_t>& states() const { return states_.active; }
  void set_states(std::vector<std::uint8_t> active) {
    states_.chains = o_.chains;
    states_.units = N_;
    states_.active = std::move(active);
  }

  SampledMoments run(const Params& p, std::int64_t samples, std::int64_t iteration) {
    const std::int64_t unit = o_.chains * batches_per_chain_;
    // Calls of at most ~2e7 stored bytes, all of equal size so every batch has the same length.
    const std::int64_t per_call_cap = std::max<std::int64_t>(unit, 20000000 / std::max<std::int64_t>(1, N_));
    const std::int64_t calls = (samples + per_call_cap - 1) / per_call_cap;
    const std::int64_t per_call = round_up((samples + calls - 1) / calls);
    const IsingModel model = spin_model(p);
    Welford acc;
    StatsOptions st;
    st.threads = o_.threads;
    const std::int64_t batch = per_call / unit;
    Eigen::VectorXd flat(N_ + N_ * N_);
    for (std::int64_t k = 0; k < calls; ++k) {
      SamplerOptions so = options(call_seed(o_.seed, std::uint64_t(iteration), std::uint64_t(k)));
      so.burn_in = 0;
      so.samples = per_call;
      const SampleSet set = continue_chains(model, states_, so);
      // Rows come chain by chain, per_call / chains each: cut into equal consecutive batches.
      for (std::int64_t b = 0; b < unit; ++b) {
        const SpinMatrix view = SpinMatrix::view(set.samples.row(b * batch), batch, N_,
                                                 Convention::spin, nullptr, true);
        const Moments mo = compute_moments(view, Convention::spin, st);
        flat.head(N_) = mo.mean;
        flat.tail(N_ * N_) = Eigen::Map<const Eigen::VectorXd>(mo.second.data(), N_ * N_);
        acc.add(flat);
      }
    }
    SampledMoments out;
    out.samples = calls * per_call;
    const Eigen::VectorXd err = acc.error();
    out.mean = acc.mean().head(N_);
    out.mean_se = err.head(N_);
    out.second = Eigen::Map<const Eigen::MatrixXd>(acc.mean().data() + N_, N_, N_);
    out.second_se = Eigen::Map<const Eigen::MatrixXd>(err.data() + N_, N_, N_);
    return out;
  }

 private:
  SamplerOptions options(std::uint64_t seed) const {
    SamplerOptions so;
    so.method = o_.sampler;
    so.chains = o_.chains;
    so.thin = o_.sweeps_between_samples;
    so.seed = seed;
    so.threads = o_.threads;
    so.storage = "dense";
    if (o_.progress) {
      const ProgressCallback user = o_.progress;
      const Clock::time_point t0 = t0_;
      so.progress = [user, t0](const Progress& p) {
        Progress q = p;
        q.stage = "boltzmann learning (sampling)";
        q.elapsed_s = seconds_since(t0);
        return user(q);
      };
    }
    return so;
  }

  std::int64_t N_;
  const RefineOptions& o_;
  Clock::time_point t0_;
  std::int64_t batches_per_chain_;
  ChainStates states_;
};

/// Pairs ordered (0,1), (0,2), (1,2), (0,3), ...
std::int64_t pair_index(std::int64_t i, std::int64_t j) { return j * (j - 1) / 2 + i; }

/// The data covariance chi_D of the sufficient statistics f = (s_i, s_i s_j for i < j), as a
/// matrix (P x P) or through products chi_D v, in passes over chunks of rows (weighted).
class DataCovariance {
 public:
  DataCovariance(const SpinMatrix& data, const Target& d) : data_(data), N_(data.cols()) {
    mu_ = Eigen::VectorXd(N_ + N_ * (N_ - 1) / 2);
    mu_.head(N_) = d.m;
    for (std::int64_t j = 1; j < N_; ++j)
      for (std::int64_t i = 0; i < j; ++i) mu_(N_ + pair_index(i, j)) = d.c(i, j);
  }

  Eigen::MatrixXd matrix() const {
    const std::int64_t P = mu_.size();
    Eigen::MatrixXd out = Eigen::MatrixXd::Zero(P, P);
    Eigen::MatrixXd F;
    for_chunks(data_.rows(), [&](const Eigen::MatrixXd& X, const Eigen::VectorXd& w) {
      F.resize(X.rows(), P);
      F.leftCols(N_) = X;
      for (std::int64_t j = 1; j < N_; ++j)
        for (std::int64_t i = 0; i < j; ++i) F.col(N_ + pair_index(i, j)) = X.col(i).cwiseProduct(X.col(j));
      out.noalias() += F.transpose() * (w.asDiagonal() * F);
    });
    return out / data_.total_weight() - mu_ * mu_.transpose();
  }

  /// chi_D v for v = (v_h, V) with V symmetric, zero diagonal; the result in the same layout.
  void multiply(const Eigen::VectorXd& vh, const Eigen::MatrixXd& V, std::int64_t max_rows,
                Eigen::VectorXd& out_h, Eigen::MatrixXd& out_J) const {
    out_h = Eigen::VectorXd::Zero(N_);
    out_J = Eigen::MatrixXd::Zero(N_, N_);
    double total = 0;
    for_chunks(std::min(max_rows, data_.rows()), [&](const Eigen::MatrixXd& X, const Eigen::VectorXd& w) {
      // f_t . v = s_t . v_h + 1/2 s_t^T V s_t
      const Eigen::VectorXd proj = X * vh + 0.5 * (X * V).cwiseProduct(X).rowwise().sum();
      const Eigen::VectorXd wp = w.cwiseProduct(proj);
      out_h.noalias() += X.transpose() * wp;
      out_J.noalias() += X.transpose() * (wp.asDiagonal() * X);
      total += w.sum();
    });
    out_h /= total;
    out_J /= total;
    double mv = mu_.head(N_).dot(vh);
    for (std::int64_t j = 1; j < N_; ++j)
      for (std::int64_t i = 0; i < j; ++i) mv += mu_(N_ + pair_index(i, j)) * V(i, j);
    out_h -= mv * mu_.head(N_);
    for (std::int64_t j = 1; j < N_; ++j)
      for (std::int64_t i = 0; i < j; ++i) out_J(i, j) = out_J(j, i) = out_J(i, j) - mv * mu_(N_ + pair_index(i, j));
    out_J.diagonal().setZero();
  }

 private:
  template <typename Fn>
  void for_chunks(std::int64_t rows, Fn&& fn) const {
    const std::int64_t chunk = 4096;
    Eigen::MatrixXd X;
    Eigen::VectorXd w;
    for (std::int64_t b = 0; b < rows; b += chunk) {
      const std::int64_t n = std::min(chunk, rows - b);
      X.resize(n, N_);
      w.resize(n);
      for (std::int64_t r = 0; r < n; ++r) {
        const std::uint8_t* row = data_.row(b + r);
        for (std::int64_t i = 0; i < N_; ++i) X(r, i) = row[i] ? 1.0 : -1.0;
        w(r) = data_.weight(b + r);
      }
      fn(X, w);
    }
  }

  const SpinMatrix& data_;
  std::int64_t N_;
  Eigen::VectorXd mu_;
};

/// Step directions from gradients (refine.hpp): "full" solves chi_D delta = g; "diagonal" works
/// in centred coordinates with the data's connected correlations for the fields and the data
/// variance of d_i d_j for each coupling; "none" is the plain gradient. `scale` multiplies the
/// direction so that the largest eigenvalue of (preconditioner^-1 chi_D) is 1.
struct Preconditioner {
  std::string kind;
  Eigen::LDLT<Eigen::MatrixXd> full;    // of chi_D (P x P)
  Eigen::LDLT<Eigen::MatrixXd> fields;  // of the data's connected correlations C^D (N x N)
  Eigen::MatrixXd vJ;                   // Var_D(d_i d_j)
  double scale = 1;
  double largest_eigenvalue = 1;
};

void apply(const Preconditioner& pc, const Target& d, const Eigen::VectorXd& gh,
           const Eigen::MatrixXd& gJ, Eigen::VectorXd& dh, Eigen::MatrixXd& dJ) {
  const std::int64_t N = gh.size();
  if (pc.kind == "none") {
    dh = gh;
    dJ = gJ;
  } else if (pc.kind == "full") {
    Eigen::VectorXd g(N + N * (N - 1) / 2);
    g.head(N) = gh;
    for (std::int64_t j = 1; j < N; ++j)
      for (std::int64_t i = 0; i < j; ++i) g(N + pair_index(i, j)) = gJ(i, j);
    const Eigen::VectorXd x = pc.full.solve(g);
    dh = x.head(N);
    dJ = Eigen::MatrixXd::Zero(N, N);
    for (std::int64_t j = 1; j < N; ++j)
      for (std::int64_t i = 0; i < j; ++i) dJ(i, j) = dJ(j, i) = x(N + pair_index(i, j));
  } else {
    // Centred coordinates: g'_J,ij = g_J,ij - m_i g_h,j - m_j g_h,i; step there, then map back
    // with h_i = h'_i - sum_j J_ij m_j.
    const Eigen::MatrixXd gc = gJ - d.m * gh.transpose() - gh * d.m.transpose();
    dJ = gc.cwiseQuotient(pc.vJ);
    dJ.diagonal().setZero();
    dh = pc.fields.solve(gh) - dJ * d.m;
  }
  dh *= pc.scale;
  dJ *= pc.scale;
}

Preconditioner make_preconditioner(const SpinMatrix& data, const Target& d, const RefineOptions& o) {
  const std::int64_t N = d.m.size(), P = N + N * (N - 1) / 2;
  Preconditioner p;
  p.kind = o.preconditioner;
  if (p.kind == "auto") p.kind = P <= 1300 ? "full" : "diagonal";
  const DataCovariance chi(data, d);
  if (p.kind == "full") {
    Eigen::MatrixXd M = chi.matrix();
    // A tiny ridge keeps exactly dependent statistics (duplicated units) solvable.
    M.diagonal().array() += 1e-9 * M.diagonal().maxCoeff();
    p.full.compute(M);
    return p;  // preconditioner = chi_D: every eigenvalue is 1
  }
  if (p.kind == "diagonal") {
    const Eigen::VectorXd vh = (1.0 - d.m.array().square()).matrix();
    Eigen::MatrixXd C = d.c - d.m * d.m.transpose();
    C.diagonal() = vh;
    C.diagonal().array() += 1e-9 * vh.maxCoeff();
    p.fields.compute(C);
    p.vJ = Eigen::MatrixXd::Ones(N, N);
    for (std::int64_t j = 0; j < N; ++j)
      for (std::int64_t i = 0; i < N; ++i) {
        if (i == j) continue;
        // d_i^2 = a_i + b_i s_i with a_i = 1 + m_i^2, b_i = -2 m_i, so <d_i^2 d_j^2> needs only
        // pair moments.
        const double mi = d.m(i), mj = d.m(j);
        const double ai = 1 + mi * mi, bi = -2 * mi, aj = 1 + mj * mj, bj = -2 * mj;
        const double fourth = ai * aj + ai * bj * mj + bi * aj * mi + bi * bj * d.c(i, j);
        const double conn = d.c(i, j) - mi * mj;
        // Never far below the independent-unit value (guards against a near-constant product).
        p.vJ(i, j) = std::max(fourth - conn * conn, 1e-3 * vh(i) * vh(j));
      }
  }
  // Largest eigenvalue of (preconditioner^-1 chi_D) by power iteration on a subsample of rows
  // (a bulk property; 30 products are ample for a step size).
  Eigen::VectorXd xh = Eigen::VectorXd::Ones(N), yh;
  Eigen::MatrixXd X = Eigen::MatrixXd::Ones(N, N), Y, zJ;
  X.diagonal().setZero();
  double lambda = 1;
  for (int k = 0; k < 30; ++k) {
    const double norm = std::sqrt(xh.squaredNorm() + 0.5 * X.squaredNorm());
    xh /= norm;
    X /= norm;
    chi.multiply(xh, X, 50000, yh, Y);
    apply(p, d, yh, Y, xh, zJ);
    X = zJ;
    lambda = std::sqrt(xh.squaredNorm() + 0.5 * X.squaredNorm());
  }
  p.largest_eigenvalue = lambda;
  p.scale = lambda > 0 && std::isfinite(lambda) ? 1.0 / lambda : 1.0;
  return p;
}

void record(RefineResult& res, std::int64_t t, const Errors& e, double max_grad,
            std::int64_t samples, double rate, bool check) {
  RefineIteration it;
  it.iteration = t;
  it.epsilon_mean = e.eps_m;
  it.epsilon_correlation = e.eps_c;
  it.debiased_epsilon_mean = e.deb_m;
  it.debiased_epsilon_correlation = e.deb_c;
  it.max_z_mean = e.z_m;
  it.max_z_correlation = e.z_c;
  it.monte_carlo_ratio = e.mc_ratio;
  it.max_gradient = max_grad;
  it.samples = samples;
  it.learning_rate = rate;
  it.check = check;
  res.trajectory.push_back(it);
  res.iterations = t;
  res.epsilon_mean = e.eps_m;
  res.epsilon_correlation = e.eps_c;
  res.max_z_mean = e.z_m;
  res.max_z_correlation = e.z_c;
  res.monte_carlo_ratio = e.mc_ratio;
  res.max_gradient = max_grad;
}

void report(const RefineOptions& o, std::int64_t t, double objective, Clock::time_point t0) {
  if (!o.progress) return;
  Progress p;
  p.stage = "boltzmann learning";
  p.done = t;
  p.total = o.max_iterations;
  p.objective = objective;
  p.elapsed_s = seconds_since(t0);
  if (!o.progress(p)) throw Interrupted("refine: interrupted at iteration " + std::to_string(t));
}

/// Hands the loop state to the checkpoint hooks (refine.hpp, "Checkpoints").
class Saver {
 public:
  Saver(const RefineOptions& o, bool sampled, std::int64_t units, Clock::time_point t0)
      : o_(o), sampled_(sampled), units_(units), t0_(t0), clock_(o.checkpoint) {}
  /// At the top of iteration loop.iteration: saves when every_seconds have passed.
  void maybe(const RefineLoop& loop, const RefineResult& res) {
    if (clock_.due()) now(loop, res);
  }
  /// Just before an Interrupted propagates (loop as at the top of the interrupted iteration).
  void now(const RefineLoop& loop, const RefineResult& res) {
    if (clock_.enabled())
      clock_.save(detail::refine_state(loop, sampled_, units_, o_, seconds_since(t0_), res.trajectory, res.warnings));
  }

 private:
  const RefineOptions& o_;
  bool sampled_;
  std::int64_t units_;
  Clock::time_point t0_;
  checkpoint::SaveClock clock_;
};

/// Continues `loop` (a saved state, or a fresh one holding the start parameters).
Params run_sampled(const SpinMatrix& data, const Target& d, RefineLoop& loop, const RefineOptions& o,
                   RefineResult& res, Clock::time_point t0) {
  const std::int64_t N = d.m.size();
  ChainSampler sampler(N, o, t0);
  const Preconditioner pc = make_preconditioner(data, d, o);
  res.preconditioner = pc.kind;
  res.step_scale = pc.scale;
  const std::int64_t S_min = sampler.round_up(o.samples > 0 ? o.samples : std::max<std::int64_t>(1000, 20 * N));
  const std::int64_t S_max =
      sampler.round_up(std::max(S_min, o.max_check_samples > 0 ? o.max_check_samples
                                                               : std::int64_t(1e8 / double(N))));
  res.samples_per_iteration = S_min;
  const bool resumed = loop.started;
  if (resumed) {
    sampler.set_states(std::move(loop.chains));
    res.trajectory = std::move(loop.trajectory);
    res.warnings = std::move(loop.warnings);
  } else {
    sampler.burn_in(loop.p);  // an interruption here is saved by the caller as "not started"
    loop.started = true;
    loop.iteration = 1;
    loop.samples = S_min;
    loop.rate = o.learning_rate;
    loop.vh = Eigen::VectorXd::Zero(N);
    loop.vJ = Eigen::MatrixXd::Zero(N, N);
  }
  // Short names for the loop state (all of it lives in `loop`, so a checkpoint sees it).
  Params& p = loop.p;
  std::int64_t& S = loop.samples;
  double& rate = loop.rate;
  Eigen::VectorXd& vh = loop.vh;
  Eigen::MatrixXd& vJ = loop.vJ;
  auto& window = loop.window;
  double& best = loop.best;
  std::int64_t& since_best = loop.since_best;
  Eigen::VectorXd gh, dh;
  Eigen::MatrixXd gJ, dJ;
  Saver saver(o, true, N, t0);
  Params evaluated = p;
  res.stop_reason = "iterations";
  const std::int64_t first = loop.iteration;
  for (; loop.iteration <= o.max_iterations; ++loop.iteration) {
    const std::int64_t t = loop.iteration;
    // A consistent point. Until the evaluation below has been reported (where Interrupted comes
    // from), only the chains change, so `loop` with the chains copied here is this point's state.
    loop.chains = sampler.states();
    if (t > first || !resumed) saver.maybe(loop, res);
    Errors e;
    double worst = 0;
    bool below = false;
    try {
      const SampledMoments sm = sampler.run(p, S, t);
      evaluated = p;
      e = compare(d, sm.mean, sm.second, &sm.mean_se, &sm.second_se);
      gradient(d, p, sm.mean, sm.second, o.l2, gh, gJ);
      worst = std::max(e.eps_m, e.eps_c);
      below = worst < o.threshold;
      record(res, t, e, max_abs(gh, gJ), sm.samples, rate, below && e.mc_ratio <= o.monte_carlo_ratio);
      report(o, t, std::hypot(e.eps_m, e.eps_c), t0);
    } catch (const Interrupted&) {
      saver.now(loop, res);
      throw;
    }
    if (below && e.mc_ratio <= o.monte_carlo_ratio) {  // matched within noise, reliably measured
      res.converged = true;
      res.stop_reason = "converged";
      break;
    }
    if (o.max_seconds > 0 && seconds_since(t0) > o.max_seconds) {
      res.stop_reason = "time";
      break;
    }
    if (t == o.max_iterations) break;

    // Samples for the next iteration: Monte Carlo error at most half the current error (so the
    // gradient's direction is mostly signal and the parameters' jitter stays below the error), and
    // at most monte_carlo_ratio once the error is below the threshold (that evaluation is the
    // stopping check). The ratio scales as 1/sqrt(samples).
    const double wanted = below ? o.monte_carlo_ratio : std::max(o.monte_carlo_ratio, 0.5 * worst);
    if (e.mc_ratio > 0 && std::isfinite(e.mc_ratio)) {
      const double factor = std::clamp(std::pow(e.mc_ratio / wanted, 2) * 1.1, 0.5, below ? 1e6 : 4.0);
      S = sampler.round_up(std::clamp<std::int64_t>(std::int64_t(double(S) * factor), S_min, S_max));
    }

    // Safeguard: a jump in the error sends the parameters back and halves the learning rate.
    // Only errors measured with Monte Carlo noise below half their size take part.
    const double err2 = e.eps_m * e.eps_m + e.eps_c * e.eps_c;
    const bool reliable = e.mc_ratio <= 0.5 * worst;
    if (reliable && !window.empty()) {
      const auto lowest = std::min_element(window.begin(), window.end(),
                                           [](const auto& a, const auto& b) { return a.first < b.first; });
      if (err2 > 4.0 * lowest->first && worst > 2.0 * o.threshold) {
        p = lowest->second;
        rate *= 0.5;
        vh.setZero();
        vJ.setZero();
        window.clear();
        res.warnings.push_back("iteration " + std::to_string(t) +
                               ": the error jumped; parameters reset and learning rate halved to " +
                               std::to_string(rate));
        continue;
      }
    }
    if (reliable) {
      window.emplace_back(err2, p);
      if (window.size() > 5) window.pop_front();
    }
    // Stalled above the threshold: smaller steps average the gradient noise over more iterations.
    if (err2 < 0.81 * best) {
      best = err2;
      since_best = 0;
    } else if (++since_best >= o.patience) {
      rate *= 0.5;
      since_best = 0;
      best = err2;
    }
    apply(pc, d, gh, gJ, dh, dJ);
    vh = o.momentum * vh + rate * dh;
    vJ = o.momentum * vJ + rate * dJ;
    // Far from the optimum chi_D is a poor curvature model: no parameter moves more than
    // max_step per iteration.
    const double largest = std::max(vh.cwiseAbs().maxCoeff(), vJ.cwiseAbs().maxCoeff());
    if (largest > o.max_step) {
      vh *= o.max_step / largest;
      vJ *= o.max_step / largest;
    }
    p.h += vh;
    p.J += vJ;
    require_finite(p, t);
  }
  res.final_samples_per_iteration = S;
  return evaluated;
}

// ---- exact expectations -------------------------------------------------------------------------

struct ExactTerms {
  double log_z = 0;
  Eigen::VectorXd mean;     // <s_i>
  Eigen::MatrixXd second;   // <s_i s_j>
  Eigen::MatrixXd fisher;   // covariance of (s_i, s_i s_j for i<j), P x P
};


/// `o.progress` is called after every chunk of states (N = 20 takes tens of seconds).
ExactTerms exact_terms(const Params& p, int threads, const RefineOptions& o, Clock::time_point t0) {
  const std::int64_t N = p.h.size(), P = N + N * (N - 1) / 2;
  const IsingModel model = spin_model(p);
  const Eigen::VectorXd prob = exact_state_probabilities(model, 1.0, threads);
  ExactTerms x;
  x.log_z = exact_log_partition(model, 1.0, threads);
  Eigen::VectorXd mean = Eigen::VectorXd::Zero(P);
  Eigen::MatrixXd outer = Eigen::MatrixXd::Zero(P, P);
  const std::int64_t states = prob.size(), chunk = 4096;
  Eigen::MatrixXd F(std::min(chunk, states), P);
  for (std::int64_t begin = 0; begin < states; begin += chunk) {
    const std::int64_t rows = std::min(chunk, states - begin);
    for (std::int64_t r = 0; r < rows; ++r) {
      const std::uint64_t k = std::uint64_t(begin + r);
      for (std::int64_t i = 0; i < N; ++i) F(r, i) = (k >> i) & 1 ? 1.0 : -1.0;
      for (std::int64_t j = 1; j < N; ++j)
        for (std::int64_t i = 0; i < j; ++i) F(r, N + pair_index(i, j)) = F(r, i) * F(r, j);
    }
    const auto Fr = F.topRows(rows);
    const auto w = prob.segment(begin, rows);
    mean.noalias() += Fr.transpose() * w;
    const Eigen::MatrixXd WF = w.asDiagonal() * Fr;
    outer.noalias() += Fr.transpose() * WF;
    if (o.progress) {
      Progress q;
      q.stage = "boltzmann learning (exact expectations)";
      q.done = begin + rows;
      q.total = states;
      q.elapsed_s = seconds_since(t0);
      if (!o.progress(q)) throw Interrupted("refine: interrupted during the exact expectations");
    }
  }
  x.fisher = outer - mean * mean.transpose();
  x.mean = mean.head(N);
  x.second = Eigen::MatrixXd::Ones(N, N);
  for (std::int64_t j = 1; j < N; ++j)
    for (std::int64_t i = 0; i < j; ++i) x.second(i, j) = x.second(j, i) = mean(N + pair_index(i, j));
  return x;
}

/// L(theta) (refine.hpp) given log Z.
double objective(const Target& d, const Params& p, double log_z, double l2) {
  double L = p.h.dot(d.m) - log_z;
  const std::int64_t N = p.h.size();
  for (std::int64_t j = 1; j < N; ++j)
    for (std::int64_t i = 0; i < j; ++i) L += p.J(i, j) * d.c(i, j) - 0.5 * l2 * p.J(i, j) * p.J(i, j);
  return L;
}

/// Continues `loop` (a saved state, or a fresh one holding the start parameters).
Params run_exact(const Target& d, RefineLoop& loop, const RefineOptions& o, RefineResult& res,
                 Clock::time_point t0) {
  const std::int64_t N = d.m.size(), P = N + N * (N - 1) / 2;
  const int threads = resolve_threads(o.threads);
  const bool resumed = loop.started;
  if (resumed) {
    res.trajectory = std::move(loop.trajectory);
    res.warnings = std::move(loop.warnings);
  } else {
    loop.started = true;
    loop.iteration = 1;
  }
  Params& p = loop.p;
  Saver saver(o, false, N, t0);
  Eigen::VectorXd gh;
  Eigen::MatrixXd gJ;
  res.stop_reason = "iterations";
  const std::int64_t first = loop.iteration;
  for (; loop.iteration <= o.max_iterations; ++loop.iteration) {
    const std::int64_t t = loop.iteration;
    // A consistent point: `p` only changes after the report below.
    if (t > first || !resumed) saver.maybe(loop, res);
    ExactTerms x;
    double L = 0, gmax = 0;
    try {
      x = exact_terms(p, threads, o, t0);
      L = objective(d, p, x.log_z, o.l2);
      const Errors e = compare(d, x.mean, x.second, nullptr, nullptr);
      gradient(d, p, x.mean, x.second, o.l2, gh, gJ);
      gmax = max_abs(gh, gJ);
      record(res, t, e, gmax, 0, 0.0, false);
      res.log_likelihood = L + 0.25 * o.l2 * p.J.squaredNorm();  // without the penalty
      report(o, t, -L, t0);
    } catch (const Interrupted&) {
      saver.now(loop, res);
      throw;
    }
    if (gmax <= o.exact_tolerance) {
      res.converged = true;
      res.stop_reason = "converged";
      break;
    }
    if (o.max_seconds > 0 && seconds_since(t0) > o.max_seconds) {
      res.stop_reason = "time";
      break;
    }
    if (t == o.max_iterations) break;

    // Newton step on the concave L: (F + l2 on the couplings) delta = gradient.
    Eigen::VectorXd g(P);
    g.head(N) = gh;
    Eigen::MatrixXd H = x.fisher;
    for (std::int64_t j = 1; j < N; ++j)
      for (std::int64_t i = 0; i < j; ++i) {
        const std::int64_t k = N + pair_index(i, j);
        g(k) = gJ(i, j);
        H(k, k) += o.l2;
      }
    Eigen::LDLT<Eigen::MatrixXd> ldlt(H);
    Eigen::VectorXd delta = ldlt.solve(g);
    if (ldlt.info() != Eigen::Success || !delta.allFinite()) {
      // A (numerically) singular Fisher matrix: a small ridge keeps the step finite.
      const double ridge = 1e-10 * std::max(1.0, H.diagonal().maxCoeff());
      delta = (H + ridge * Eigen::MatrixXd::Identity(P, P)).ldlt().solve(g);
    }
    const double largest = delta.cwiseAbs().maxCoeff();
    if (largest > 1.0) delta /= largest;  // at most 1 in any parameter per step
    bool accepted = false;
    for (int halving = 0; halving < 40 && !accepted; ++halving) {
      const double alpha = std::ldexp(1.0, -halving);
      Params q = p;
      q.h += alpha * delta.head(N);
      for (std::int64_t j = 1; j < N; ++j)
        for (std::int64_t i = 0; i < j; ++i) {
          const double v = alpha * delta(N + pair_index(i, j));
          q.J(i, j) += v;
          q.J(j, i) += v;
        }
      const double Lq = objective(d, q, exact_log_partition(spin_model(q), 1.0, threads), o.l2);
      // Near the optimum the change in L is below rounding; the Newton step is then taken as is.
      if (Lq >= L - 1e-13 * (1.0 + std::abs(L))) {
        p = q;
        accepted = true;
      }
    }
    if (!accepted) {
      res.stop_reason = "line search";
      break;
    }
    require_finite(p, t);
  }
  return p;
}

}  // namespace

RefineResult refine_moments(const SpinMatrix& data, const IsingModel& start, const RefineOptions& o) {
  auto t0 = Clock::now();
  check_options(o);
  validate_model(start, "start model");
  const std::int64_t N = data.cols();
  if (N < 1) throw InputError("refine: the data have no units");
  if (data.rows() < 2) throw InputError("refine: the data need at least 2 samples");
  if (start.size() != N)
    throw InputError("refine: the start model has " + std::to_string(start.size()) +
                     " units but the data have " + std::to_string(N));
  require_no_constant_units(data, "refine data");
  const bool exact = o.expectations == "exact" || (o.expectations == "auto" && N <= 16);
  if (exact && N > 20)
    throw InputError("refine: exact expectations need N <= 20 units (the data have " +
                     std::to_string(N) + "); use expectations = \"sampled\"");

  RefineLoop loop;
  if (o.checkpoint.resume) {
    loop = detail::read_refine_state(*o.checkpoint.resume, !exact, N, o);
    // The time budget and the reported seconds count the interrupted runs too.
    t0 -= std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(loop.elapsed_seconds));
  }
  if (!loop.started) {
    const IsingModel s = convert_model(start, Convention::spin);
    loop.p = Params{s.fields, s.couplings};
  }

  RefineResult res;
  res.expectations = exact ? "exact" : "sampled";
  Params fitted;
  try {
    const Target d = data_target(data, o, res);
    fitted = exact ? run_exact(d, loop, o, res, t0) : run_sampled(data, d, loop, o, res, t0);
  } catch (const Interrupted&) {
    // Stopped before the first consistent point (data noise, burn-in): the state says "nothing
    // done yet", so a resume starts afresh. Later interruptions were saved by the loops.
    if (!loop.started && o.checkpoint.save)
      o.checkpoint.save(detail::refine_state(RefineLoop{}, !exact, N, o, 0.0, {}, {}));
    throw;
  }

  IsingModel out = convert_model(spin_model(fitted), start.convention);
  out.names = !start.names.empty() ? start.names : data.names();
  Provenance& pv = out.provenance;
  pv.method = "boltzmann-learning";
  pv.l2 = o.l2;
  pv.iterations = res.iterations;
  pv.converged = res.converged;
  const double penalty = 0.25 * o.l2 * fitted.J.squaredNorm();  // (l2/2) sum_{i<j} J_ij^2
  pv.objective = exact ? -(res.log_likelihood - penalty) : std::hypot(res.epsilon_mean, res.epsilon_correlation);
  pv.samples = data.rows();
  pv.units = N;
  pv.seed = o.seed;
  pv.version = version();
  pv.extra = nlohmann::json::object();
  pv.extra["start_method"] = start.provenance.method.empty() ? "unknown" : start.provenance.method;
  pv.extra["expectations"] = res.expectations;
  pv.extra["noise"] = res.noise;
  pv.extra["threshold"] = o.threshold;
  pv.extra["epsilon_mean"] = res.epsilon_mean;
  pv.extra["epsilon_correlation"] = res.epsilon_correlation;
  pv.extra["stop_reason"] = res.stop_reason;
  if (!exact) {
    pv.extra["preconditioner"] = res.preconditioner;
    pv.extra["samples_per_iteration"] = res.samples_per_iteration;
    pv.extra["final_samples_per_iteration"] = res.final_samples_per_iteration;
    pv.extra["chains"] = o.chains;
    pv.extra["sampler"] = o.sampler;
    pv.extra["learning_rate"] = o.learning_rate;
    pv.extra["momentum"] = o.momentum;
  }
  res.model = std::move(out);
  res.seconds = seconds_since(t0);
  return res;
}

}  // namespace spinfer
