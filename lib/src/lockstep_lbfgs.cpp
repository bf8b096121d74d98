#include "lockstep_lbfgs.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <string>

#include "spinfer/errors.hpp"
#include "spinfer/threads.hpp"

namespace spinfer::detail {
namespace {

using Eigen::Index;
using Eigen::MatrixXd;
using Eigen::VectorXd;

constexpr double kArmijo = 1e-4;  // sufficient-decrease constant (Nocedal & Wright 2006, §3.1)

double l1_norm(const VectorXd& x, Index p) { return x.head(p).lpNorm<1>(); }

}  // namespace

LockstepMinimiser::LockstepMinimiser(std::vector<LockstepProblem> problems,
                                     LockstepSettings settings)
    : problems_(std::move(problems)), settings_(settings) {
  if (settings_.memory < 1) throw InputError("L-BFGS memory must be >= 1");
  states_.resize(problems_.size());
}

void LockstepMinimiser::start(const std::vector<VectorXd>& x0, const LockstepEvaluate& evaluate) {
  const std::int64_t K = std::int64_t(problems_.size());
  std::vector<std::int64_t> all(static_cast<std::size_t>(K));
  for (std::int64_t k = 0; k < K; ++k) all[std::size_t(k)] = k;
  std::vector<double> f(std::size_t(K), 0.0), r(std::size_t(K), 0.0);
  std::vector<VectorXd> g(static_cast<std::size_t>(K));
  if (K > 0) evaluate(all, x0, f, g, r);
  evaluations_ += K;
  for (std::int64_t k = 0; k < K; ++k) {
    const LockstepProblem& p = problems_[std::size_t(k)];
    LockstepState& s = states_[std::size_t(k)];
    s = LockstepState{};
    s.x = x0[std::size_t(k)];
    s.g = std::move(g[std::size_t(k)]);
    s.f = f[std::size_t(k)] + p.l1 * l1_norm(s.x, p.penalised);
    s.residual = r[std::size_t(k)];
    if (!std::isfinite(s.f) || !s.g.allFinite())
      throw NumericalError("the objective is not finite at the starting point");
    s.S.resize(p.dimension, settings_.memory);
    s.Y.resize(p.dimension, settings_.memory);
    s.rho.resize(settings_.memory);
    if (s.residual <= settings_.tolerance) s.status = LockstepStatus::converged;
    else if (settings_.max_iterations <= 0) s.status = LockstepStatus::iteration_limit;
  }
}

void LockstepMinimiser::restore(std::vector<LockstepState> states, std::int64_t rounds,
                                std::int64_t evaluations) {
  if (states.size() != problems_.size())
    throw InputError("saved optimiser state holds " + std::to_string(states.size()) +
                     " problems, expected " + std::to_string(problems_.size()));
  states_ = std::move(states);
  rounds_ = rounds;
  evaluations_ = evaluations;
}

double LockstepMinimiser::objective_sum() const {
  double sum = 0;
  for (const LockstepState& s : states_) sum += s.f;
  return sum;
}

// Pseudo-gradient of F (Andrew & Gao 2007, eq. 4): the minimum-norm subgradient component-wise.
VectorXd LockstepMinimiser::pseudo_gradient(std::int64_t k) const {
  const LockstepProblem& p = problems_[std::size_t(k)];
  const LockstepState& s = states_[std::size_t(k)];
  VectorXd pg = s.g;
  if (p.l1 == 0) return pg;
  const double c = p.l1;
  for (Index j = 0; j < p.penalised; ++j) {
    const double xj = s.x(j), gj = s.g(j);
    if (xj > 0) pg(j) = gj + c;
    else if (xj < 0) pg(j) = gj - c;
    else if (gj + c < 0) pg(j) = gj + c;
    else if (gj - c > 0) pg(j) = gj - c;
    else pg(j) = 0;
  }
  return pg;
}

void LockstepMinimiser::new_direction(std::int64_t k) {
  const LockstepProblem& p = problems_[std::size_t(k)];
  LockstepState& s = states_[std::size_t(k)];
  const VectorXd pg = pseudo_gradient(k);
  // Two-loop recursion over the stored pairs, newest first (Nocedal & Wright 2006, Alg. 7.4).
  const int m = settings_.memory;
  VectorXd q = pg;
  std::vector<double> alpha(std::size_t(s.stored), 0.0);
  for (int i = 0; i < s.stored; ++i) {
    const int slot = (s.next - 1 - i + m) % m;
    alpha[std::size_t(i)] = s.rho(slot) * s.S.col(slot).dot(q);
    q -= alpha[std::size_t(i)] * s.Y.col(slot);
  }
  if (s.stored > 0) {
    const int newest = (s.next - 1 + m) % m;
    q *= 1.0 / (s.rho(newest) * s.Y.col(newest).squaredNorm());  // s.y / y.y
  }
  for (int i = s.stored - 1; i >= 0; --i) {
    const int slot = (s.next - 1 - i + m) % m;
    const double beta = s.rho(slot) * s.Y.col(slot).dot(q);
    q += (alpha[std::size_t(i)] - beta) * s.S.col(slot);
  }
  VectorXd d = -q;
  if (p.l1 > 0)  // keep only components that move against the pseudo-gradient
    for (Index j = 0; j < p.penalised; ++j)
      if (d(j) * pg(j) >= 0) d(j) = 0;
  double slope = pg.dot(d);
  if (!(slope < 0)) {  // not a descent direction: forget the memory, steepest descent
    s.stored = 0;
    s.next = 0;
    d = -pg;
    slope = -pg.squaredNorm();
  }
  if (!(slope < 0)) {  // zero pseudo-gradient: nothing left to do
    s.status = s.residual <= settings_.tolerance ? LockstepStatus::converged
                                                 : LockstepStatus::line_search_failed;
    return;
  }
  s.d = std::move(d);
  s.slope = slope;
  s.trials = 0;
  // First step without curvature information: unit length (as liblbfgs and Nocedal & Wright
  // suggest); afterwards the scaled quasi-Newton step 1.
  s.step = s.stored == 0 ? std::min(1.0, 1.0 / s.d.norm()) : 1.0;
}

VectorXd LockstepMinimiser::trial_point(std::int64_t k) const {
  const LockstepProblem& p = problems_[std::size_t(k)];
  const LockstepState& s = states_[std::size_t(k)];
  VectorXd xt = s.x + s.step * s.d;
  if (p.l1 > 0) {  // project onto the orthant of x (or of -pg where x_j = 0)
    const VectorXd pg = pseudo_gradient(k);
    for (Index j = 0; j < p.penalised; ++j) {
      const double orthant = s.x(j) != 0 ? s.x(j) : -pg(j);
      if (xt(j) * orthant <= 0) xt(j) = 0;
    }
  }
  return xt;
}

bool LockstepMinimiser::run(const LockstepEvaluate& evaluate,
                            const LockstepRoundCallback& after_round) {
  const std::int64_t K = std::int64_t(problems_.size());
  std::vector<VectorXd> xt(static_cast<std::size_t>(K)), gt(static_cast<std::size_t>(K));
  std::vector<double> ft(std::size_t(K), 0.0), rt(std::size_t(K), 0.0);
  const int m = settings_.memory;
  for (;;) {
    std::vector<std::int64_t> which;
    for (std::int64_t k = 0; k < K; ++k) {
      LockstepState& s = states_[std::size_t(k)];
      if (s.status != LockstepStatus::running) continue;
      if (s.d.size() == 0) new_direction(k);
      if (s.status != LockstepStatus::running) continue;
      which.push_back(k);
    }
    if (which.empty()) return true;
    parallel_for(std::int64_t(which.size()), settings_.threads, [&](std::int64_t w) {
      const std::int64_t k = which[std::size_t(w)];
      xt[std::size_t(k)] = trial_point(k);
    });
    evaluate(which, xt, ft, gt, rt);
    evaluations_ += std::int64_t(which.size());
    for (std::int64_t k : which) {
      const LockstepProblem& p = problems_[std::size_t(k)];
      LockstepState& s = states_[std::size_t(k)];
      const VectorXd& x1 = xt[std::size_t(k)];
      const double F1 = ft[std::size_t(k)] + p.l1 * l1_norm(x1, p.penalised);
      // Armijo test; with L1 the decrease is measured along the projected step (OWL-QN).
      const double predicted =
          p.l1 > 0 ? pseudo_gradient(k).dot(x1 - s.x) : s.step * s.slope;
      const bool finite = std::isfinite(F1) && gt[std::size_t(k)].allFinite();
      bool accept = finite && F1 <= s.f + kArmijo * predicted;
      if (!accept && finite && p.l1 == 0) {
        // Near the optimum the decrease drops below the rounding of F and Armijo cannot be
        // resolved; the approximate Wolfe conditions of Hager & Zhang (2005, SIAM J. Optim. 16,
        // "A new conjugate gradient method with guaranteed descent and an efficient line
        // search", eq. 4.1; delta = 0.1, sigma = 0.9) use the slope at the trial point instead.
        const double slope1 = gt[std::size_t(k)].dot(s.d);
        accept = F1 <= s.f + 1e-10 * std::abs(s.f) && slope1 >= 0.9 * s.slope &&
                 slope1 <= -0.8 * s.slope;
      }
      if (accept) {
        const VectorXd sk = x1 - s.x;
        const VectorXd yk = gt[std::size_t(k)] - s.g;
        const double sy = sk.dot(yk);
        if (sy > 1e-12 * yk.squaredNorm() && sy > 0) {  // keep H positive definite
          s.S.col(s.next) = sk;
          s.Y.col(s.next) = yk;
          s.rho(s.next) = 1.0 / sy;
          s.next = (s.next + 1) % m;
          s.stored = std::min(s.stored + 1, m);
        }
        s.x = x1;
        s.g = gt[std::size_t(k)];
        s.f = F1;
        s.residual = rt[std::size_t(k)];
        s.d.resize(0);
        ++s.iterations;
        if (s.residual <= settings_.tolerance) s.status = LockstepStatus::converged;
        else if (s.iterations >= settings_.max_iterations) s.status = LockstepStatus::iteration_limit;
        continue;
      }
      ++s.trials;
      double next_step = 0.5 * s.step;
      if (!finite) {
        next_step = 0.1 * s.step;
      } else if (p.l1 == 0) {
        // Minimiser of the quadratic through F(0), F'(0) and F(step), kept in [0.1, 0.5] step.
        const double curvature = (F1 - s.f - s.slope * s.step) / (s.step * s.step);
        if (curvature > 0) next_step = -s.slope / (2.0 * curvature);
        next_step = std::clamp(next_step, 0.1 * s.step, 0.5 * s.step);
      }
      s.step = next_step;
      const double scale = std::max(1.0, s.x.lpNorm<Eigen::Infinity>());
      if (s.trials >= settings_.max_trials ||
          s.step * s.d.lpNorm<Eigen::Infinity>() <= 1e-15 * scale) {
        s.d.resize(0);
        s.status = s.residual <= settings_.tolerance ? LockstepStatus::converged
                                                     : LockstepStatus::line_search_failed;
      }
    }
    ++rounds_;
    if (after_round && !after_round(rounds_, objective_sum())) return false;
  }
}

// ---- checkpoint form --------------------------------------------------------------------------

namespace {
const char* const kAlphabet = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
}

// RFC 4648 base64 of the doubles' little-endian bytes (this code runs on little-endian hosts
// only, as the .npy writer assumes as well).
std::string encode_doubles(const double* values, std::size_t count) {
  const auto* bytes = reinterpret_cast<const unsigned char*>(values);
  const std::size_t n = count * sizeof(double);
  std::string out;
  out.reserve((n + 2) / 3 * 4);
  for (std::size_t i = 0; i < n; i += 3) {
    const unsigned v = (unsigned(bytes[i]) << 16) | (i + 1 < n ? unsigned(bytes[i + 1]) << 8 : 0u) |
                       (i + 2 < n ? unsigned(bytes[i + 2]) : 0u);
    out += kAlphabet[(v >> 18) & 63];
    out += kAlphabet[(v >> 12) & 63];
    out += i + 1 < n ? kAlphabet[(v >> 6) & 63] : '=';
    out += i + 2 < n ? kAlphabet[v & 63] : '=';
  }
  return out;
}

std::vector<double> decode_doubles(const std::string& text, const std::string& what) {
  auto bad = [&] { return InputError("checkpoint: '" + what + "' is not a valid encoded array"); };
  if (text.size() % 4 != 0) throw bad();
  std::vector<unsigned char> bytes;
  bytes.reserve(text.size() / 4 * 3);
  for (std::size_t i = 0; i < text.size(); i += 4) {
    unsigned v = 0;
    int pad = 0;
    for (int c = 0; c < 4; ++c) {
      const char ch = text[i + std::size_t(c)];
      unsigned d = 0;
      if (ch == '=') {
        ++pad;
      } else {
        if (pad) throw bad();
        const char* pos = std::strchr(kAlphabet, ch);
        if (!pos || ch == '\0') throw bad();
        d = unsigned(pos - kAlphabet);
      }
      v = (v << 6) | d;
    }
    bytes.push_back(static_cast<unsigned char>(v >> 16));
    if (pad < 2) bytes.push_back(static_cast<unsigned char>((v >> 8) & 255));
    if (pad < 1) bytes.push_back(static_cast<unsigned char>(v & 255));
  }
  if (bytes.size() % sizeof(double) != 0) throw bad();
  std::vector<double> out(bytes.size() / sizeof(double));
  if (!out.empty()) std::memcpy(out.data(), bytes.data(), bytes.size());
  return out;
}

nlohmann::json LockstepMinimiser::to_json() const {
  nlohmann::json problems = nlohmann::json::array();
  for (const LockstepState& s : states_) {
    const double scalars[4] = {s.f, s.residual, s.step, s.slope};
    problems.push_back({
        {"x", encode_doubles(s.x.data(), std::size_t(s.x.size()))},
        {"g", encode_doubles(s.g.data(), std::size_t(s.g.size()))},
        {"d", encode_doubles(s.d.data(), std::size_t(s.d.size()))},
        {"scalars", encode_doubles(scalars, 4)},
        {"S", encode_doubles(s.S.data(), std::size_t(s.S.size()))},
        {"Y", encode_doubles(s.Y.data(), std::size_t(s.Y.size()))},
        {"rho", encode_doubles(s.rho.data(), std::size_t(s.rho.size()))},
        {"trials", s.trials},
        {"stored", s.stored},
        {"next", s.next},
        {"iterations", s.iterations},
        {"status", int(s.status)},
    });
  }
  return {{"rounds", rounds_}, {"evaluations", evaluations_}, {"problems", problems}};
}

void LockstepMinimiser::from_json(const nlohmann::json& saved) {
  try {
    const auto& problems = saved.at("problems");
    if (!problems.is_array() || problems.size() != problems_.size())
      throw InputError("checkpoint: the saved optimiser state holds " +
                       std::to_string(problems.is_array() ? problems.size() : 0) +
                       " problems, this fit has " + std::to_string(problems_.size()));
    std::vector<LockstepState> states(problems_.size());
    const int m = settings_.memory;
    for (std::size_t k = 0; k < problems_.size(); ++k) {
      const auto& j = problems[k];
      const Index n = problems_[k].dimension;
      LockstepState& s = states[k];
      auto vec = [&](const char* key, Index expected) {
        std::vector<double> v = decode_doubles(j.at(key).get<std::string>(), key);
        if (expected >= 0 && Index(v.size()) != expected)
          throw InputError(std::string("checkpoint: '") + key + "' of problem " +
                           std::to_string(k) + " has " + std::to_string(v.size()) +
                           " values, expected " + std::to_string(expected));
        return VectorXd(Eigen::Map<VectorXd>(v.data(), Index(v.size())));
      };
      s.x = vec("x", n);
      s.g = vec("g", n);
      s.d = vec("d", -1);
      if (s.d.size() != 0 && s.d.size() != n)
        throw InputError("checkpoint: direction of problem " + std::to_string(k) + " has the wrong size");
      const VectorXd scalars = vec("scalars", 4);
      s.f = scalars(0);
      s.residual = scalars(1);
      s.step = scalars(2);
      s.slope = scalars(3);
      s.S = Eigen::Map<const MatrixXd>(vec("S", n * m).data(), n, m);
      s.Y = Eigen::Map<const MatrixXd>(vec("Y", n * m).data(), n, m);
      s.rho = vec("rho", m);
      s.trials = j.at("trials").get<std::int32_t>();
      s.stored = j.at("stored").get<std::int32_t>();
      s.next = j.at("next").get<std::int32_t>();
      s.iterations = j.at("iterations").get<std::int64_t>();
      const int status = j.at("status").get<int>();
      if (s.stored < 0 || s.stored > m || s.next < 0 || s.next >= m || status < 0 || status > 3)
        throw InputError("checkpoint: optimiser bookkeeping of problem " + std::to_string(k) +
                         " is out of range");
      s.status = LockstepStatus(status);
    }
    restore(std::move(states), saved.at("rounds").get<std::int64_t>(),
            saved.at("evaluations").get<std::int64_t>());
  } catch (const nlohmann::json::exception& e) {
    throw InputError(std::string("checkpoint: the optimiser state is incomplete (") + e.what() + ")");
  }
}

}  // namespace spinfer::detail
