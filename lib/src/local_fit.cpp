#include "local_fit.hpp"

#include <lbfgs.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <exception>
#include <limits>

#include "spinfer/errors.hpp"
#include "spinfer/penalty_path.hpp"
#include "spinfer/pseudo_likelihood.hpp"
#include "spinfer/threads.hpp"
#include "spinfer/version.hpp"

namespace spinfer::detail {
namespace {

using Eigen::Index;
using Eigen::MatrixXd;
using Eigen::VectorXd;

// Parameter layout for liblbfgs (penalised couplings first, so OWL-QN's range is contiguous):
//   per-variable: [Theta (N x N, column-major, column i = couplings into unit i; diagonal kept
//                  at 0 with zero gradient), h (N)]
//   symmetric:    [J_ij for i < j packed row by row, h (N)]
class Problem {
 public:
  Problem(const LocalFields& fields, const LocalFitSettings& s)
      : f_(fields), s_(s), N_(fields.units()), W_(fields.total_weight()) {
    pairs_ = N_ * (N_ - 1) / 2;
    couplings_ = s.symmetric ? pairs_ : N_ * N_;
    theta_.setZero(N_, N_);
    h_.setZero(N_);
    if (!s.symmetric && s.l1 == 0 && s.loss == LocalLoss::pseudo_likelihood &&
        N_ <= kWhitenMaxUnits)
      build_whitening();
  }

  bool whitened() const { return !factors_.empty(); }

  Index size() const { return couplings_ + N_; }
  Index coupling_count() const { return couplings_; }
  // OWL-QN constant: the symmetric objective carries each pair's penalty twice.
  double owlqn_c() const { return s_.symmetric ? 2.0 * s_.l1 : s_.l1; }

  void pack(const VectorXd& h, const MatrixXd& theta, double* x) const {
    if (s_.symmetric) {
      Index k = 0;
      for (Index i = 0; i < N_; ++i)
        for (Index j = i + 1; j < N_; ++j) x[k++] = 0.5 * (theta(i, j) + theta(j, i));
    } else if (whitened()) {
      // v_i = L_i^T p_i with p_i = (Theta_{-i,i}, h_i).
      parallel_for(N_, f_.threads(), [&](Index i) {
        VectorXd p(N_);
        for (Index k = 0; k < N_ - 1; ++k) p(k) = theta(k < i ? k : k + 1, i);
        p(N_ - 1) = h(i);
        Eigen::Map<VectorXd>(x + i * N_, N_) =
            factors_[std::size_t(i)].triangularView<Eigen::Lower>().transpose() * p;
      });
      return;
    } else {
      Eigen::Map<MatrixXd>(x, N_, N_) = theta;
      for (Index i = 0; i < N_; ++i) x[i * N_ + i] = 0.0;
    }
    Eigen::Map<VectorXd>(x + couplings_, N_) = h;
  }

  void unpack(const double* x) {
    if (s_.symmetric) {
      Index k = 0;
      for (Index i = 0; i < N_; ++i) {
        theta_(i, i) = 0.0;
        for (Index j = i + 1; j < N_; ++j) theta_(i, j) = theta_(j, i) = x[k++];
      }
    } else if (whitened()) {
      // p_i = L_i^{-T} v_i.
      parallel_for(N_, f_.threads(), [&](Index i) {
        VectorXd p = Eigen::Map<const VectorXd>(x + i * N_, N_);
        factors_[std::size_t(i)].triangularView<Eigen::Lower>().transpose().solveInPlace(p);
        for (Index k = 0; k < N_ - 1; ++k) theta_(k < i ? k : k + 1, i) = p(k);
        theta_(i, i) = 0.0;
        h_(i) = p(N_ - 1);
      });
      return;
    } else {
      theta_ = Eigen::Map<const MatrixXd>(x, N_, N_);
      theta_.diagonal().setZero();
    }
    h_ = Eigen::Map<const VectorXd>(x + couplings_, N_);
  }

