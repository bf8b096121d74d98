// Private engine behind pseudo-likelihood and interaction screening: for a coefficient matrix
// Theta (N x N, column i = couplings into unit i, diagonal zero) and fields h it evaluates, in the
// spin convention s = 2x - 1,
//   H_bi   = h_i + sum_j s_bj Theta_ji                       (local fields, all units at once)
//   loss_i = sum_b w_b phi(s_bi, H_bi)                        (not divided by the total weight)
//   grad_ji = sum_b s_bj w_b phi'(s_bi, H_bi),  grad_h_i = sum_b w_b phi'(s_bi, H_bi)
// with phi = log 2cosh H - s H (pseudo-likelihood) or exp(-s H) (interaction screening).
//
// The two products go through one of three representations, chosen once per data set:
//   dense   : blocks of rows converted to doubles, products through BLAS (GEMM);
//   sparse  : active lists; S Theta = 2 X Theta - 1 colsum(Theta), so only active entries cost;
//   patterns: distinct rows with counts (either kernel above then runs over the patterns).
// Work is split over fixed chunks of units (columns of Theta) that do not depend on the thread
// count, and each chunk runs over all rows in a fixed order, so results are bit-identical for
// any number of threads. Memory: O(N^2 + N * block rows) per thread; never T x N doubles.
//
// Sums over rows (loss sums, gradients, spin means, second moments) are formed per fixed segment
// of the selected kernel rows (4096 rows, 8192 for the sparse kernel, more for very long data:
// at most 4096 segments) and the segment sums are added order-free (order_free_sum.hpp), so the
// value does not depend on how segments are grouped. With a team of more than one rank (team.hpp), rank r evaluates only its contiguous
// share of the segments (Team::share) and the level sums are added over the ranks: every rank
// gets the single-process result bit for bit, whatever the rank count. The total weight and
// sample count are computed over all selected rows on every rank.
#pragma once

#include <cstdint>
#include <string>
#include <utility>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/patterns.hpp"
#include "spinfer/spin_matrix.hpp"
#include "spinfer/team.hpp"

namespace spinfer::detail {

enum class LocalLoss { pseudo_likelihood, screening };

struct RowRange {
  std::int64_t begin = 0, end = 0;
};

/// A representation chosen for one data set; shared by the fits of a penalty path.
class PreparedData {
 public:
  /// representation: "auto", "dense", "sparse", "patterns" (patterns + kernel chosen by density),
  /// "patterns-dense", "patterns-sparse". Throws InputError for other names.
  PreparedData(const SpinMatrix& data, const std::string& representation, int threads);

  const SpinMatrix& original() const { return *original_; }
  bool uses_patterns() const { return patterns_used_; }
  bool sparse_kernel() const { return sparse_; }
  /// "dense", "sparse", "patterns-dense" or "patterns-sparse".
  std::string description() const;
  /// Rows the kernels iterate over (patterns, or the original rows).
  std::int64_t kernel_rows() const;

 private:
  friend class LocalFields;
  const SpinMatrix* original_;
  bool patterns_used_ = false;
  bool sparse_ = false;
  PatternTable table_;   // when patterns are used (with the row map)
  ActiveLists active_;   // when the sparse kernel is used (of the rows it iterates)
  // Dense kernel: s = 2x - 1 of the rows it iterates as an N x rows double matrix, kept when it
  // takes at most kDenseCacheBytes (else blocks are converted on the fly in each evaluation).
  Eigen::MatrixXd dense_cache_;
};

/// A selection of rows of prepared data (a training fold, or everything).
class LocalFields {
 public:
  /// All rows. `team` (may be null: this process alone) shares the rows out, see above.
  explicit LocalFields(const PreparedData& prepared, int threads, const Team* team = nullptr);
  /// Only the listed ranges of original rows (e.g. all folds but one).
  LocalFields(const PreparedData& prepared, const std::vector<RowRange>& ranges, int threads,
              const Team* team = nullptr);

