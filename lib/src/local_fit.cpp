#include "local_fit.hpp"

#include "lockstep_lbfgs.hpp"
#include "rank_rounds.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <exception>
#include <limits>
#include <map>

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

// The pseudo-likelihood / screening objectives as lock-step problems (lockstep_lbfgs.hpp).
//   per-variable: one problem per fitted unit i, parameters p_i = (Theta_{-i,i}, h_i) (N
//                 entries: the couplings into i in index order without i, then the field);
//                 the couplings carry the L1 term.
//   symmetric:    a single problem, [J_ij for i < j packed row by row, h (N)].
// Objectives are per-sample (divided by the total weight W) and the per-unit values are
//   value_i = loss_i / W            (pseudo-likelihood, RISE)
//   value_i = log(loss_i / W)       (log-RISE)
// plus l2 sum_j Theta_ji^2 per unit (symmetric: l2 ||J||_F^2, each pair counted twice).
class Objectives {
 public:
  Objectives(const LocalFields& fields, const LocalFitSettings& s, std::vector<Index> units)
      : f_(fields), s_(s), N_(fields.units()), W_(fields.total_weight()), units_(std::move(units)) {
    theta_.setZero(N_, N_);
    h_.setZero(N_);
    factors_.resize(std::size_t(N_));
    const bool smooth = !s.symmetric && s.l1 == 0;
    if (smooth && s.loss == LocalLoss::pseudo_likelihood && N_ <= kWhitenMaxUnits)
      build_whitening();
    else if (smooth && s.loss == LocalLoss::pseudo_likelihood && build_shared_whitening())
      ;
    else if (smooth)
      build_centring();
  }

  std::vector<LockstepProblem> problems() const {
    if (s_.symmetric) {
      const Index pairs = N_ * (N_ - 1) / 2;
      return {LockstepProblem{pairs + N_, pairs, 2.0 * s_.l1}};  // each pair's penalty twice
    }
    std::vector<LockstepProblem> out;
    const Index dimension = shared_ ? N_ + 1 : N_;  // shared whitening: v has N + 1 entries
    for (std::size_t k = 0; k < units_.size(); ++k) out.push_back({dimension, N_ - 1, s_.l1});
    return out;
  }

  // Starting points from (h, Theta) in the spin convention (Theta: column i = into unit i).
  std::vector<VectorXd> pack(const VectorXd& h, const MatrixXd& theta) const {
    if (s_.symmetric) {
      const Index pairs = N_ * (N_ - 1) / 2;
      VectorXd x(pairs + N_);
      Index k = 0;
      for (Index i = 0; i < N_; ++i)
        for (Index j = i + 1; j < N_; ++j) x(k++) = 0.5 * (theta(i, j) + theta(j, i));
      x.tail(N_) = h;
      return {x};
    }
    std::vector<VectorXd> xs(units_.size());
    SingleThreadedBlas single;
    parallel_for(Index(units_.size()), f_.threads(), [&](Index k) {
      const Index i = units_[std::size_t(k)];
      VectorXd p(N_);
      for (Index a = 0; a < N_ - 1; ++a) p(a) = theta(a < i ? a : a + 1, i);
      p(N_ - 1) = h(i);
      const MatrixXd& L = factors_[std::size_t(i)];
      if (L.size()) p = L.triangularView<Eigen::Lower>().transpose() * p;
      else if (shared_) p = to_shared(i, p);
      else if (centred_) to_centred(i, p);
      xs[std::size_t(k)] = std::move(p);
    });
    return xs;
  }

  // Writes problem k's parameters into theta_ / h_.
  void unpack(Index k, const VectorXd& x) {
    if (s_.symmetric) {
      Index q = 0;
      for (Index i = 0; i < N_; ++i) {
        theta_(i, i) = 0.0;
        for (Index j = i + 1; j < N_; ++j) theta_(i, j) = theta_(j, i) = x(q++);
      }
      h_ = x.tail(N_);
      return;
    }
    const Index i = units_[std::size_t(k)];
    const MatrixXd& L = factors_[std::size_t(i)];
    VectorXd p = x;
    if (L.size()) L.triangularView<Eigen::Lower>().transpose().solveInPlace(p);  // p = L^-T v
    else if (shared_) throw std::logic_error("Objectives: shared whitening unpacks in chunks");
    else if (centred_) from_centred(i, p);
    for (Index a = 0; a < N_ - 1; ++a) theta_(a < i ? a : a + 1, i) = p(a);
    theta_(i, i) = 0.0;
    h_(i) = p(N_ - 1);
  }