  // The model parameters (spin convention) at x.
  void solution(const double* x, VectorXd& h, MatrixXd& theta) {
    unpack(x);
    h = h_;
    theta = theta_;
  }

  // Smooth part of the objective (everything but L1) and its gradient.
  double evaluate(const double* x, double* g) {
    ++evaluations;
    unpack(x);
    f_.evaluate(s_.loss, theta_, h_, true, loss_, grad_, grad_h_);
    if (!loss_.allFinite() || !grad_.allFinite())
      throw NumericalError(s_.stage + ": the objective is not finite (parameters diverged); "
                           "increase the penalty");
    // Per-unit objective and gradient scale: (1/W) for the mean, 1/S_i for log-RISE.
    VectorXd scale(N_), value(N_);
    for (Index i = 0; i < N_; ++i) {
      const double mean = loss_(i) / W_;
      if (s_.logarithmic) {
        value(i) = std::log(mean);
        scale(i) = 1.0 / loss_(i);
      } else {
        value(i) = mean;
        scale(i) = 1.0 / W_;
      }
    }
    grad_ = grad_ * scale.asDiagonal();  // column i belongs to unit i
    grad_h_ = grad_h_.cwiseProduct(scale);
    double fx = value.sum() + s_.l2 * theta_.squaredNorm();
    if (s_.symmetric) {
      Index k = 0;
      for (Index i = 0; i < N_; ++i)
        for (Index j = i + 1; j < N_; ++j, ++k)
          g[k] = grad_(j, i) + grad_(i, j) + 4.0 * s_.l2 * theta_(i, j);
    } else if (whitened()) {
      // Gradient in v_i: L_i^{-1} (gradient in p_i); residuals use the gradient in p.
      last_grad_ = grad_ + 2.0 * s_.l2 * theta_;
      last_grad_.diagonal().setZero();
      last_grad_h_ = grad_h_;
      parallel_for(N_, f_.threads(), [&](Index i) {
        VectorXd q(N_);
        for (Index k = 0; k < N_ - 1; ++k) q(k) = last_grad_(k < i ? k : k + 1, i);
        q(N_ - 1) = grad_h_(i);
        factors_[std::size_t(i)].triangularView<Eigen::Lower>().solveInPlace(q);
        Eigen::Map<VectorXd>(g + i * N_, N_) = q;
      });
      return fx;
    } else {
      Eigen::Map<MatrixXd> G(g, N_, N_);
      G = grad_ + 2.0 * s_.l2 * theta_;
      G.diagonal().setZero();
    }
    Eigen::Map<VectorXd>(g + couplings_, N_) = grad_h_;
    return fx;
  }

  // Per-unit optimality residual: largest |gradient| (L1: minimum-norm subgradient).
  VectorXd residuals(const double* x, const double* g) const {
    if (whitened()) {  // gradient in p of the point evaluated last (the accepted iterate)
      VectorXd res = last_grad_h_.cwiseAbs();
      for (Index i = 0; i < N_; ++i) res(i) = std::max(res(i), last_grad_.col(i).cwiseAbs().maxCoeff());
      return res;
    }
    const double c = owlqn_c();
    auto r = [c](double xv, double gv) {
      if (c == 0.0) return std::abs(gv);
      if (xv > 0) return std::abs(gv + c);
      if (xv < 0) return std::abs(gv - c);
      return std::max(0.0, std::abs(gv) - c);
    };
    VectorXd res = Eigen::Map<const VectorXd>(g + couplings_, N_).cwiseAbs();
    if (s_.symmetric) {
      Index k = 0;
      for (Index i = 0; i < N_; ++i)
        for (Index j = i + 1; j < N_; ++j, ++k) {
          const double v = r(x[k], g[k]);
          res(i) = std::max(res(i), v);
          res(j) = std::max(res(j), v);
        }
    } else {
      for (Index i = 0; i < N_; ++i)
        for (Index j = 0; j < N_; ++j)
          if (j != i) res(i) = std::max(res(i), r(x[i * N_ + j], g[i * N_ + j]));
    }
    return res;
  }