  std::int64_t units() const { return N_; }
  std::int64_t samples() const { return samples_; }   ///< original rows selected (all ranks)
  double total_weight() const { return total_weight_; }
  const PreparedData& prepared() const { return *prep_; }

  /// Evaluates loss sums (N) and, if `gradient`, grad (N x N, diagonal set to 0) and grad_h (N).
  /// With `wanted` (N flags), only the fixed unit chunks holding a wanted unit are computed and
  /// the other entries are left as they were. Unit i's entries depend only on column i of theta,
  /// h_i and the chunk layout (a function of N), never on other columns or on `wanted`: the
  /// per-unit optimiser relies on this to give any subset of units the same iterates.
  void evaluate(LocalLoss loss, const Eigen::MatrixXd& theta, const Eigen::VectorXd& h,
                bool gradient, Eigen::VectorXd& loss_sums, Eigen::MatrixXd& grad,
                Eigen::VectorXd& grad_h, const std::vector<char>* wanted = nullptr) const;

  /// Weighted means of s (N), for initial fields.
  Eigen::VectorXd spin_means() const;

  /// Weighted mean of z z^T with z = (s, 1): (N+1) x (N+1), the last row/column holding the
  /// means of s. Summed per segment, order-free (independent of threads and ranks).
  Eigen::MatrixXd second_moments() const;

  int threads() const { return threads_; }

 private:
  // Level sums (order_free_sum.hpp) of units [i0, i0 + nc) over this rank's segments; rows of
  // L0/L1/L2: loss, then (with the gradient) grad_h and the N gradient entries; bound(k) bounds
  // unit i0 + k's segment sums.
  void evaluate_chunk(LocalLoss loss, const Eigen::MatrixXd& theta, const Eigen::VectorXd& h,
                      bool gradient, std::int64_t i0, std::int64_t nc, const Eigen::VectorXd& bound,
                      Eigen::MatrixXd& L0, Eigen::MatrixXd& L1, Eigen::MatrixXd& L2) const;
  // The segment's sum of w z z^T from the active lists (sparse kernel only).
  void sparse_second_moments(std::int64_t segment, Eigen::MatrixXd& M) const;
  double weight(std::int64_t r) const { return weights_.empty() ? 1.0 : weights_[std::size_t(r)]; }
  std::int64_t segments() const { return std::int64_t(segment_start_.size()) - 1; }
  template <typename Fn>
  void for_each_piece(std::int64_t segment, Fn&& fn) const;
  // Adds level sums (3 x n) over the ranks, then replaces them by the n values.
  void finish_sums(std::vector<double>& levels, std::size_t n) const;

  const PreparedData* prep_;
  const SpinMatrix* rows_;          // the matrix the kernels iterate over
  std::vector<double> weights_;     // per row of rows_; empty = all 1
  // Segments of the selected rows of rows_ (the same for every thread and rank count): segment
  // s is pieces_[segment_start_[s] .. segment_start_[s + 1]).
  std::vector<RowRange> pieces_;
  std::vector<std::size_t> segment_start_;
  double segment_weight_max_ = 0;   // the largest total weight of one segment (sum bounds)
  std::int64_t first_segment_ = 0, end_segment_ = 0;  // this rank's segments
  const Team* team_ = nullptr;      // set only when it has more than one rank
  std::int64_t N_ = 0, samples_ = 0;
  double total_weight_ = 0;
  int threads_ = 1;
};

/// Restores OpenBLAS's thread count on scope exit; sets it to 1 meanwhile (we own threading and
/// single-threaded BLAS calls keep results independent of the thread count).
class SingleThreadedBlas {
 public:
  SingleThreadedBlas();
  ~SingleThreadedBlas();
  SingleThreadedBlas(const SingleThreadedBlas&) = delete;
  SingleThreadedBlas& operator=(const SingleThreadedBlas&) = delete;

 private:
  int previous_;
};

}  // namespace spinfer::detail
