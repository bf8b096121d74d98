// Exact statistics of a small IsingModel by enumerating all 2^N states (N <= 24).
//
// At temperature T the distribution is P_T(v) = exp(-E(v) / T) / Z_T, with E the model's energy in
// its own convention (model.hpp). The 2^N states are visited in Gray-code order inside fixed blocks
// of the state space, so each step flips one unit and updates the energy through that unit's local
// field in O(N). Weights are accumulated relative to a running reference (log-sum-exp), so any
// parameter scale is safe. Blocks are fixed by N alone and reduced in block order: results are
// bit-identical for every thread count.
//
// Cost: O(2^N N^2) for the moments (batched through BLAS), O(2^N N) for log Z alone. Measured on
// one core (benchmarks/bench_exact.py): N = 20 in 0.15 s (log Z alone 0.09 s), N = 24 in 2.8 s.
//
// State index convention (exact_state_probabilities): state k has unit i active iff bit i of k is
// set (unit 0 is the least significant bit).
#pragma once

#include <cstdint>

#include <Eigen/Dense>

#include "spinfer/model.hpp"
#include "spinfer/spin_matrix.hpp"
#include "spinfer/stats.hpp"

namespace spinfer {

/// Largest model exact enumeration accepts.
constexpr std::int64_t kMaxExactUnits = 24;

struct ExactOptions {
  double temperature = 1.0;                      ///< T > 0; P ∝ exp(-E / T)
  Convention convention = Convention::binary;    ///< convention of the returned moments
  int threads = 1;                               ///< <= 0: automatic (resolve_threads)
};

struct ExactStatistics {
  double temperature = 1.0;
  Convention model_convention = Convention::spin;  ///< convention of E and log Z
  double log_partition = 0;    ///< log Z_T = log sum_v exp(-E(v) / T), E in the model's convention
  Moments moments;             ///< means, raw second moments, connected, in options.convention
                               ///< (total_weight = 1, samples = 0, kernel_used = "exact")
  Eigen::VectorXd active_count;  ///< P(K), K = 0..N active units
  double entropy = 0;          ///< -sum P log P, nats (independent of the convention)
  double mean_energy = 0;      ///< <E>, in the model's convention (the two differ by a constant)
  double specific_heat = 0;    ///< Var(E) / (N T^2) (independent of the convention)
};

/// All of the above in one pass. Throws InputError for an invalid model, N = 0 or N > 24, or a
/// temperature that is not finite and positive.
ExactStatistics exact_statistics(const IsingModel& model, const ExactOptions& options = {});

/// log Z_T only (cheaper: no moments).
double exact_log_partition(const IsingModel& model, double temperature = 1.0, int threads = 1);

/// The 2^N probabilities P_T(state k) in the index convention above (2^N doubles: 128 MB at N=24).
Eigen::VectorXd exact_state_probabilities(const IsingModel& model, double temperature = 1.0,
                                          int threads = 1);

/// All 2^N states as a SpinMatrix (row k = state k, in `convention`) weighted by their exact
/// probabilities at T = `temperature`: population weights for checking estimators.
/// Limited to N <= 20 (the byte matrix has 2^N x N entries).
SpinMatrix exact_weighted_states(const IsingModel& model, Convention convention,
                                 double temperature = 1.0, int threads = 1);

/// Mean log-probability per sample of `data` under the model at T = 1, weighted by the data's
/// sample weights: sum_t w_t log P(row_t) / sum_t w_t (nats). The data's bits are read as states
/// (a row's convention does not matter). Throws InputError if the column counts differ.
double exact_log_likelihood(const IsingModel& model, const SpinMatrix& data, int threads = 1);

}  // namespace spinfer