  std::int64_t evaluations = 0;

  double l1_term(const double* x) const {
    if (s_.l1 == 0) return 0.0;
    return owlqn_c() * Eigen::Map<const VectorXd>(x, couplings_).lpNorm<1>();
  }

 private:
  // Per-unit preconditioning by a linear change of variables (same optimum, same objective):
  // with z = (s, 1) and M = E_w[z z^T], unit i's parameters p_i = (Theta_{-i,i}, h_i) are
  // written p_i = L_i^{-T} v_i where L_i L_i^T = M_{-i,-i} (Cholesky). The per-unit Hessian
  // E_w[(1 - tanh^2 H_i) z_{-i} z_{-i}^T] then becomes L_i^{-1} (...) L_i^{-T}, close to a
  // multiple of the identity when the curvature weights vary little, so L-BFGS needs far fewer
  // iterations on correlated data (standard whitening of a GLM design; Nocedal & Wright 2006,
  // Numerical Optimization, §7.2 on preconditioned quasi-Newton). Factors cost N^3 doubles of
  // memory and N^4/3 flops once, so this is used for N <= kWhitenMaxUnits; a singular M (e.g.
  // two identical units) leaves the plain parametrisation.
  static constexpr Index kWhitenMaxUnits = 200;
  void build_whitening() {
    const MatrixXd M = f_.second_moments();
    std::vector<MatrixXd> factors(static_cast<std::size_t>(N_));
    std::vector<char> ok(static_cast<std::size_t>(N_), 0);
    parallel_for(N_, f_.threads(), [&](Index i) {
      MatrixXd A(N_, N_);
      auto idx = [i](Index k) { return k < i ? k : k + 1; };  // reduced -> z index
      for (Index a = 0; a < N_; ++a)
        for (Index b = 0; b < N_; ++b) A(a, b) = M(idx(a), idx(b));
      Eigen::LLT<MatrixXd> llt(A);
      if (llt.info() != Eigen::Success) return;
      MatrixXd L = llt.matrixL();
      const double dmin = L.diagonal().minCoeff(), dmax = L.diagonal().maxCoeff();
      if (!(dmin > 1e-6 * dmax)) return;  // numerically singular: do not precondition
      factors[std::size_t(i)] = std::move(L);
      ok[std::size_t(i)] = 1;
    });
    for (char c : ok)
      if (!c) return;
    factors_ = std::move(factors);
    couplings_ = N_ * N_ - N_;  // x = [v_0, ..., v_{N-1}], N entries each; last N "fields"
  }

  std::vector<MatrixXd> factors_;
  MatrixXd last_grad_;
  VectorXd last_grad_h_;

