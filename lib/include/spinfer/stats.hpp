// Sufficient statistics of a SpinMatrix, weighted, multithreaded.
//
// All moments are weighted averages over samples: <f> = sum_t w_t f(row_t) / sum_t w_t.
// They are reported in a chosen convention (binary x in {0,1} or spin s = 2x - 1):
//   mean_i        = <v_i>
//   second_ij     = <v_i v_j>                (raw; diagonal = <v_i^2>)
//   connected_ij  = <v_i v_j> - <v_i><v_j>   (covariance; C^spin = 4 C^binary)
// Pairwise products are computed on the active bits with one of two kernels, chosen by density:
// sparse pair accumulation over active lists (low activity), or blocked dense products through
// BLAS (high activity). Unweighted results are exact integer counts, so they are identical for
// any thread count and either kernel.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/spin_matrix.hpp"

namespace spinfer {

enum class PairKernel { automatic, sparse, dense };

struct StatsOptions {
  int threads = 1;                               ///< <= 0: automatic (see resolve_threads)
  PairKernel kernel = PairKernel::automatic;
  double sparse_density_threshold = 0.15;        ///< automatic: sparse below this density
};

struct Moments {
  Convention convention = Convention::binary;
  Eigen::VectorXd mean;        ///< N
  Eigen::MatrixXd second;      ///< N x N raw second moments
  Eigen::MatrixXd connected;   ///< N x N covariance
  double total_weight = 0;     ///< sum of sample weights
  std::int64_t samples = 0;    ///< number of rows
  std::string kernel_used;     ///< "sparse" or "dense"
};

/// Means, raw and connected pairwise correlations.
Moments compute_moments(const SpinMatrix& data, Convention out = Convention::binary,
                        const StatsOptions& options = {});

/// Converts moments between conventions exactly (s = 2x - 1).
Moments convert_moments(const Moments& m, Convention to);

/// Means only (cheaper).
Eigen::VectorXd compute_means(const SpinMatrix& data, Convention out = Convention::binary,
                              int threads = 1);

/// P(K): weighted distribution of the number of simultaneously active units, K = 0..N.
Eigen::VectorXd active_count_distribution(const SpinMatrix& data, int threads = 1);

/// Connected third-order correlation <dv_i dv_j dv_k> (dv = v - <v>) for each triple, in the
/// requested convention (the spin value is 8 times the binary one).
std::vector<double> connected_triplets(const SpinMatrix& data,
                                       const std::vector<std::array<std::int64_t, 3>>& triples,
                                       Convention out = Convention::binary, int threads = 1);

}  // namespace spinfer
