// Interaction screening (Vuffray, Misra, Lokhov & Chertkov, NeurIPS 2016; Lokhov, Vuffray,
// Misra & Chertkov, Sci. Adv. 4:e1700791, 2018), in the spin convention (s = 2x - 1).
//
// Per unit i, the interaction screening objective
//   S_i(h_i, J_i.) = (1/W) sum_b w_b exp(-s_i H_i),    H_i = h_i + sum_{j != i} J_ij s_j,
// is minimised with an L1 (and optional L2) penalty on the couplings (fields unpenalised):
//   RISE:      S_i     + l1 sum_j |J_ij| + l2 sum_j J_ij^2
//   log-RISE:  log S_i + l1 sum_j |J_ij| + l2 sum_j J_ij^2   (same minimiser when unpenalised)
// Its population minimiser is the true (h, J) since E[s_i e^{-s_i H_i} | s_\i] = 0.
// The two per-unit estimates of a pair are averaged (J_ij = (J_ij^(i) + J_ji^(j)) / 2); the
// symmetric option ties them instead (the sum over units of the objective, as in §1.6 for PLM).
// Optimiser, convergence, representation, threads and determinism: as pseudo_likelihood.hpp.
#pragma once

#include <optional>
#include <string>

#include "spinfer/checkpoint.hpp"
#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/pseudo_likelihood.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct ScreeningOptions {
  bool logarithmic = false;              ///< log-RISE instead of RISE
  bool symmetric = false;                ///< tie J_ij = J_ji (else per-variable + averaging)
  double l1 = automatic_penalty;         ///< L1 penalty per unit (automatic: held out)
  double l2 = 0;                         ///< L2 penalty per unit (automatic: held out)
  int max_iterations = 1000;
  double tolerance = 1e-5;               ///< largest per-sample (sub)gradient entry
  int threads = 0;
  std::optional<IsingModel> warm_start;
  ProgressCallback progress;
  std::string representation = "auto";
  CheckpointHooks checkpoint;            ///< save / resume the optimiser state (checkpoint.hpp)
  const Team* team = nullptr;            ///< ranks sharing the work (as PseudoLikelihoodOptions)
};

/// Fits by interaction screening. Provenance: method "screening", extra {"variant": "rise" |
/// "log-rise", "symmetric", "representation", "unconverged_units", "preconditioning",
/// "penalty_selection", ... as fit_pseudo_likelihood}.
IsingModel fit_screening(const SpinMatrix& data, const ScreeningOptions& options = {});

}  // namespace spinfer