  const LocalFields& f_;
  const LocalFitSettings& s_;
  Index N_, pairs_ = 0, couplings_ = 0;
  double W_;
  MatrixXd theta_, grad_;
  VectorXd h_, loss_, grad_h_;
};

struct Driver {
  Problem* problem;
  const LocalFitSettings* settings;
  std::exception_ptr error;
  bool interrupted = false;
  bool converged = false;
  std::int64_t iterations = 0;
  double objective = 0;
  VectorXd residual;
  std::chrono::steady_clock::time_point start;
};

lbfgsfloatval_t evaluate_cb(void* instance, const lbfgsfloatval_t* x, lbfgsfloatval_t* g, int,
                            lbfgsfloatval_t) {
  auto* d = static_cast<Driver*>(instance);
  if (d->error) return std::numeric_limits<double>::quiet_NaN();
  try {
    return d->problem->evaluate(x, g);
  } catch (...) {  // never unwind through C frames
    d->error = std::current_exception();
    std::fill(g, g + d->problem->size(), 0.0);
    return std::numeric_limits<double>::quiet_NaN();
  }
}

int progress_cb(void* instance, const lbfgsfloatval_t* x, const lbfgsfloatval_t* g,
                lbfgsfloatval_t fx, lbfgsfloatval_t, lbfgsfloatval_t, lbfgsfloatval_t, int, int k,
                int) {
  auto* d = static_cast<Driver*>(instance);
  if (d->error) return 1;
  try {
    d->iterations = k;
    d->objective = fx;
    d->residual = d->problem->residuals(x, g);
    d->converged = d->residual.maxCoeff() <= d->settings->tolerance;
    if (d->settings->progress) {
      Progress p;
      p.stage = d->settings->stage;
      p.done = k;
      p.total = d->settings->max_iterations;
      p.objective = fx;
      p.elapsed_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - d->start).count();
      if (!d->settings->progress(p)) {
        d->interrupted = true;
        return 1;
      }
    }
    return d->converged ? 1 : 0;
  } catch (...) {
    d->error = std::current_exception();
    return 1;
  }
}

struct LbfgsBuffer {
  explicit LbfgsBuffer(Index n) : x(lbfgs_malloc(int(n))) {
    if (!x) throw std::bad_alloc();
  }
  ~LbfgsBuffer() { lbfgs_free(x); }
  LbfgsBuffer(const LbfgsBuffer&) = delete;
  LbfgsBuffer& operator=(const LbfgsBuffer&) = delete;
  lbfgsfloatval_t* x;
};

}  // namespace

LocalFitResult fit_local(const LocalFields& fields, const LocalFitSettings& s,
                         const LocalFitResult* start) {
  const Index N = fields.units();
  if (!(s.l1 >= 0) || !(s.l2 >= 0) || !std::isfinite(s.l1) || !std::isfinite(s.l2))
    throw InputError(s.stage + ": penalties must be finite and >= 0 (got l1 = " +
                     std::to_string(s.l1) + ", l2 = " + std::to_string(s.l2) + ")");
  if (s.max_iterations < 0) throw InputError(s.stage + ": max_iterations must be >= 0");
  if (!(s.tolerance > 0)) throw InputError(s.stage + ": tolerance must be > 0");
  if (N * N + N > std::numeric_limits<int>::max())
    throw InputError(s.stage + ": " + std::to_string(N) + " units is more than the optimiser's "
                     "index range allows");
  Problem problem(fields, s);
  const Index n = problem.size();
  LbfgsBuffer buf(n);
  if (start) {
    problem.pack(start->h, start->J, buf.x);
  } else {
    // Independent model: h = atanh(m), the optimum of both objectives at J = 0.
    const VectorXd m = fields.spin_means().cwiseMax(-1 + 1e-9).cwiseMin(1 - 1e-9);
    problem.pack(m.array().atanh().matrix(), MatrixXd::Zero(N, N), buf.x);
  }

  Driver d;
  d.problem = &problem;
  d.settings = &s;
  d.start = std::chrono::steady_clock::now();
  {
    // Already at the optimum (e.g. warm start from the solution)? Then no iteration is made.
    std::vector<double> g(std::size_t(n), 0.0);
    d.objective = problem.evaluate(buf.x, g.data()) + problem.l1_term(buf.x);
    d.residual = problem.residuals(buf.x, g.data());
    d.converged = d.residual.maxCoeff() <= s.tolerance;
  }
  if (!d.converged && s.max_iterations > 0) {
    lbfgs_parameter_t p;
    lbfgs_parameter_init(&p);
    p.m = 10;
    p.epsilon = 0;  // convergence is tested per unit in progress_cb
    p.max_iterations = s.max_iterations;
    p.max_linesearch = 40;
    if (s.l1 > 0) {
      p.orthantwise_c = problem.owlqn_c();
      p.orthantwise_start = 0;
      p.orthantwise_end = int(problem.coupling_count());
      p.linesearch = LBFGS_LINESEARCH_BACKTRACKING;  // required by OWL-QN
    } else {
      p.linesearch = LBFGS_LINESEARCH_MORETHUENTE;
    }
    lbfgsfloatval_t fx = 0;
    lbfgs(int(n), buf.x, &fx, evaluate_cb, progress_cb, &d, &p);
    if (d.error) std::rethrow_exception(d.error);
    if (d.interrupted) throw Interrupted(s.stage + ": interrupted by the progress callback");
    // Line-search failures near the optimum leave x at the last accepted iterate, which is the
    // one progress_cb saw; its residual decides `converged`.
  }
  LocalFitResult out;
  problem.unpack(buf.x);
  out.h = Eigen::Map<const VectorXd>(buf.x + problem.coupling_count(), N);
  MatrixXd theta(N, N);
  if (s.symmetric) {
    theta.setZero();
    Index k = 0;
    for (Index i = 0; i < N; ++i)
      for (Index j = i + 1; j < N; ++j) theta(i, j) = theta(j, i) = buf.x[k++];
    out.J = theta;
  } else {
    VectorXd h;
    problem.solution(buf.x, h, theta);
    out.h = h;
    out.J = 0.5 * (theta + theta.transpose());  // average the two estimates of each pair
  }
  out.iterations = d.iterations;
  out.evaluations = problem.evaluations;
  out.objective = d.objective;
  out.converged = d.converged;
  for (Index i = 0; i < N; ++i)
    if (!(d.residual(i) <= s.tolerance)) out.unconverged.push_back(i);
  out.converged = out.unconverged.empty();
  return out;
}

