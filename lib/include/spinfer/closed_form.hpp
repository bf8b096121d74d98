// Closed-form (non-iterative) inverse Ising estimates from means and connected correlations.
//
// Every formula works on spin-convention moments (m_i = <s_i>, C_ij = <s_i s_j> - m_i m_j):
// moments given in the binary convention are converted first (C^spin = 4 C^binary). The returned
// model is in the spin convention (convert_model gives the binary twin). Formulas, from the
// papers named beside each, with x = (C^-1)_ij and L_i = 1 - m_i^2:
//
//   "mean-field"        J_ij = -x                                       (Kappen & Rodriguez 1998)
//                       h_i  = atanh m_i - sum_j J_ij m_j
//   "tap"               J_ij = -2x / (1 + sqrt(1 - 8 x m_i m_j))        (Kappen & Rodriguez 1998;
//                       h_i  = atanh m_i - sum_j J_ij m_j                Tanaka 1998)
//                              + m_i sum_j J_ij^2 (1 - m_j^2)
//   "independent-pair"  pair table p(a,b) = [1 + a m_i + b m_j + ab (C_ij + m_i m_j)] / 4
//                       J_ij = 1/4 ln[p(++) p(--) / (p(+-) p(-+))]     (Roudi, Aurell & Hertz 2009)
//                       h_i  = atanh m_i + sum_j (h_i^(j) - atanh m_i),
//                       h_i^(j) = 1/4 ln[p(++) p(+-) / (p(-+) p(--))]
//   "sessak-monasson"   J_ij = -x + J_ij^IP - C_ij / (L_i L_j - C_ij^2)  (Sessak & Monasson 2009)
//                       h_i by the TAP field rule above (our choice: the paper's own field series
//                       is not used; on exact SK moments the TAP field rule was as accurate as the Bethe one)
//   "bethe"             r = sqrt(1 + 4 L_i L_j x^2), b = r - 2 m_i m_j x,
//                       J_ij = -atanh[(b - sqrt(b^2 - 4x^2)) / (2x)]   (Ricci-Tersenghi 2012;
//                       h_i  = atanh m_i - sum_j atanh[t_ij f(m_j, m_i, t_ij)], Nguyen & Berg 2012)
//                       t = tanh J, f(m1,m2,t) = [1 - t^2 - sqrt((1-t^2)^2 - 4t(m1 - m2 t)(m2 - m1 t))]
//                                                / [2t(m2 - m1 t)]
//                       (evaluated in algebraically equal forms that avoid cancellation at small x, t).
//
// Failures are NumericalError, never NaN: a unit with |m| = 1, a singular or ill-conditioned C
// (duplicated units, fewer samples than units; message gives the condition number), a TAP square
// root or Bethe discriminant with no real root, an empty cell in a pair table (message names the
// pair). Options that change this: `shrinkage` (C -> (1 - λ) C + λ diag C, applied before every
// formula) and `mean_field_fallback` (use the mean-field coupling for a pair with no real root).
#pragma once

#include <string>
#include <vector>

#include "spinfer/model.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {

struct ClosedFormOptions {
  /// λ in [0, 1]: C -> (1 - λ) C + λ diag(C). Makes a singular C invertible; biases couplings
  /// towards zero. 0 = off.
  double shrinkage = 0;
  /// Largest accepted condition number of C (ratio of extreme eigenvalues) for the methods that
  /// invert it; above it the inverse has too few correct digits and a NumericalError is raised.
  double max_condition = 1e12;
  /// TAP / Bethe: for a pair with no real root, use the mean-field coupling -(C^-1)_ij instead of
  /// failing. The number of such pairs is recorded in provenance.extra["fallback_pairs"].
  bool mean_field_fallback = false;
};

/// Method names accepted by fit_closed_form.
const std::vector<std::string>& closed_form_methods();

/// Dispatches on `method` ("mean-field", "tap", "independent-pair", "sessak-monasson", "bethe");
/// throws InputError for another name. Provenance: method, samples (moments.samples), units,
/// version, converged = true, iterations = 0; extra holds shrinkage, condition number (when C is
/// inverted) and fallback_pairs.
IsingModel fit_closed_form(const Moments& moments, const std::string& method,
                           const ClosedFormOptions& options = {});

IsingModel fit_mean_field(const Moments& moments, const ClosedFormOptions& options = {});
IsingModel fit_tap(const Moments& moments, const ClosedFormOptions& options = {});
IsingModel fit_independent_pair(const Moments& moments, const ClosedFormOptions& options = {});
IsingModel fit_sessak_monasson(const Moments& moments, const ClosedFormOptions& options = {});
IsingModel fit_bethe(const Moments& moments, const ClosedFormOptions& options = {});

}  // namespace spinfer
