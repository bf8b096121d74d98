// Which couplings are trustworthy? (issue "Sampler, exact enumeration and model checking", item 6.)
//
// 1. Confidence intervals: block-bootstrap replicates of the recording (bootstrap.hpp: whole
//    blocks of consecutive bins, so temporal correlation is kept), each refitted with the same
//    estimator; percentile intervals and bootstrap standard errors for every J_ij.
// 2. Null distribution: circularly time-shifted surrogates. In each surrogate the units are split
//    at random into two groups and the second group is rotated in time as a block by a random
//    offset (at least one block length from zero). Every unit keeps its rate and autocorrelation,
//    each group keeps its internal structure, and all synchrony between the groups is destroyed;
//    the whole model is refitted on each surrogate (circular-shift surrogates: common practice), and the |J| of the
//    pairs split across the groups are the null values. Keeping the groups' own structure
//    matters: shifting every unit separately removes all couplings, which shrinks the
//    estimator's noise (for mean-field, the variance of J_ij grows with (C^-1)_ii (C^-1)_jj) and
//    gave a null far too narrow on a network of strongly coupled pairs (tests/python/
//    test_significance.py). Null values of all surrogates are pooled (an assumption: pairs are
//    exchangeable under the null; it needs far fewer refits than a per-pair null).
// 3. p-value of pair (i, j): (1 + #{null |J| >= |J_ij|}) / (1 + #null), then the Benjamini-
//    Hochberg step-up procedure at the chosen false discovery rate (Benjamini & Hochberg 1995).
//
// The estimator is passed in as a function so any fitting method (and its penalty) can be used;
// replicates are seeded from (seed, replicate) and the result is the same for any thread count.
//
// Checkpoints (checkpoint.hpp): the consistent points are the ends of the refits. A state (kind
// "significance", version 1) holds units, samples, block_length, seed, convention, "estimate"
// (the full-data couplings as a list of rows, or null before that fit has finished),
// "bootstrap" (per finished replicate, J_ij for i < j row by row) and "null" (per finished
// surrogate, the |J| of the pairs across its groups, in pair order). A refit stopped by an
// interruption (the fitter may throw Interrupted from its own progress callback) is dropped and
// run again on resume. Since every replicate has its own random stream, a state also resumes a
// run with more replicates than the one that saved it, to that run's result.
#pragma once

#include <cstdint>
#include <functional>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/checkpoint.hpp"
#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

/// Fits a model to (possibly weighted) data; any convention (results are converted).
using Fitter = std::function<IsingModel(const SpinMatrix&)>;

struct SignificanceOptions {
  std::int64_t bootstrap_replicates = 100;
  std::int64_t null_replicates = 20;
  std::int64_t block_length = 0;       ///< 0 = automatic (default_block_length)
  double confidence = 0.95;            ///< of the percentile intervals
  double fdr = 0.05;                   ///< Benjamini-Hochberg false discovery rate
  Convention convention = Convention::spin;  ///< convention of the reported couplings
  std::uint64_t seed = 0;
  ProgressCallback progress;            ///< after every refit
  /// Saving and resuming (see "Checkpoints" above); the data, fitter and options must be the
  /// saving run's (replicate counts may grow).
  CheckpointHooks checkpoint;
};

struct SignificanceResult {
  Convention convention = Convention::spin;
  Eigen::MatrixXd estimate;        ///< J of the fit to the full data
  Eigen::MatrixXd standard_error;  ///< bootstrap standard deviation of J_ij
  Eigen::MatrixXd lower, upper;    ///< percentile interval bounds
  Eigen::MatrixXd p_value;         ///< against the pooled shift null
  Eigen::MatrixXd q_value;         ///< Benjamini-Hochberg adjusted p-values
  Eigen::MatrixXi significant;     ///< 1 where q <= fdr
  std::vector<double> null_abs;    ///< pooled null |J| values (sorted)
  std::int64_t block_length = 0, bootstrap_replicates = 0, null_replicates = 0;
  double confidence = 0.95, fdr = 0.05;
};

/// Throws InputError on bad options or a resume state that does not fit (kind, version, sizes,
/// block length, seed, convention); Interrupted when the progress callback returns false or the
/// fitter throws it (after handing the state to options.checkpoint.save); whatever `fit` throws.
SignificanceResult coupling_significance(const SpinMatrix& data, const Fitter& fit,
                                         const SignificanceOptions& options);

/// Benjamini-Hochberg adjusted p-values (same order as the input), as in
/// scipy.stats.false_discovery_control(p, method="bh").
std::vector<double> benjamini_hochberg(const std::vector<double>& p);

/// A group-shift surrogate (see 2. above): the units of a random group are rotated in time by one
/// offset in [min_offset, T - min_offset]; `shifted` (optional) receives 1 for rotated units.
SpinMatrix circular_shift_surrogate(const SpinMatrix& data, std::int64_t min_offset,
                                    std::uint64_t seed, std::int64_t replicate,
                                    std::vector<std::uint8_t>* shifted = nullptr);

}  // namespace spinfer