double mean_pseudo_log_likelihood(const LocalFields& fields, const VectorXd& h, const MatrixXd& J) {
  VectorXd loss, gh;
  MatrixXd g;
  MatrixXd theta = J;
  theta.diagonal().setZero();
  fields.evaluate(LocalLoss::pseudo_likelihood, theta, h, false, loss, g, gh);
  return -loss.sum() / fields.total_weight();
}

namespace {

// Automatic penalty: one contiguous split (last 20 % of rows held out), a short decreasing
// grid with warm starts, early stop once the held-out score has fallen twice in a row; the
// chosen value is rescaled from the training size to the full size (l2 optimum ~ 1/T, l1 ~
// 1/sqrt(T)), and the final fit starts from the training fit at that value.
struct Choice {
  double penalty = 0;
  LocalFitResult start;
  bool has_start = false;
  nlohmann::json report;
};

Choice choose_penalty(const PreparedData& prepared, const LocalFitSettings& base, bool l1_kind,
                      int threads) {
  const SpinMatrix& data = prepared.original();
  const std::int64_t T = data.rows(), N = data.cols();
  const std::int64_t T_train = T - T / 5;
  Choice c;
  const std::vector<double> factors = l1_kind ? std::vector<double>{1, 0.3, 0.1, 0.03, 0.01}
                                              : std::vector<double>{2.5, 0.5, 0.1, 0.02, 0.004};
  auto scale_for = [&](std::int64_t rows) {
    return l1_kind ? std::sqrt(std::log(double(std::max<std::int64_t>(N, 2))) / double(rows))
                   : double(N) / double(rows);
  };
  if (T < 50) {  // too few rows to hold any out: the prior-scale rule a = 0.5 (l2) / 0.1 (l1)
    c.penalty = (l1_kind ? 0.1 : 0.5) * scale_for(T);
    c.report = {{"rule", "too few samples to hold out (< 50): fixed scale"}, {"chosen", c.penalty}};
    return c;
  }
  LocalFields train(prepared, {RowRange{0, T_train}}, threads);
  LocalFields valid(prepared, {RowRange{T_train, T}}, threads);
  LocalFitSettings s = base;
  s.tolerance = std::max(base.tolerance, 1e-4);
  s.progress = nullptr;
  std::vector<double> grid, scores;
  LocalFitResult prev, best_fit;
  bool have_prev = false;
  double best = -std::numeric_limits<double>::infinity();
  std::size_t best_k = 0;
  int falls = 0;
  for (std::size_t k = 0; k < factors.size(); ++k) {
    const double pen = factors[k] * scale_for(T_train);
    (l1_kind ? s.l1 : s.l2) = pen;
    LocalFitResult r = fit_local(train, s, have_prev ? &prev : nullptr);
    const double score = mean_pseudo_log_likelihood(valid, r.h, r.J);
    grid.push_back(pen);
    scores.push_back(score);
    if (base.progress) {
      Progress p;
      p.stage = base.stage + " penalty choice";
      p.done = std::int64_t(k + 1);
      p.total = std::int64_t(factors.size());
      p.objective = score;
      if (!base.progress(p)) throw Interrupted(base.stage + ": interrupted by the progress callback");
    }
    if (score > best) {
      best = score;
      best_k = k;
      best_fit = r;
      falls = 0;
    } else if (++falls >= 2) {
      break;
    }
    prev = std::move(r);
    have_prev = true;
  }
  const double ratio = double(T_train) / double(T);
  c.penalty = grid[best_k] * (l1_kind ? std::sqrt(ratio) : ratio);
  c.start = best_fit;
  c.has_start = true;
  c.report = {{"rule", "held-out pseudo-log-likelihood, last 20% of rows, best score"},
              {"grid", grid},
              {"scores", scores},
              {"chosen_on_training_rows", grid[best_k]},
              {"chosen", c.penalty}};
  return c;
}

}  // namespace