  void evaluate(const std::vector<std::int64_t>& which, const std::vector<VectorXd>& x,
                std::vector<double>& f, std::vector<VectorXd>& g, std::vector<double>& residual) {
    if (s_.symmetric) {
      unpack(0, x[0]);
      f_.evaluate(s_.loss, theta_, h_, true, loss_, grad_, grad_h_);
      evaluate_symmetric(x[0], f[0], g[0], residual[0]);
      return;
    }
    SingleThreadedBlas single;  // the per-unit solves run on our threads
    std::vector<char> wanted(std::size_t(N_), 0);
    for (std::int64_t k : which) wanted[std::size_t(units_[std::size_t(k)])] = 1;
    if (shared_) {
      shared_unpack(which, x);
    } else {
      parallel_for(Index(which.size()), f_.threads(), [&](Index w) {
        const std::int64_t k = which[std::size_t(w)];
        unpack(k, x[std::size_t(k)]);
      });
    }
    f_.evaluate(s_.loss, theta_, h_, true, loss_, grad_, grad_h_, &wanted);
    parallel_for(Index(which.size()), f_.threads(), [&](Index w) {
      const std::int64_t k = which[std::size_t(w)];
      evaluate_unit(k, x[std::size_t(k)], f[std::size_t(k)], g[std::size_t(k)],
                    residual[std::size_t(k)]);
    });
    if (shared_) shared_gradients(which, g);
  }

  // (h, Theta) of the problems' current points (fitted units only for per-variable).
  void solution(const std::vector<LockstepState>& states, VectorXd& h, MatrixXd& theta) {
    SingleThreadedBlas single;
    if (shared_ && !s_.symmetric) {  // exactly as the evaluations unpacked them
      std::vector<std::int64_t> all(states.size());
      std::vector<VectorXd> xs(states.size());
      for (std::size_t k = 0; k < states.size(); ++k) {
        all[k] = std::int64_t(k);
        xs[k] = states[k].x;
      }
      shared_unpack(all, xs);
    } else {
      for (std::size_t k = 0; k < states.size(); ++k) unpack(Index(k), states[k].x);
    }
    h = h_;
    theta = theta_;
  }

  // Per-unit optimality residuals of the symmetric problem at its current point.
  VectorXd symmetric_unit_residuals(const VectorXd& x, const VectorXd& g) const {
    VectorXd res = g.tail(N_).cwiseAbs();
    Index k = 0;
    for (Index i = 0; i < N_; ++i)
      for (Index j = i + 1; j < N_; ++j, ++k) {
        const double v = subgradient(x(k), g(k), 2.0 * s_.l1);
        res(i) = std::max(res(i), v);
        res(j) = std::max(res(j), v);
      }
    return res;
  }

  const std::vector<Index>& units() const { return units_; }

  std::string preconditioning() const {
    if (shared_) return "whitened-shared";
    if (centred_) return "centred";
    for (const MatrixXd& L : factors_)
      if (L.size()) return "whitened";
    return "none";
  }

 private:
  // Minimum-norm subgradient magnitude of g + c |x| in one coordinate.
  static double subgradient(double x, double g, double c) {
    if (c == 0.0) return std::abs(g);
    if (x > 0) return std::abs(g + c);
    if (x < 0) return std::abs(g - c);
    return std::max(0.0, std::abs(g) - c);
  }

  void value_and_scale(Index i, double& value, double& scale) const {
    const double mean = loss_(i) / W_;
    if (s_.logarithmic) {
      value = std::log(mean);
      scale = 1.0 / loss_(i);
    } else {
      value = mean;
      scale = 1.0 / W_;
    }
  }

  void evaluate_unit(std::int64_t k, const VectorXd& x, double& f, VectorXd& g, double& residual) const {
    const Index i = units_[std::size_t(k)];
    double value, scale;
    value_and_scale(i, value, scale);
    VectorXd gp(N_);  // gradient in p = (Theta_{-i,i}, h_i)
    double penalty = 0;
    for (Index a = 0; a < N_ - 1; ++a) {
      const Index j = a < i ? a : a + 1;
      const double t = theta_(j, i);
      gp(a) = grad_(j, i) * scale + 2.0 * s_.l2 * t;
      penalty += t * t;
    }
    gp(N_ - 1) = grad_h_(i) * scale;
    f = value + s_.l2 * penalty;
    residual = std::abs(gp(N_ - 1));
    for (Index a = 0; a < N_ - 1; ++a)
      residual = std::max(residual, subgradient(x(a), gp(a), s_.l1));
    if (!std::isfinite(f) || !gp.allFinite()) f = std::numeric_limits<double>::infinity();
    const MatrixXd& L = factors_[std::size_t(i)];
    if (L.size()) {  // gradient in v = L^T p is L^-1 (gradient in p)
      L.triangularView<Eigen::Lower>().solveInPlace(gp);
    } else if (shared_) {
      // transformed by shared_gradients, for all evaluated units together
    } else if (centred_) {  // chain rule through theta_j = v_j / sd_j, h = v_h - sum m_j theta_j
      const double gh = gp(N_ - 1);
      for (Index a = 0; a < N_ - 1; ++a) {
        const Index j = a < i ? a : a + 1;
        gp(a) = (gp(a) - mean_(j) * gh) / sd_(j);
      }
    }
    g = std::move(gp);
  }

