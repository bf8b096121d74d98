// Sampling noise of data statistics by the non-overlapping block bootstrap: recordings are time
// series, so bins are not independent; resampling whole blocks of consecutive bins keeps the
// short-range dependence inside each block (Kunsch 1989; Efron & Tibshirani 1993, ch. 8).
// Each replicate draws T/L blocks with replacement, which is the same as giving every row the
// multiplicity of its block, so a replicate is one weighted pass of the statistics kernels.
#pragma once

#include <array>
#include <cstdint>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct BlockBootstrapOptions {
  std::int64_t replicates = 200;
  std::int64_t block_length = 0;  ///< rows per block; 0 = automatic (default_block_length)
  std::uint64_t seed = 0;
  int threads = 1;
  ProgressCallback progress;
};

/// Block length from the data: ten times the integrated autocorrelation time tau of the population
/// activity K(t) (number of active units per bin), at least 1 and at most T/20. Blocks must be long
/// against tau or the bootstrap underestimates the noise by about tau/L (measured on a Markov chain
/// in tests/python/test_bootstrap.py: L = 2 tau gave 0.78 of the exact SE, L = 10 tau gave 0.98).
/// tau uses Sokal's automatic window (stop at the first lag M with M >= 5 tau(M)).
std::int64_t default_block_length(const SpinMatrix& data);

/// Row multiplicities for one block-bootstrap replicate (size T; integers as doubles). Uses the
/// given 64-bit generator state (std::mt19937_64 seeded from seed and replicate index).
std::vector<double> block_bootstrap_weights(std::int64_t rows, std::int64_t block_length,
                                            std::uint64_t seed, std::int64_t replicate);

/// Standard errors (bootstrap standard deviations) of the data statistics used in model checks,
/// in the requested convention.
struct DataNoise {
  Eigen::VectorXd mean_se;        ///< N
  Eigen::MatrixXd connected_se;   ///< N x N
  Eigen::MatrixXd second_se;      ///< N x N, raw second moments <v_i v_j>
  Eigen::VectorXd count_se;       ///< N+1, for P(K)
  std::vector<double> triplet_se; ///< one per requested triple
  std::int64_t block_length = 0;
  std::int64_t replicates = 0;
};

DataNoise bootstrap_noise(const SpinMatrix& data, Convention convention,
                          const std::vector<std::array<std::int64_t, 3>>& triples,
                          const BlockBootstrapOptions& options);

}  // namespace spinfer