IsingModel fit_local_model(const SpinMatrix& data, const LocalFitRequest& req) {
  require_no_constant_units(data, "data");
  const std::int64_t N = data.cols();
  LocalFitSettings s = req.settings;
  const bool auto_l1 = s.l1 == automatic_penalty, auto_l2 = s.l2 == automatic_penalty;
  if (auto_l1 && auto_l2) s.l2 = 0;  // choose l1 alone; l2 defaults to none
  PreparedData prepared(data, req.representation, req.threads);

  LocalFitResult start;
  bool has_start = false;
  if (req.warm_start) {
    const IsingModel w = convert_model(*req.warm_start, Convention::spin);
    if (w.size() != N)
      throw InputError("warm start: the model has " + std::to_string(w.size()) +
                       " units but the data have " + std::to_string(N));
    validate_model(w, "warm start");
    start.h = w.fields;
    start.J = w.couplings;
    has_start = true;
  }
  nlohmann::json selection;
  if (auto_l1 || (auto_l2 && !auto_l1)) {
    const bool l1_kind = auto_l1;
    if (l1_kind) s.l1 = 0;
    else s.l2 = 0;
    if (s.l1 < 0 || s.l2 < 0)
      throw InputError(s.stage + ": penalties must be >= 0 or automatic");
    Choice c = choose_penalty(prepared, s, l1_kind, req.threads);
    (l1_kind ? s.l1 : s.l2) = c.penalty;
    selection = c.report;
    selection["kind"] = l1_kind ? "l1" : "l2";
    if (c.has_start && !has_start) {
      start = c.start;
      has_start = true;
    }
  }
  LocalFields all(prepared, req.threads);
  LocalFitResult r = fit_local(all, s, has_start ? &start : nullptr);

  IsingModel m;
  m.convention = Convention::spin;
  m.fields = r.h;
  m.couplings = r.J;
  m.names = data.names();
  Provenance& p = m.provenance;
  p.method = req.method;
  p.l1 = s.l1;
  p.l2 = s.l2;
  p.iterations = r.iterations;
  p.converged = r.converged;
  p.objective = r.objective;
  p.samples = data.rows();
  p.units = N;
  p.version = version();
  p.extra = req.extra;
  p.extra["representation"] = prepared.description();
  p.extra["unconverged_units"] = r.unconverged;
  p.extra["tolerance"] = s.tolerance;
  p.extra["evaluations"] = r.evaluations;
  if (!selection.is_null()) p.extra["penalty_selection"] = selection;
  return m;
}

}  // namespace spinfer::detail