  void evaluate_symmetric(const VectorXd& x, double& f, VectorXd& g, double& residual) const {
    const Index pairs = N_ * (N_ - 1) / 2;
    double total = 0;
    VectorXd scale(N_);
    for (Index i = 0; i < N_; ++i) {
      double value;
      value_and_scale(i, value, scale(i));
      total += value;
    }
    f = total + s_.l2 * theta_.squaredNorm();
    g.resize(pairs + N_);
    Index k = 0;
    for (Index i = 0; i < N_; ++i)
      for (Index j = i + 1; j < N_; ++j, ++k)
        g(k) = grad_(j, i) * scale(i) + grad_(i, j) * scale(j) + 4.0 * s_.l2 * theta_(i, j);
    g.tail(N_) = grad_h_.cwiseProduct(scale);
    if (!std::isfinite(f) || !g.allFinite()) f = std::numeric_limits<double>::infinity();
    residual = symmetric_unit_residuals(x, g).maxCoeff();
  }

  // Per-unit preconditioning by a linear change of variables (same optimum, same objective):
  // with z = (s, 1) and M = E_w[z z^T], unit i's parameters p_i = (Theta_{-i,i}, h_i) are
  // written p_i = L_i^{-T} v_i where L_i L_i^T = M_{-i,-i} (Cholesky). The per-unit Hessian
  // E_w[(1 - tanh^2 H_i) z_{-i} z_{-i}^T] then becomes L_i^{-1} (...) L_i^{-T}, close to a
  // multiple of the identity when the curvature weights vary little, so L-BFGS needs far fewer
  // iterations on correlated data (standard whitening of a GLM design; Nocedal & Wright 2006,
  // Numerical Optimization, §7.2 on preconditioned quasi-Newton). Factors cost N^2 doubles per
  // fitted unit and N^3/3 flops each, so this is used for N <= kWhitenMaxUnits. The decision is
  // per unit (a numerically singular M_{-i,-i}, e.g. two identical units, leaves that unit in
  // the plain parametrisation), so a unit's iterates never depend on which other units are fitted.
  static constexpr Index kWhitenMaxUnits = 200;
  void build_whitening() {
    const MatrixXd M = f_.second_moments();
    parallel_for(Index(units_.size()), f_.threads(), [&](Index k) {
      const Index i = units_[std::size_t(k)];
      MatrixXd A(N_, N_);
      auto idx = [i](Index a) { return a < i ? a : a + 1; };  // reduced -> z index
      for (Index a = 0; a < N_; ++a)
        for (Index b = 0; b < N_; ++b) A(a, b) = M(idx(a), idx(b));
      Eigen::LLT<MatrixXd> llt(A);
      if (llt.info() != Eigen::Success) return;
      MatrixXd L = llt.matrixL();
      const double dmin = L.diagonal().minCoeff(), dmax = L.diagonal().maxCoeff();
      if (!(dmin > 1e-6 * dmax)) return;  // numerically singular: do not precondition
      factors_[std::size_t(i)] = std::move(L);
    });
  }

