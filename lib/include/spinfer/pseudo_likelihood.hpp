// Pseudo-likelihood maximisation (PLM) for the pairwise model, in the spin convention.
//
// Data bits x are read as spins s = 2x - 1 whatever the data's stated convention; the model is
// returned in the spin convention (convert_model() gives the binary one). For unit i,
//   H_i = h_i + sum_{j != i} J_ij s_j,
//   l_i = (1/W) sum_b w_b [ s_i H_i - log 2cosh H_i ]     (W = total sample weight)
// is the mean log conditional likelihood of s_i given the others (Besag 1975; a logistic
// regression of s_i on s_{\i} with coefficients 2 J_i. and intercept 2 h_i).
//
// Two variants (Besag 1975; Aurell & Ekeberg 2012):
//   per-variable (default): for each i, minimise -l_i + l2 sum_j J_ij^2 + l1 sum_j |J_ij| over
//     (h_i, J_i.) independently, then average the two estimates of each pair:
//     J_ij = (J_ij^(i) + J_ji^(j)) / 2.
//   symmetric: minimise sum_i [-l_i + l2 sum_j J_ij^2 + l1 sum_j |J_ij|] with J_ij = J_ji tied
//     (so each pair carries 2 l2 J_ij^2 + 2 l1 |J_ij|: the same penalty per unit as above).
// Fields are never penalised. Penalties are per-sample quantities (the likelihood is averaged,
// not summed), so a fixed prior corresponds to penalties falling like 1/T.
//
// Optimiser: L-BFGS for L2 only, OWL-QN when l1 > 0 (Andrew & Gao 2007), one independent
// optimiser state per unit advanced in lock-step (lockstep_lbfgs.hpp): every round evaluates all
// running units together, so both heavy products per round are matrix-matrix products (see
// `representation`), yet unit i's iterates never depend on the other units (shards and MPI
// ranks reproduce the full fit exactly; unit_fits.hpp). The symmetric objective is one problem.
// Convergence: every unit's largest gradient entry (for L1 the minimum-norm subgradient) of its
// per-sample objective is at most `tolerance`; the flag is kept per unit (provenance.extra
// "unconverged_units") and overall (provenance.converged).
// Results are bit-identical for any thread count (work is split over fixed chunks of units).
#pragma once

#include <optional>
#include <string>

#include "spinfer/checkpoint.hpp"
#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"
#include "spinfer/team.hpp"

namespace spinfer {

/// Penalty value meaning "choose it on held-out data" (see penalty_path.hpp, choose_penalty).
inline constexpr double automatic_penalty = -1.0;

struct PseudoLikelihoodOptions {
  bool symmetric = false;                ///< tie J_ij = J_ji (else per-variable + averaging)
  double l1 = 0;                         ///< L1 penalty per unit (automatic_penalty: held out)
  double l2 = automatic_penalty;         ///< L2 penalty per unit (automatic_penalty: held out)
  int max_iterations = 1000;             ///< L-BFGS iterations
  double tolerance = 1e-5;               ///< largest per-sample gradient entry at convergence
  int threads = 0;                       ///< <= 0: automatic (resolve_threads)
  std::optional<IsingModel> warm_start;  ///< starting point (either convention; same units)
  ProgressCallback progress;             ///< called every iteration; false => Interrupted
  /// How the products are computed: "auto", "dense", "sparse", "patterns" (unique rows with
  /// counts), "patterns-dense", "patterns-sparse". "auto" uses patterns when they cut the rows by
  /// 40 % or more, and the sparse kernel below 10 % activity. Reported in provenance.extra.
  std::string representation = "auto";
  CheckpointHooks checkpoint;            ///< save / resume the optimiser state (checkpoint.hpp)
  /// Ranks sharing the work (team.hpp); null: this process alone. Every rank must make the same
  /// call and returns the single-process model bit for bit. The symmetric objective and the
  /// held-out penalty choice share the samples (each rank takes a contiguous share of the rows;
  /// the per-iteration sums are added over ranks, local_fields.hpp). The per-variable fit shares
  /// the units (rows of J): each rank fits a contiguous share of the N problems on all samples,
  /// and the columns are gathered to every rank (needs N >= ranks; else the samples are shared).
  /// Checkpoint states have the one-process layout: any rank count resumes them.
  const Team* team = nullptr;
};

/// Fits by pseudo-likelihood. Provenance: method "pseudo-likelihood", l1, l2 (the values used),
/// iterations, converged, objective (the minimised penalised objective: per-variable, the sum
/// over units before averaging the pairs), samples, units, version, extra {"variant",
/// "representation", "unconverged_units", "preconditioning" ("whitened": one factor of the
/// inputs' second moments per unit, up to 200 units; "whitened-shared": one factor for all units,
/// above; "centred"; "none"), "tolerance", "evaluations", "rounds", "unit_ranks" (MPI, units
/// shared), and "penalty_selection" when a penalty was chosen}.
/// Throws InputError for constant units (a field would be infinite) or a warm start of the wrong
/// size, Interrupted when the progress callback returns false.
IsingModel fit_pseudo_likelihood(const SpinMatrix& data, const PseudoLikelihoodOptions& options = {});

/// Mean per-sample pseudo-log-likelihood sum_i l_i of `model` (either convention) on `data`
/// (weighted mean over samples; the sum runs over units). Higher is better.
double pseudo_log_likelihood(const IsingModel& model, const SpinMatrix& data, int threads = 0);

}  // namespace spinfer
