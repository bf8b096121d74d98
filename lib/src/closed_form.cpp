#include "spinfer/closed_form.hpp"

#include <cmath>
#include <sstream>

#include <Eigen/Eigenvalues>

#include "spinfer/errors.hpp"
#include "spinfer/version.hpp"

namespace spinfer {
namespace {

std::string unit(Eigen::Index i) { return "unit " + std::to_string(i + 1); }
std::string pair(Eigen::Index i, Eigen::Index j) {
  return "pair (" + unit(i) + ", " + unit(j) + ")";
}
std::string num(double v) {
  std::ostringstream s;
  s.precision(4);
  s << v;
  return s.str();
}

// Spin-convention moments, checked and optionally shrunk.
struct Prepared {
  std::string method;
  Eigen::Index N = 0;
  Eigen::VectorXd m;
  Eigen::MatrixXd C;
  ClosedFormOptions options;
  nlohmann::json extra = nlohmann::json::object();
  std::int64_t fallback_pairs = 0;
};

Prepared prepare(const Moments& in, const ClosedFormOptions& o, const std::string& method) {
  Prepared p;
  p.method = method;
  p.options = o;
  const std::string who = method + ": ";
  if (!(o.shrinkage >= 0 && o.shrinkage <= 1))
    throw InputError(who + "shrinkage must be in [0, 1], got " + num(o.shrinkage));
  if (!(o.max_condition > 1))
    throw InputError(who + "max_condition must be greater than 1, got " + num(o.max_condition));
  const Eigen::Index N = in.mean.size();
  if (N == 0) throw InputError(who + "the moments have no units");
  if (in.connected.rows() != N || in.connected.cols() != N)
    throw InputError(who + "connected correlations are " + std::to_string(in.connected.rows()) +
                     " x " + std::to_string(in.connected.cols()) + " for " + std::to_string(N) +
                     " means");
  Moments spin = in;
  if (spin.second.rows() != N || spin.second.cols() != N)  // only mean and connected given
    spin.second = spin.connected + spin.mean * spin.mean.transpose();
  spin = convert_moments(spin, Convention::spin);
  for (Eigen::Index i = 0; i < N; ++i) {
    if (!std::isfinite(spin.mean(i)))
      throw InputError(who + unit(i) + ": the mean is not finite");
    for (Eigen::Index j = 0; j < N; ++j)
      if (!std::isfinite(spin.connected(i, j)))
        throw InputError(who + pair(i, j) + ": the connected correlation is not finite");
    if (std::abs(spin.mean(i)) >= 1)
      throw NumericalError(who + unit(i) + " has |m| = 1 (never or always active), so its field "
                           "is infinite; drop constant units first");
    if (!(spin.connected(i, i) > 0))
      throw NumericalError(who + unit(i) + " has zero variance (never or always active); drop "
                           "constant units first");
  }
  p.N = N;
  p.m = spin.mean;
  p.C = 0.5 * (spin.connected + spin.connected.transpose());
  if (o.shrinkage > 0) {  // (1 - λ) C + λ diag(C): off-diagonal entries shrink, variances stay
    const Eigen::VectorXd d = p.C.diagonal();
    p.C *= 1 - o.shrinkage;
    p.C.diagonal() = d;
  }
  p.extra["shrinkage"] = o.shrinkage;
  return p;
}

// C^-1 through the symmetric eigendecomposition, refusing singular or ill-conditioned C.
Eigen::MatrixXd inverse_correlations(Prepared& p) {
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(p.C);
  if (eig.info() != Eigen::Success)
    throw NumericalError(p.method + ": the eigendecomposition of the correlation matrix failed");
  const Eigen::VectorXd& ev = eig.eigenvalues();  // ascending
  const double lo = ev(0), hi = ev(ev.size() - 1);
  const double cond = lo > 0 ? hi / lo : std::numeric_limits<double>::infinity();
  if (!(cond <= p.options.max_condition)) {
    // Name the most correlated pair: the usual culprit (a duplicated unit).
    double best = -1;
    Eigen::Index bi = 0, bj = 0;
    for (Eigen::Index i = 0; i < p.N; ++i)
      for (Eigen::Index j = i + 1; j < p.N; ++j) {
        const double r = std::abs(p.C(i, j)) / std::sqrt(p.C(i, i) * p.C(j, j));
        if (r > best) best = r, bi = i, bj = j;
      }
    std::string msg = p.method + ": the connected correlation matrix is singular or ill-conditioned"
                      " (condition number " + (std::isfinite(cond) ? num(cond) : "infinite") +
                      ", limit " + num(p.options.max_condition) + ")";
    if (best >= 0) msg += "; most correlated " + pair(bi, bj) + " has correlation " + num(best);
    msg += ". Duplicated or linearly dependent units, or fewer samples than units, cause this; "
           "set shrinkage > 0 (e.g. 0.05) to regularise";
    throw NumericalError(msg);
  }
  p.extra["condition_number"] = cond;
  Eigen::MatrixXd inv = eig.eigenvectors() * ev.cwiseInverse().asDiagonal() *
                        eig.eigenvectors().transpose();
  return 0.5 * (inv + inv.transpose());
}

[[noreturn]] void no_root(const Prepared& p, Eigen::Index i, Eigen::Index j, const std::string& why) {
  throw NumericalError(p.method + ": " + pair(i, j) + ": " + why +
                       "; the approximation does not apply to these correlations (strong coupling"
                       " with fields). Use another method, or enable the mean-field fallback");
}

Eigen::VectorXd mean_field_fields(const Prepared& p, const Eigen::MatrixXd& J) {
  return p.m.array().atanh().matrix() - J * p.m;
}

// h_i = atanh m_i - sum_j J_ij m_j + m_i sum_j J_ij^2 (1 - m_j^2)
Eigen::VectorXd tap_fields(const Prepared& p, const Eigen::MatrixXd& J) {
  const Eigen::VectorXd L = (1.0 - p.m.array().square()).matrix();
  return mean_field_fields(p, J) + p.m.cwiseProduct(J.cwiseAbs2() * L);
}

IsingModel finish(Prepared& p, Eigen::MatrixXd J, Eigen::VectorXd h, std::int64_t samples) {
  J.diagonal().setZero();
  for (Eigen::Index i = 0; i < p.N; ++i) {
    if (!std::isfinite(h(i)))
      throw NumericalError(p.method + ": the field of " + unit(i) + " is not finite");
    for (Eigen::Index j = 0; j < p.N; ++j)
      if (!std::isfinite(J(i, j)))
        throw NumericalError(p.method + ": the coupling of " + pair(i, j) + " is not finite");
  }
  IsingModel model;
  model.convention = Convention::spin;
  model.fields = std::move(h);
  model.couplings = std::move(J);
  model.provenance.method = p.method;
  model.provenance.iterations = 0;
  model.provenance.converged = true;
  model.provenance.samples = samples;
  model.provenance.units = p.N;
  model.provenance.version = version();
  if (p.options.mean_field_fallback) p.extra["fallback_pairs"] = p.fallback_pairs;
  model.provenance.extra = p.extra;
  return model;
}

// Pair table p(a, b) = [1 + a m_i + b m_j + ab (C_ij + m_i m_j)] / 4; returns
// J^IP and fills the pair fields h_i^(j), h_j^(i).
double independent_pair(const Prepared& p, Eigen::Index i, Eigen::Index j, double* hij,
                        double* hji) {
  const double mi = p.m(i), mj = p.m(j), cij = p.C(i, j) + mi * mj;
  const double pp = 0.25 * (1 + mi + mj + cij), mm = 0.25 * (1 - mi - mj + cij);
  const double pm = 0.25 * (1 + mi - mj - cij), mp = 0.25 * (1 - mi + mj - cij);
  const char* names[] = {"(+,+)", "(-,-)", "(+,-)", "(-,+)"};
  const double cells[] = {pp, mm, pm, mp};
  // A cell at rounding level of 1 (e.g. a duplicated unit, where C_ij + m_i m_j = 1 up to the
  // last bit) is empty: no recording can resolve probabilities below 1e-12.
  constexpr double kEmptyCell = 1e-12;
  for (int c = 0; c < 4; ++c)
    if (!(cells[c] > kEmptyCell))
      throw NumericalError(p.method + ": " + pair(i, j) + ": the pair never takes the state " +
                           names[c] + " (empty cell of its 2x2 table, p = " + num(cells[c]) +
                           "), so the coupling is infinite; set shrinkage > 0 or use another "
                           "method");
  if (hij) *hij = 0.25 * std::log(pp * pm / (mp * mm));
  if (hji) *hji = 0.25 * std::log(pp * mp / (pm * mm));
  return 0.25 * std::log(pp * mm / (pm * mp));
}

}  // namespace

const std::vector<std::string>& closed_form_methods() {
  static const std::vector<std::string> names = {"mean-field", "tap", "independent-pair",
                                                 "sessak-monasson", "bethe"};
  return names;
}

IsingModel fit_mean_field(const Moments& moments, const ClosedFormOptions& options) {
  Prepared p = prepare(moments, options, "mean-field");
  Eigen::MatrixXd J = -inverse_correlations(p);
  J.diagonal().setZero();
  Eigen::VectorXd h = mean_field_fields(p, J);
  return finish(p, std::move(J), std::move(h), moments.samples);
}

IsingModel fit_tap(const Moments& moments, const ClosedFormOptions& options) {
  Prepared p = prepare(moments, options, "tap");
  const Eigen::MatrixXd inv = inverse_correlations(p);
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(p.N, p.N);
  for (Eigen::Index i = 0; i < p.N; ++i)
    for (Eigen::Index j = i + 1; j < p.N; ++j) {
      // (C^-1)_ij = -J - 2 J^2 m_i m_j; the root that tends to mean-field as m -> 0
      const double x = inv(i, j), disc = 1 - 8 * x * p.m(i) * p.m(j);
      double v;
      if (disc >= 0) {
        v = -2 * x / (1 + std::sqrt(disc));
      } else if (options.mean_field_fallback) {
        v = -x;
        ++p.fallback_pairs;
      } else {
        no_root(p, i, j, "no real TAP coupling (1 - 8 (C^-1)_ij m_i m_j = " + num(disc) + " < 0)");
      }
      J(i, j) = J(j, i) = v;
    }
  Eigen::VectorXd h = tap_fields(p, J);
  return finish(p, std::move(J), std::move(h), moments.samples);
}

IsingModel fit_independent_pair(const Moments& moments, const ClosedFormOptions& options) {
  Prepared p = prepare(moments, options, "independent-pair");
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(p.N, p.N);
  const Eigen::VectorXd h0 = p.m.array().atanh();
  Eigen::VectorXd h = h0;
  for (Eigen::Index i = 0; i < p.N; ++i)
    for (Eigen::Index j = i + 1; j < p.N; ++j) {
      double hij = 0, hji = 0;
      J(i, j) = J(j, i) = independent_pair(p, i, j, &hij, &hji);
      // h_i = atanh m_i + sum_j (h_i^(j) - atanh m_i)
      h(i) += hij - h0(i);
      h(j) += hji - h0(j);
    }
  return finish(p, std::move(J), std::move(h), moments.samples);
}

IsingModel fit_sessak_monasson(const Moments& moments, const ClosedFormOptions& options) {
  Prepared p = prepare(moments, options, "sessak-monasson");
  const Eigen::MatrixXd inv = inverse_correlations(p);
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(p.N, p.N);
  for (Eigen::Index i = 0; i < p.N; ++i)
    for (Eigen::Index j = i + 1; j < p.N; ++j) {
      // J = -(C^-1)_ij + J^IP - C_ij / (L_i L_j - C_ij^2)   (Sessak & Monasson 2009)
      const double c = p.C(i, j);
      const double denom = p.C(i, i) * p.C(j, j) - c * c;
      if (!(denom > 0)) no_root(p, i, j, "the pair is perfectly correlated");
      J(i, j) = J(j, i) = -inv(i, j) + independent_pair(p, i, j, nullptr, nullptr) - c / denom;
    }
  p.extra["field_rule"] = "tap";
  Eigen::VectorXd h = tap_fields(p, J);
  return finish(p, std::move(J), std::move(h), moments.samples);
}

IsingModel fit_bethe(const Moments& moments, const ClosedFormOptions& options) {
  Prepared p = prepare(moments, options, "bethe");
  const Eigen::MatrixXd inv = inverse_correlations(p);
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(p.N, p.N);
  std::vector<char> fell_back(std::size_t(p.N * p.N), 0);
  for (Eigen::Index i = 0; i < p.N; ++i)
    for (Eigen::Index j = i + 1; j < p.N; ++j) {
      // Sheet §1.5: J = -atanh[(b - sqrt(b^2 - 4x^2)) / (2x)], b = r - 2 m_i m_j x,
      // r = sqrt(1 + 4 L_i L_j x^2); written as 2x / (b + sqrt(.)) when b > 0 (no cancellation).
      const double x = inv(i, j);
      if (x == 0) continue;
      const double Li = 1 - p.m(i) * p.m(i), Lj = 1 - p.m(j) * p.m(j);
      const double r = std::sqrt(1 + 4 * Li * Lj * x * x);
      const double b = r - 2 * p.m(i) * p.m(j) * x;
      const double D = b * b - 4 * x * x;
      double v = 0;
      bool ok = D >= 0;
      if (ok) {
        const double a = b > 0 ? 2 * x / (b + std::sqrt(D)) : (b - std::sqrt(D)) / (2 * x);
        ok = std::abs(a) < 1;
        if (ok) v = -std::atanh(a);
      }
      if (!ok) {
        if (!options.mean_field_fallback)
          no_root(p, i, j, D < 0 ? "negative Bethe discriminant (" + num(D) + ")"
                                 : "the Bethe coupling is infinite");
        v = -x;
        ++p.fallback_pairs;
        fell_back[std::size_t(i * p.N + j)] = fell_back[std::size_t(j * p.N + i)] = 1;
      }
      J(i, j) = J(j, i) = v;
    }
  // h_i = atanh m_i - sum_j atanh[t f(m_j, m_i, t)], t = tanh J_ij, with
  // t f = 2t (m1 - m2 t) / (1 - t^2 + sqrt((1 - t^2)^2 - 4t (m1 - m2 t)(m2 - m1 t))).
  Eigen::VectorXd h = p.m.array().atanh();
  for (Eigen::Index i = 0; i < p.N; ++i)
    for (Eigen::Index j = 0; j < p.N; ++j) {
      if (j == i || J(i, j) == 0) continue;
      if (fell_back[std::size_t(i * p.N + j)]) {  // mean-field field term for a fallback pair
        h(i) -= J(i, j) * p.m(j);
        continue;
      }
      const double t = std::tanh(J(i, j)), m1 = p.m(j), m2 = p.m(i);
      const double c = 1 - t * t;
      const double D = c * c - 4 * t * (m1 - m2 * t) * (m2 - m1 * t);
      double u = std::numeric_limits<double>::quiet_NaN();
      if (D >= 0) u = 2 * t * (m1 - m2 * t) / (c + std::sqrt(D));
      if (!(std::abs(u) < 1)) {
        if (!options.mean_field_fallback)
          no_root(p, i, j, "no real Bethe cavity field (discriminant " + num(D) + ")");
        h(i) -= J(i, j) * p.m(j);
        ++p.fallback_pairs;
        continue;
      }
      h(i) -= std::atanh(u);
    }
  return finish(p, std::move(J), std::move(h), moments.samples);
}

IsingModel fit_closed_form(const Moments& moments, const std::string& method,
                           const ClosedFormOptions& options) {
  if (method == "mean-field") return fit_mean_field(moments, options);
  if (method == "tap") return fit_tap(moments, options);
  if (method == "independent-pair") return fit_independent_pair(moments, options);
  if (method == "sessak-monasson") return fit_sessak_monasson(moments, options);
  if (method == "bethe") return fit_bethe(moments, options);
  std::string list;
  for (const auto& n : closed_form_methods()) list += (list.empty() ? "" : ", ") + n;
  throw InputError("closed-form method '" + method + "' is unknown; choose one of: " + list);
}

}  // namespace spinfer