  // Above kWhitenMaxUnits the per-unit factors would cost N^3 memory; the same whitening comes
  // from one factor of the full M (N + 1 square). Unit i's parameters, padded to
  // q = (Theta_{.,i} with Theta_ii = 0, h_i) in z order, are written q = L^-T v with L L^T = M:
  // the constraint q_i = 0 becomes r_i . v = 0 with r_i = L^-1 e_i, so v lives in the hyperplane
  // orthogonal to r_i and the gradient is projected onto it: g_v = P_i L^-1 g_q with
  // P_i = I - r_i r_i^T / |r_i|^2. On that hyperplane the Hessian is then
  //   P_i L^-1 (M with row and column i zeroed) L^-T P_i = P_i,
  // exactly the identity (as the per-unit factor of M_{-i,-i} gives), while a plain drop of q_i
  // would leave one eigenvalue M_ii (M^-1)_ii = 1 / (1 - R_i^2) (R_i: multiple correlation of
  // unit i with the rest). L-BFGS steps are combinations of projected gradients, so iterates
  // started on the hyperplane (v = L^T q) stay there up to rounding; unpacking drops q_i.
  // The Hessian at J = 0 is (1 - m_i^2) M_{-i,-i} + 2 l2 on the couplings, so the factor is
  // taken of M + (2 l2 / c) I on the spin entries (c: the mean of 1 - m_j^2), which also keeps it
  // positive definite for duplicated units when l2 > 0. O(N^2) per unit and evaluation (two
  // triangular solves); memory 2 (N + 1)^2 doubles. Falls back to centring if M is singular.
  bool build_shared_whitening() {
    SingleThreadedBlas single;  // set-up bits must not depend on OpenBLAS's thread count
    MatrixXd M = f_.second_moments();
    const VectorXd m = M.col(N_).head(N_);
    const double c = (1.0 - m.array().square()).mean();
    if (s_.l2 > 0 && c > 0) M.diagonal().head(N_).array() += 2.0 * s_.l2 / c;
    Eigen::LLT<MatrixXd> llt(M);
    if (llt.info() != Eigen::Success) return false;
    MatrixXd L = llt.matrixL();
    const double dmin = L.diagonal().minCoeff(), dmax = L.diagonal().maxCoeff();
    if (!(dmin > 1e-6 * dmax)) return false;  // numerically singular
    shared_Linv_ = L.triangularView<Eigen::Lower>().solve(MatrixXd::Identity(N_ + 1, N_ + 1));
    shared_r2_ = shared_Linv_.colwise().squaredNorm().transpose();
    shared_L_ = std::move(L);
    shared_ = true;
    return true;
  }
  VectorXd padded(Index i, const VectorXd& p) const {  // (Theta_{-i,i}, h_i) -> q (N + 1)
    VectorXd q(N_ + 1);
    for (Index a = 0; a < N_ - 1; ++a) q(a < i ? a : a + 1) = p(a);
    q(i) = 0.0;
    q(N_) = p(N_ - 1);
    return q;
  }
  VectorXd to_shared(Index i, const VectorXd& p) const {
    return shared_L_.triangularView<Eigen::Lower>().transpose() * padded(i, p);
  }
  // The triangular solves run as matrix solves over fixed chunks of kSharedChunk consecutive
  // units (one pass over L per chunk instead of per unit: the solves are memory-bound on L).
  // A unit's column always sits at the same place in a block of the same width, whatever else is
  // evaluated, so its bits never depend on which other units run (the shard and MPI promise).
  static constexpr Index kSharedChunk = 32;
  template <typename Fn>
  void for_shared_chunks(const std::vector<std::int64_t>& which, Fn&& fn) const {
    std::map<Index, std::vector<std::int64_t>> by_chunk;  // chunk -> its problems in `which`
    for (std::int64_t k : which) by_chunk[units_[std::size_t(k)] / kSharedChunk].push_back(k);
    const std::vector<std::pair<Index, std::vector<std::int64_t>>> groups(by_chunk.begin(), by_chunk.end());
    parallel_for(Index(groups.size()), f_.threads(), [&](Index g) {
      const Index i0 = groups[std::size_t(g)].first * kSharedChunk;
      fn(i0, std::min(kSharedChunk, N_ - i0), groups[std::size_t(g)].second);
    });
  }
  void shared_unpack(const std::vector<std::int64_t>& which, const std::vector<VectorXd>& x) {
    for_shared_chunks(which, [&](Index i0, Index width, const std::vector<std::int64_t>& ks) {
      MatrixXd V = MatrixXd::Zero(N_ + 1, width);
      for (std::int64_t k : ks) V.col(units_[std::size_t(k)] - i0) = x[std::size_t(k)];
      shared_L_.triangularView<Eigen::Lower>().transpose().solveInPlace(V);  // q = L^-T v
      for (std::int64_t k : ks) {
        const Index i = units_[std::size_t(k)];
        const auto q = V.col(i - i0);
        for (Index j = 0; j < N_; ++j) theta_(j, i) = j == i ? 0.0 : q(j);  // drops q_i (~0)
        h_(i) = q(N_);
      }
    });
  }
  void shared_gradients(const std::vector<std::int64_t>& which, std::vector<VectorXd>& g) const {
    for_shared_chunks(which, [&](Index i0, Index width, const std::vector<std::int64_t>& ks) {
      MatrixXd Y = MatrixXd::Zero(N_ + 1, width);
      for (std::int64_t k : ks) {
        const Index i = units_[std::size_t(k)];
        Y.col(i - i0) = padded(i, g[std::size_t(k)]);
      }
      shared_L_.triangularView<Eigen::Lower>().solveInPlace(Y);  // L^-1 g_q
      for (std::int64_t k : ks) {
        const Index i = units_[std::size_t(k)];
        const auto r = shared_Linv_.col(i);
        VectorXd y = Y.col(i - i0);
        y -= r * (r.dot(y) / shared_r2_(i));  // onto the hyperplane r_i . v = 0
        g[std::size_t(k)] = std::move(y);
      }
    });
  }
  bool shared_ = false;
  MatrixXd shared_L_, shared_Linv_;
  VectorXd shared_r2_;

  const LocalFields& f_;
  const LocalFitSettings& s_;
  Index N_;
  double W_;
  std::vector<Index> units_;
  // Above kWhitenMaxUnits (or with L2 screening): the diagonal part of the whitening, on
  // standardised inputs. H_i = h_i + sum_j theta_j s_j = v_h + sum_j v_j (s_j - m_j) / sd_j with
  // v_j = sd_j theta_j and v_h = h_i + sum_j m_j theta_j (m, sd: data mean and standard
  // deviation of s_j). Sparse recordings (s_j = -1 in most rows) otherwise make every input
  // nearly collinear with the intercept, and L-BFGS crawls (standard centring and scaling of a
  // GLM design; Nocedal & Wright 2006, §7.2). O(N) per unit and evaluation.
  void build_centring() {
    mean_ = f_.spin_means();
    sd_ = (1.0 - mean_.array().square()).max(1e-12).sqrt().matrix();
    centred_ = true;
  }
  void to_centred(Index i, VectorXd& p) const {
    double shift = 0;
    for (Index a = 0; a < N_ - 1; ++a) {
      const Index j = a < i ? a : a + 1;
      shift += mean_(j) * p(a);
      p(a) *= sd_(j);
    }
    p(N_ - 1) += shift;
  }
  void from_centred(Index i, VectorXd& v) const {
    double shift = 0;
    for (Index a = 0; a < N_ - 1; ++a) {
      const Index j = a < i ? a : a + 1;
      v(a) /= sd_(j);
      shift += mean_(j) * v(a);
    }
    v(N_ - 1) -= shift;
  }
  bool centred_ = false;
  VectorXd mean_, sd_;

  std::vector<MatrixXd> factors_;  // per unit index; empty matrix = not whitened
  MatrixXd theta_, grad_;
  VectorXd h_, loss_, grad_h_;
};

std::vector<Index> all_units(Index N) {
  std::vector<Index> u(static_cast<std::size_t>(N));
  for (Index i = 0; i < N; ++i) u[std::size_t(i)] = i;
  return u;
}

}  // namespace

LocalFitResult fit_local(const LocalFields& fields, const LocalFitSettings& s,
                         const LocalFitResult* start, const std::vector<std::int64_t>* units,
                         const nlohmann::json* resume, const LocalSaveState& save_state,
                         const Team* unit_team) {
  const Index N = fields.units();
  if (!(s.l1 >= 0) || !(s.l2 >= 0) || !std::isfinite(s.l1) || !std::isfinite(s.l2))
    throw InputError(s.stage + ": penalties must be finite and >= 0 (got l1 = " +
                     std::to_string(s.l1) + ", l2 = " + std::to_string(s.l2) + ")");
  if (s.max_iterations < 0) throw InputError(s.stage + ": max_iterations must be >= 0");
  if (!(s.tolerance > 0)) throw InputError(s.stage + ": tolerance must be > 0");
  std::vector<Index> fitted = units ? *units : all_units(N);
  for (Index i : fitted)
    if (i < 0 || i >= N) throw InputError(s.stage + ": unit " + std::to_string(i) + " is out of range");
  if (s.symmetric && units && Index(fitted.size()) != N)
    throw InputError(s.stage + ": the symmetric objective couples all units; it cannot be fitted "
                     "for a subset of units (use the per-variable objective for shards)");
  if (unit_team && (s.symmetric || fitted.empty()))
    throw std::logic_error("fit_local: a unit team needs a per-variable fit of at least one unit");

  Objectives objectives(fields, s, fitted);
  LockstepSettings ls;
  ls.max_iterations = s.max_iterations;
  ls.tolerance = s.tolerance;
  ls.threads = fields.threads();
  LockstepMinimiser minimiser(objectives.problems(), ls);
  auto evaluate = [&](const std::vector<std::int64_t>& which, const std::vector<VectorXd>& x,
                      std::vector<double>& f, std::vector<VectorXd>& g, std::vector<double>& r) {
    objectives.evaluate(which, x, f, g, r);
  };
  if (resume) {
    // A team's rank holds a contiguous share of all units; its part of the all-units state.
    minimiser.from_json(unit_team ? slice_unit_states(*resume, fitted.front(), fitted.back() + 1, N)
                                  : *resume);
  } else {
    VectorXd h0;
    MatrixXd theta0;
    if (start) {
      h0 = start->h;
      theta0 = start->theta.size() ? start->theta : start->J;
    } else {
      // Independent model: h = atanh(m), the optimum of both objectives at J = 0.
      const VectorXd m = fields.spin_means().cwiseMax(-1 + 1e-9).cwiseMin(1 - 1e-9);
      h0 = m.array().atanh().matrix();
      theta0 = MatrixXd::Zero(N, N);
    }
    try {
      minimiser.start(objectives.pack(h0, theta0), evaluate);
    } catch (const NumericalError&) {
      throw NumericalError(s.stage + ": the objective is not finite at the starting point; "
                           "increase the penalty or start elsewhere");
    }
  }

  const auto t0 = std::chrono::steady_clock::now();
  auto last_save = t0;
  bool interrupted = false;
  // The progress callback's verdict (false: stop) and whether a periodic save is due.
  auto progress_continues = [&](std::int64_t round, double objective) {
    if (!s.progress) return true;
    Progress p;
    p.stage = s.stage;
    p.done = round;
    p.total = s.max_iterations;
    p.objective = objective;
    p.elapsed_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    return s.progress(p);
  };
  auto save_due = [&] {
    return save_state && std::chrono::duration<double>(std::chrono::steady_clock::now() - last_save).count() >=
                             s.checkpoint_every_s;
  };
  auto after_round = [&](std::int64_t round, double objective) {
    if (!progress_continues(round, objective)) {
      interrupted = true;
      return false;
    }
    if (save_due()) {
      save_state(minimiser.to_json());
      last_save = std::chrono::steady_clock::now();
    }
    return true;
  };
  // Units spread over ranks (rank_rounds.hpp): after every round all ranks meet; rank 0 reports
  // the all-units objective, decides stops and saves, and writes the gathered state.
  bool others_running = true;  // until a meeting says otherwise
  std::int64_t rounds_met = 0;
  auto meet = [&](bool running, double objective) {
    ++rounds_met;
    const RankTurn turn = meet_after_round(*unit_team, running, objective, [&](double total) {
      return std::make_pair(!progress_continues(rounds_met, total), save_due());
    });
    others_running = turn.anyone_running;
    if (turn.save && save_state) {
      const nlohmann::json all = gather_unit_states(*unit_team, minimiser.to_json());
      if (unit_team->root()) save_state(all);
      last_save = std::chrono::steady_clock::now();
    }
    if (turn.stop) interrupted = true;
    return !turn.stop;
  };
  if (unit_team) {
    minimiser.run(evaluate, [&](std::int64_t, double objective) {
      bool running = false;
      for (const LockstepState& st : minimiser.states()) running |= st.status == LockstepStatus::running;
      return meet(running, objective);
    });
    while (!interrupted && others_running) meet(false, minimiser.objective_sum());
    if (interrupted)  // the state went to rank 0's checkpoint at the meeting that stopped
      throw Interrupted(s.stage + (unit_team->root() ? ": interrupted by the progress callback"
                                                     : ": stopped by rank 0"));
  } else {
    minimiser.run(evaluate, after_round);
  }
  if (interrupted) {
    if (save_state) save_state(minimiser.to_json());
    throw Interrupted(s.stage + ": interrupted by the progress callback");
  }

  const auto& states = minimiser.states();
  LocalFitResult out;
  MatrixXd theta;
  VectorXd h;
  objectives.solution(states, h, theta);
  out.h = h;
  out.theta = theta;
  out.units = fitted;
  out.preconditioning = objectives.preconditioning();
  out.J = s.symmetric ? theta : MatrixXd(0.5 * (theta + theta.transpose()));
  out.evaluations = minimiser.evaluations();
  out.rounds = minimiser.rounds();
  out.objective = minimiser.objective_sum();
  if (s.symmetric) {
    const VectorXd res = objectives.symmetric_unit_residuals(states[0].x, states[0].g);
    out.iterations = states[0].iterations;
    for (Index i = 0; i < N; ++i) {
      out.unit_iterations.push_back(states[0].iterations);
      out.unit_objective.push_back(states[0].f / double(N));
      if (!(res(i) <= s.tolerance)) out.unconverged.push_back(i);
    }
  } else {
    for (std::size_t k = 0; k < states.size(); ++k) {
      out.iterations = std::max(out.iterations, states[k].iterations);
      out.unit_iterations.push_back(states[k].iterations);
      out.unit_objective.push_back(states[k].f);
      if (!(states[k].residual <= s.tolerance)) out.unconverged.push_back(fitted[k]);
    }
  }
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
                      int threads, const Team* team) {
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
  LocalFields train(prepared, {RowRange{0, T_train}}, threads, team);
  LocalFields valid(prepared, {RowRange{T_train, T}}, threads, team);
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

namespace {

// Everything before the final fit: constant units, warm start, automatic penalties. The final
// fit's checkpoint state is {"stage": "final", "l1", "l2", "selection", "optimiser"}; a state
// saved during the penalty choice is {"stage": "penalty-choice"} and resuming from it repeats
// the choice (it is deterministic).
struct FinalFit {
  LocalFitSettings settings;
  nlohmann::json selection;
  LocalFitResult start;
  bool has_start = false;
  std::optional<nlohmann::json> resume_optimiser;
};

FinalFit prepare_final_fit(const SpinMatrix& data, const LocalFitRequest& req,
                           const PreparedData& prepared) {
  require_no_constant_units(data, "data");
  const std::int64_t N = data.cols();
  FinalFit ff;
  LocalFitSettings& s = ff.settings;
  s = req.settings;
  s.checkpoint_every_s = req.checkpoint.every_seconds;
  const auto& resume = req.checkpoint.resume;
  if (resume) {
    if (!resume->is_object() || !resume->contains("stage"))
      throw InputError(s.stage + ": the checkpoint state is not a fit state");
    if (resume->at("stage") == "final") {
      try {
        s.l1 = resume->at("l1").get<double>();
        s.l2 = resume->at("l2").get<double>();
        ff.selection = resume->at("selection");
        ff.resume_optimiser = resume->at("optimiser");
      } catch (const nlohmann::json::exception& e) {
        throw InputError(s.stage + ": the checkpoint state is incomplete (" + e.what() + ")");
      }
      return ff;
    }
  }
  const bool auto_l1 = s.l1 == automatic_penalty, auto_l2 = s.l2 == automatic_penalty;
  if (auto_l1 && auto_l2) s.l2 = 0;  // choose l1 alone; l2 defaults to none
  if (req.warm_start) {
    const IsingModel w = convert_model(*req.warm_start, Convention::spin);
    if (w.size() != N)
      throw InputError("warm start: the model has " + std::to_string(w.size()) +
                       " units but the data have " + std::to_string(N));
    validate_model(w, "warm start");
    ff.start.h = w.fields;
    ff.start.J = w.couplings;
    ff.has_start = true;
  }
  if (auto_l1 || auto_l2) {
    const bool l1_kind = auto_l1;
    if (l1_kind) s.l1 = 0;
    else s.l2 = 0;
    if (s.l1 < 0 || s.l2 < 0) throw InputError(s.stage + ": penalties must be >= 0 or automatic");
    if (req.checkpoint.save) req.checkpoint.save({{"stage", "penalty-choice"}});
    Choice c = choose_penalty(prepared, s, l1_kind, req.threads, req.team);
    (l1_kind ? s.l1 : s.l2) = c.penalty;
    ff.selection = c.report;
    ff.selection["kind"] = l1_kind ? "l1" : "l2";
    if (c.has_start && !ff.has_start) {
      ff.start = c.start;
      ff.has_start = true;
    }
  }
  return ff;
}

LocalFitResult run_final_fit(const FinalFit& ff, const LocalFitRequest& req,
                             const LocalFields& all, const std::vector<std::int64_t>* units,
                             const Team* unit_team = nullptr) {
  LocalSaveState save;
  if (req.checkpoint.save) {
    const LocalFitSettings& s = ff.settings;
    save = [&](const nlohmann::json& optimiser) {
      req.checkpoint.save({{"stage", "final"},
                           {"l1", s.l1},
                           {"l2", s.l2},
                           {"selection", ff.selection},
                           {"optimiser", optimiser}});
    };
  }
  return fit_local(all, ff.settings, ff.has_start ? &ff.start : nullptr, units,
                   ff.resume_optimiser ? &*ff.resume_optimiser : nullptr, save, unit_team);
}

Provenance make_provenance(const SpinMatrix& data, const LocalFitRequest& req, const FinalFit& ff,
                           const PreparedData& prepared, const LocalFitResult& r) {
  Provenance p;
  p.method = req.method;
  p.l1 = ff.settings.l1;
  p.l2 = ff.settings.l2;
  p.iterations = r.iterations;
  p.converged = r.converged;
  p.objective = r.objective;
  p.samples = data.rows();
  p.units = data.cols();
  p.version = version();
  p.extra = req.extra;
  p.extra["representation"] = prepared.description();
  p.extra["unconverged_units"] = r.unconverged;
  p.extra["tolerance"] = ff.settings.tolerance;
  p.extra["evaluations"] = r.evaluations;
  p.extra["rounds"] = r.rounds;
  p.extra["preconditioning"] = r.preconditioning;
  if (!ff.selection.is_null()) p.extra["penalty_selection"] = ff.selection;
  return p;
}

UnitFits unit_fits_of(const SpinMatrix& data, const LocalFitRequest& req, const FinalFit& ff,
                      const PreparedData& prepared, const LocalFitResult& r,
                      const std::vector<std::int64_t>& units) {
  UnitFits out;
  out.total_units = data.cols();
  out.names = data.names();
  out.units = units;
  out.coefficients.resize(data.cols(), Eigen::Index(units.size()));
  out.fields.resize(Eigen::Index(units.size()));
  for (std::size_t k = 0; k < units.size(); ++k) {
    out.coefficients.col(Eigen::Index(k)) = r.theta.col(units[k]);
    out.coefficients(units[k], Eigen::Index(k)) = 0.0;
    out.fields(Eigen::Index(k)) = r.h(units[k]);
  }
  out.iterations = r.unit_iterations;
  out.objective = r.unit_objective;
  out.unconverged = r.unconverged;
  out.provenance = make_provenance(data, req, ff, prepared, r);
  return out;
}

}  // namespace

UnitFits fit_local_units(const SpinMatrix& data, const LocalFitRequest& req,
                         const std::vector<std::int64_t>& units) {
  if (req.settings.symmetric)
    throw InputError(req.settings.stage + ": the symmetric objective couples all units and "
                     "cannot be split into shards; use the per-variable objective");
  for (std::size_t k = 0; k < units.size(); ++k)
    if (units[k] < 0 || units[k] >= data.cols() || (k > 0 && units[k] <= units[k - 1]))
      throw InputError(req.settings.stage + ": the units to fit must be distinct, ascending and "
                       "within 0.." + std::to_string(data.cols() - 1));
  PreparedData prepared(data, req.representation, req.threads);
  const FinalFit ff = prepare_final_fit(data, req, prepared);
  LocalFields all(prepared, req.threads, req.team);
  const LocalFitResult r = run_final_fit(ff, req, all, &units);
  return unit_fits_of(data, req, ff, prepared, r, units);
}

namespace {

// Per-variable fit with the units shared out over the ranks of req.team (rank_rounds.hpp): the
// penalty choice shares rows as before; then each rank fits its units on all rows, and the
// ranks' columns are gathered to every rank and put together as a one-process fit would.
IsingModel fit_units_on_team(const SpinMatrix& data, const LocalFitRequest& req) {
  const Team& team = *req.team;
  PreparedData prepared(data, req.representation, req.threads);
  const FinalFit ff = prepare_final_fit(data, req, prepared);
  LocalFields mine(prepared, req.threads, nullptr);  // this rank alone, all rows
  const std::vector<std::int64_t> units = shard_units(data.cols(), team.rank(), team.size());
  const LocalFitResult r = run_final_fit(ff, req, mine, &units, &team);
  std::vector<UnitFits> parts;
  for (const nlohmann::json& part :
       gather_json(team, unit_fits_to_json(unit_fits_of(data, req, ff, prepared, r, units)), true))
    parts.push_back(unit_fits_from_json(part, "rank " + std::to_string(parts.size())));
  IsingModel m = assemble_unit_fits(parts, Convention::spin);
  m.provenance.extra.erase("parts");
  m.provenance.extra["unit_ranks"] = team.size();
  return m;
}

}  // namespace

IsingModel fit_local_model(const SpinMatrix& data, const LocalFitRequest& req) {
  if (!req.settings.symmetric) {
    if (shared_work(req.team) && data.cols() >= req.team->size()) return fit_units_on_team(data, req);
    std::vector<std::int64_t> units(static_cast<std::size_t>(data.cols()));
    for (std::int64_t i = 0; i < data.cols(); ++i) units[std::size_t(i)] = i;
    return assemble_unit_fits({fit_local_units(data, req, units)}, Convention::spin);
  }
  PreparedData prepared(data, req.representation, req.threads);
  const FinalFit ff = prepare_final_fit(data, req, prepared);
  LocalFields all(prepared, req.threads, req.team);
  const LocalFitResult r = run_final_fit(ff, req, all, nullptr);
  IsingModel m;
  m.convention = Convention::spin;
  m.fields = r.h;
  m.couplings = r.J;
  m.names = data.names();
  m.provenance = make_provenance(data, req, ff, prepared, r);
  return m;
}

}  // namespace spinfer::detail
