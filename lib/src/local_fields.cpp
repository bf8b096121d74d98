#include "local_fields.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <tuple>
#include <vector>

#include "order_free_sum.hpp"
#include "sparse_rows.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/threads.hpp"

extern "C" int openblas_get_num_threads(void);

namespace spinfer::detail {

// Elementwise kernels (local_kernels.inc), two compiled copies.
void plm_generic(const double*, const double*, double*, double*, std::int64_t, bool);
void plm_avx2(const double*, const double*, double*, double*, std::int64_t, bool);
void rise_generic(const double*, const double*, double*, double*, std::int64_t, bool);
void rise_avx2(const double*, const double*, double*, double*, std::int64_t, bool);

namespace {

using Eigen::ArrayXXd;
using Eigen::Index;
using Eigen::MatrixXd;
using Eigen::VectorXd;
using ByteMap = Eigen::Map<const Eigen::Matrix<std::uint8_t, Eigen::Dynamic, Eigen::Dynamic>,
                           0, Eigen::OuterStride<>>;

// Density below which the sparse kernel wins. Measured with benchmarks/bench_pseudo_likelihood.py
// (kernel sweep): the sparse gather/scatter costs ~2 d N^2 memory-bound operations per row
// against 4 N^2 BLAS flops for the dense kernel, so the crossover sits near 10 % activity.
constexpr double kSparseBelowDensity = 0.10;
// Patterns are used when they cut the rows to iterate by at least this factor.
constexpr double kPatternsBelowRatio = 0.6;

// Largest dense +-1 copy of the data kept for the dense kernel (saves the per-evaluation byte to
// double conversion, which otherwise costs about half as much as the products for small N).
constexpr double kDenseCacheBytes = 256.0 * 1024 * 1024;

// Rows per kernel block: the dense kernel's GEMMs and the sparse kernel's gathers.
std::int64_t kernel_block(bool sparse) { return sparse ? 512 : 1024; }

// Rows are summed in fixed segments of whole kernel blocks: at least 4 blocks (8 for the sparse
// kernel) so the order-free additions stay a small share of the work (a few per cent in
// measurements), and at most kMaxSegments segments (ranks beyond that would idle).
constexpr std::int64_t kMaxSegments = 4096;

// Fixed unit chunks (independent of the thread count, so results are too).
std::int64_t chunk_size(std::int64_t N, bool sparse) {
  const std::int64_t minimum = sparse ? 64 : 16;
  return std::min(N, std::max<std::int64_t>(minimum, (N + 31) / 32));
}

bool cpu_has_avx2() {
  static const bool yes = __builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma");
  return yes;
}

// phi and w * phi' for one block; S holds s = +-1, H the local fields.
//   pseudo-likelihood: phi = log 2cosh H - s H, phi' = tanh H - s   (Besag 1975)
//   screening:         phi = e^{-s H},  phi' = -s e^{-s H}          (Vuffray et al. 2016; §1.7)
void nonlinearity(LocalLoss loss, const ArrayXXd& H, const ArrayXXd& S, const double* w,
                  bool gradient, ArrayXXd& phi, ArrayXXd& R) {
  const Index cols = H.cols();
  phi.resize(H.rows(), cols);
  if (gradient) R.resize(H.rows(), cols);
  const bool avx2 = cpu_has_avx2();
  auto kernel = loss == LocalLoss::pseudo_likelihood ? (avx2 ? plm_avx2 : plm_generic)
                                                     : (avx2 ? rise_avx2 : rise_generic);
  kernel(H.data(), S.data(), phi.data(), gradient ? R.data() : nullptr, H.size(), gradient);
  if (w) {
    for (Index b = 0; b < cols; ++b) {
      phi.col(b) *= w[b];
      if (gradient) R.col(b) *= w[b];
    }
  }
}

}  // namespace

SingleThreadedBlas::SingleThreadedBlas() : previous_(openblas_get_num_threads()) {
  set_blas_threads(1);
}
SingleThreadedBlas::~SingleThreadedBlas() { set_blas_threads(previous_); }

PreparedData::PreparedData(const SpinMatrix& data, const std::string& representation,
                           int threads)
    : original_(&data) {
  const std::string& r = representation;
  if (r != "auto" && r != "dense" && r != "sparse" && r != "patterns" && r != "patterns-dense" &&
      r != "patterns-sparse")
    throw InputError("representation '" + r +
                     "' is not one of auto, dense, sparse, patterns, patterns-dense, "
                     "patterns-sparse");
  if (r == "auto") {
    // A cheap probe on the first rows: a subsample never repeats more than the whole does.
    const std::int64_t probe_rows = std::min<std::int64_t>(data.rows(), 20000);
    if (data.rows() >= 64) {
      PatternTable probe = unique_patterns(data.slice_rows(0, probe_rows));
      patterns_used_ = probe.compression_ratio() < kPatternsBelowRatio;
    }
  } else {
    patterns_used_ = r.rfind("patterns", 0) == 0;
  }
  if (patterns_used_) table_ = unique_patterns(data, true);
  const SpinMatrix& rows = patterns_used_ ? table_.patterns : data;
  if (r == "sparse" || r == "patterns-sparse") sparse_ = true;
  else if (r == "dense" || r == "patterns-dense") sparse_ = false;
  else sparse_ = estimate_density(rows) < kSparseBelowDensity;
  if (sparse_) {
    active_ = active_lists(rows, threads);
  } else if (8.0 * double(rows.rows()) * double(rows.cols()) <= kDenseCacheBytes) {
    ByteMap bytes(rows.data(), rows.cols(), rows.rows(), Eigen::OuterStride<>(rows.cols()));
    dense_cache_ = bytes.cast<double>() * 2.0 - MatrixXd::Ones(rows.cols(), rows.rows());
  }
}

std::string PreparedData::description() const {
  return std::string(patterns_used_ ? "patterns-" : "") + (sparse_ ? "sparse" : "dense");
}

std::int64_t PreparedData::kernel_rows() const {
  return patterns_used_ ? table_.patterns.rows() : original_->rows();
}

LocalFields::LocalFields(const PreparedData& prepared, int threads, const Team* team)
    : LocalFields(prepared, {RowRange{0, prepared.original().rows()}}, threads, team) {}

LocalFields::LocalFields(const PreparedData& prepared, const std::vector<RowRange>& ranges,
                         int threads, const Team* team)
    : prep_(&prepared), N_(prepared.original().cols()), threads_(resolve_threads(threads)) {
  const SpinMatrix& data = prepared.original();
  for (const RowRange& g : ranges)
    if (g.begin < 0 || g.end > data.rows() || g.begin > g.end)
      throw InputError("row range [" + std::to_string(g.begin) + ", " + std::to_string(g.end) +
                       ") is outside the data's " + std::to_string(data.rows()) + " rows");
  std::vector<RowRange> kernel_ranges;  // of rows_
  if (prepared.uses_patterns()) {
    // Pattern weights restricted to the selected rows (zero-weight patterns are skipped).
    rows_ = &prepared.table_.patterns;
    const auto& map = prepared.table_.row_to_pattern;
    std::vector<double> w(std::size_t(rows_->rows()), 0.0);
    for (const RowRange& g : ranges)
      for (std::int64_t t = g.begin; t < g.end; ++t) w[std::size_t(map[std::size_t(t)])] += data.weight(t);
    for (std::int64_t p = 0; p < rows_->rows();) {  // ranges of patterns with positive weight
      while (p < rows_->rows() && w[std::size_t(p)] == 0.0) ++p;
      std::int64_t q = p;
      while (q < rows_->rows() && w[std::size_t(q)] != 0.0) ++q;
      if (q > p) kernel_ranges.push_back({p, q});
      p = q;
    }
    weights_ = std::move(w);
  } else {
    rows_ = &data;
    for (const RowRange& g : ranges)
      if (g.end > g.begin) kernel_ranges.push_back(g);
    if (data.weighted()) weights_ = data.weights();
  }
  for (const RowRange& g : ranges) {
    samples_ += g.end - g.begin;
    for (std::int64_t t = g.begin; t < g.end; ++t) total_weight_ += data.weight(t);
  }
  if (!(total_weight_ > 0)) throw InputError("no samples (or zero total weight) to fit");

  // Segments: consecutive runs of segment_rows selected kernel rows (the last one shorter).
  std::int64_t selected = 0;
  for (const RowRange& g : kernel_ranges) selected += g.end - g.begin;
  const std::int64_t block = kernel_block(prepared.sparse_kernel());
  const std::int64_t segment_rows =
      block * std::max<std::int64_t>(prepared.sparse_kernel() ? 8 : 4,
                                     (selected + kMaxSegments * block - 1) / (kMaxSegments * block));
  segment_start_.push_back(0);
  std::int64_t filled = 0;  // rows in the current segment
  double seg_weight = 0;
  for (const RowRange& g : kernel_ranges) {
    for (std::int64_t b = g.begin; b < g.end;) {
      const std::int64_t e = std::min(g.end, b + (segment_rows - filled));
      pieces_.push_back({b, e});
      for (std::int64_t r = b; r < e; ++r) seg_weight += weight(r);
      filled += e - b;
      b = e;
      if (filled == segment_rows) {
        segment_start_.push_back(pieces_.size());
        segment_weight_max_ = std::max(segment_weight_max_, seg_weight);
        filled = 0;
        seg_weight = 0;
      }
    }
  }
  if (filled > 0) {
    segment_start_.push_back(pieces_.size());
    segment_weight_max_ = std::max(segment_weight_max_, seg_weight);
  }
  end_segment_ = segments();
  if (shared_work(team)) {  // this rank's contiguous share of the segments
    team_ = team;
    std::tie(first_segment_, end_segment_) = team->my_share(segments());
  }
}

template <typename Fn>
void LocalFields::for_each_piece(std::int64_t segment, Fn&& fn) const {
  for (std::size_t k = segment_start_[std::size_t(segment)]; k < segment_start_[std::size_t(segment) + 1]; ++k)
    fn(pieces_[k]);
}

void LocalFields::finish_sums(std::vector<double>& levels, std::size_t n) const {
  if (team_) team_->sum(levels.data(), levels.size());
  for (std::size_t e = 0; e < n; ++e) levels[e] = split_value(levels[e], levels[n + e], levels[2 * n + e]);
  levels.resize(n);
}

VectorXd LocalFields::spin_means() const {
  const std::size_t N = std::size_t(N_);
  const SplitGrid grid = SplitGrid::for_bound(segment_weight_max_, segments());  // |w s| <= w
  std::vector<double> levels(3 * N, 0.0);
  VectorXd m(N_);
  for (std::int64_t s = first_segment_; s < end_segment_; ++s) {
    m.setZero();
    for_each_piece(s, [&](const RowRange& g) {
      for (std::int64_t r = g.begin; r < g.end; ++r) {
        const std::uint8_t* x = rows_->row(r);
        const double w = weight(r);
        for (std::int64_t i = 0; i < N_; ++i) m(i) += w * (2.0 * x[i] - 1.0);
      }
    });
    split_add(grid, m.data(), &levels[0], &levels[N], &levels[2 * N], N_);
  }
  finish_sums(levels, N);
  return Eigen::Map<const VectorXd>(levels.data(), N_) / total_weight_;
}

MatrixXd LocalFields::second_moments() const {
  // One partial sum per segment (GEMMs over blocks of at most 4096 rows), added order-free; each
  // worker thread keeps its own level sums, which add exactly.
  constexpr std::int64_t block = 4096;
  const std::int64_t N = N_;
  const std::size_t n = std::size_t((N + 1) * (N + 1));
  const SplitGrid grid = SplitGrid::for_bound(segment_weight_max_, segments());  // |w z z| <= w
  const int workers = std::max(1, std::min<int>(threads_, int(std::max<std::int64_t>(1, end_segment_ - first_segment_))));
  std::vector<std::vector<double>> levels(std::size_t(workers), std::vector<double>(3 * n, 0.0));
  SingleThreadedBlas single;
  const bool sparse = prep_->sparse_kernel();
  parallel_chunks(end_segment_ - first_segment_, workers, [&](std::int64_t a, std::int64_t b, int t) {
    std::vector<double>& lv = levels[std::size_t(t)];
    MatrixXd M(N + 1, N + 1);
    for (std::int64_t s = first_segment_ + a; s < first_segment_ + b; ++s) {
      M.setZero();
      if (sparse) sparse_second_moments(s, M);
      else for_each_piece(s, [&](const RowRange& g) {
        for (std::int64_t b0 = g.begin; b0 < g.end; b0 += block) {
          const std::int64_t nb = std::min(block, g.end - b0);
          MatrixXd Z(N + 1, nb);
          ByteMap bytes(rows_->row(b0), N, nb, Eigen::OuterStride<>(N));
          Z.topRows(N) = bytes.cast<double>() * 2.0 - MatrixXd::Ones(N, nb);
          Z.row(N).setOnes();
          MatrixXd Zw = Z;
          if (!weights_.empty())
            for (std::int64_t c = 0; c < nb; ++c) Zw.col(c) *= weights_[std::size_t(b0 + c)];
          M.noalias() += Zw * Z.transpose();  // GEMM
        }
      });
      split_add(grid, M.data(), &lv[0], &lv[n], &lv[2 * n], std::int64_t(n));
    }
  });
  for (std::size_t t = 1; t < levels.size(); ++t)
    for (std::size_t e = 0; e < 3 * n; ++e) levels[0][e] += levels[t][e];
  finish_sums(levels[0], n);
  return Eigen::Map<const MatrixXd>(levels[0].data(), N + 1, N + 1) / total_weight_;
}

void LocalFields::sparse_second_moments(std::int64_t segment, MatrixXd& M) const {
  // With x in {0, 1} and s = 2x - 1: sum w s_a s_b = 4 X_ab - 2 d_a - 2 d_b + W, where
  // X_ab = sum w x_a x_b (accumulated over each row's active pairs: k^2 / 2 per row with k
  // active units, instead of N^2 for the dense product), d_a = X_aa and W = sum w.
  const ActiveLists& act = prep_->active_;
  const std::int64_t N = N_;
  double W = 0;
  for_each_piece(segment, [&](const RowRange& g) {
    for (std::int64_t r = g.begin; r < g.end; ++r) {
      const double w = weight(r);
      W += w;
      const std::int32_t* first = act.indices.data() + act.offsets[std::size_t(r)];
      const std::int32_t* last = act.indices.data() + act.offsets[std::size_t(r + 1)];
      for (const std::int32_t* p = first; p < last; ++p) {
        double* column = M.data() + std::int64_t(*p) * (N + 1);  // upper triangle: rows <= *p
        for (const std::int32_t* q = first; q <= p; ++q) column[*q] += w;
      }
    }
  });
  const VectorXd d = M.diagonal().head(N);
  for (std::int64_t b = 0; b < N; ++b)
    for (std::int64_t a = 0; a <= b; ++a) M(a, b) = M(b, a) = 4.0 * M(a, b) - 2.0 * d(a) - 2.0 * d(b) + W;
  for (std::int64_t a = 0; a < N; ++a) M(a, N) = M(N, a) = 2.0 * d(a) - W;
  M(N, N) = W;
}

void LocalFields::evaluate(LocalLoss loss, const MatrixXd& theta, const VectorXd& h,
                           bool gradient, VectorXd& loss_sums, MatrixXd& grad,
                           VectorXd& grad_h, const std::vector<char>* wanted) const {
  if (loss_sums.size() != N_) loss_sums.setZero(N_);
  if (gradient) {
    if (grad.rows() != N_ || grad.cols() != N_) grad.setZero(N_, N_);
    if (grad_h.size() != N_) grad_h.setZero(N_);
  }
  const std::int64_t chunk = chunk_size(N_, prep_->sparse_kernel());
  const std::int64_t chunks = (N_ + chunk - 1) / chunk;
  std::vector<std::int64_t> todo;
  for (std::int64_t c = 0; c < chunks; ++c) {
    const std::int64_t i0 = c * chunk, i1 = std::min(N_, i0 + chunk);
    bool any = wanted == nullptr;
    for (std::int64_t i = i0; i < i1 && !any; ++i) any = (*wanted)[std::size_t(i)] != 0;
    if (any) todo.push_back(c);
  }
  // Bound on every segment sum in unit i's column, from |H_i| <= |h_i| + sum_j |Theta_ji| =: a:
  //   pseudo-likelihood: 0 <= phi <= log 2 + 2a, |phi'| <= 2;   screening: |phi|, |phi'| <= e^a.
  // Like the sums themselves it depends on column i of theta and h_i only.
  auto bound = [&](std::int64_t i) {
    const double a = std::abs(h(i)) + theta.col(i).cwiseAbs().sum() - std::abs(theta(i, i));
    const double per_row = loss == LocalLoss::pseudo_likelihood ? std::max(std::log(2.0) + 2 * a, 2.0)
                                                                : std::exp(a);
    return segment_weight_max_ * per_row;
  };
  // Per unit, `rows` entries: loss, then grad_h and the gradient column. With a team, the level
  // sums of the computed chunks are packed (chunk k's units start at column k * chunk of the
  // packed table: only the last chunk can be shorter) and added over the ranks; alone, every
  // chunk finishes its own.
  const std::int64_t rows = gradient ? N_ + 2 : 1;
  const std::size_t n = std::size_t(rows * chunk) * todo.size();
  std::vector<double> levels(team_ ? 3 * n : 0, 0.0);
  VectorXd bounds(N_);  // bound(i) of the computed units, filled by their chunk
  auto finish_unit = [&](std::int64_t i, const auto& value) {  // value(e): entry e of unit i
    loss_sums(i) = value(0);
    if (gradient) {
      grad_h(i) = value(1);
      for (std::int64_t j = 0; j < N_; ++j) grad(j, i) = value(2 + j);
    }
    if (!SplitGrid::for_bound(bounds(i), segments()).ok)  // parameters beyond the bounds' range
      loss_sums(i) = std::numeric_limits<double>::infinity();
  };
  SingleThreadedBlas single;
  parallel_for(std::int64_t(todo.size()), threads_, [&](std::int64_t k) {
    const std::int64_t i0 = todo[std::size_t(k)] * chunk, nc = std::min(chunk, N_ - i0);
    for (std::int64_t c = 0; c < nc; ++c) bounds(i0 + c) = bound(i0 + c);
    MatrixXd L0 = MatrixXd::Zero(rows, nc), L1 = L0, L2 = L0;
    evaluate_chunk(loss, theta, h, gradient, i0, nc, bounds.segment(i0, nc), L0, L1, L2);
    if (team_) {
      const std::size_t at = std::size_t(k * rows * chunk);
      Eigen::Map<MatrixXd>(levels.data() + at, rows, nc) = L0;
      Eigen::Map<MatrixXd>(levels.data() + n + at, rows, nc) = L1;
      Eigen::Map<MatrixXd>(levels.data() + 2 * n + at, rows, nc) = L2;
      return;
    }
    for (std::int64_t c = 0; c < nc; ++c)
      finish_unit(i0 + c, [&](std::int64_t e) { return split_value(L0(e, c), L1(e, c), L2(e, c)); });
  });
  if (team_) {
    finish_sums(levels, n);
    for (std::size_t k = 0; k < todo.size(); ++k) {
      const std::int64_t i0 = todo[k] * chunk, nc = std::min(chunk, N_ - i0);
      for (std::int64_t c = 0; c < nc; ++c) {
        const double* col = levels.data() + (std::int64_t(k) * chunk + c) * rows;
        finish_unit(i0 + c, [&](std::int64_t e) { return col[e]; });
      }
    }
  }
  if (gradient) grad.diagonal().setZero();
}

void LocalFields::evaluate_chunk(LocalLoss loss, const MatrixXd& theta, const VectorXd& h,
                                 bool gradient, std::int64_t i0, std::int64_t nc,
                                 const VectorXd& bound, MatrixXd& L0, MatrixXd& L1,
                                 MatrixXd& L2) const {
  const std::int64_t N = N_;
  const bool sparse = prep_->sparse_kernel();
  const std::int64_t block = kernel_block(sparse);
  const bool weighted = !weights_.empty();
  const std::int64_t rows = L0.rows();
  ArrayXXd H(nc, block), S(nc, block), phi, R;
  // One segment's sums, unit by unit (column k = unit i0 + k): row 0 loss, row 1 grad_h, rows
  // 2.. the gradient column; added to the level sums at the end of every segment.
  MatrixXd P(rows, nc);
  VectorXd loss_c(nc), gh_c(nc);  // rows 0 and 1 of P while a segment runs (contiguous sums)
  std::vector<SplitGrid> grids;
  for (std::int64_t k = 0; k < nc; ++k) grids.push_back(SplitGrid::for_bound(bound(k), segments()));
  auto start_segment = [&] {
    P.setZero();
    loss_c.setZero();
    gh_c.setZero();
  };
  auto add_segment = [&] {
    P.row(0) = loss_c.transpose();
    if (gradient) P.row(1) = gh_c.transpose();
    for (std::int64_t k = 0; k < nc; ++k)
      split_add(grids[std::size_t(k)], P.col(k).data(), L0.col(k).data(), L1.col(k).data(),
                L2.col(k).data(), rows);
  };

  if (sparse) {
    // S Theta = 2 X Theta - 1 colsum(Theta): fields h' = h - colsum, rows gather 2 Theta_j.
    const ActiveLists& act = prep_->active_;
    const MatrixXd theta2_t = 2.0 * theta.middleCols(i0, nc).transpose();  // nc x N
    const VectorXd hprime = h.segment(i0, nc) - theta.middleCols(i0, nc).colwise().sum().transpose();
    MatrixXd acc_t;  // nc x N: sum_b x_bj R_bi, transposed
    for (std::int64_t seg = first_segment_; seg < end_segment_; ++seg) {
      start_segment();
      if (gradient) acc_t.setZero(nc, N);
      for_each_piece(seg, [&](const RowRange& g) {
        for (std::int64_t b0 = g.begin; b0 < g.end; b0 += block) {
          const std::int64_t nb = std::min(block, g.end - b0);
          H.resize(nc, nb);
          S.resize(nc, nb);
          gather_active_columns(hprime.data(), theta2_t.data(), nc, act.indices.data(),
                                act.offsets.data() + b0, nb, H.data());
          // s = +1 exactly for the active units: from the lists already in cache (reading the
          // chunk's bytes of every row instead strides through the whole matrix, cache miss after
          // cache miss, and cost half the evaluation at N = 1000).
          S.setConstant(-1.0);
          for (std::int64_t b = 0; b < nb; ++b) {
            const std::int32_t* j = act.indices.data() + act.offsets[std::size_t(b0 + b)];
            const std::int32_t* jend = act.indices.data() + act.offsets[std::size_t(b0 + b + 1)];
            for (; j < jend; ++j)
              if (*j >= i0 && *j < i0 + nc) S(*j - i0, b) = 1.0;
          }
          nonlinearity(loss, H, S, weighted ? weights_.data() + b0 : nullptr, gradient, phi, R);
          loss_c += phi.matrix().rowwise().sum();
          if (gradient) {
            gh_c += R.matrix().rowwise().sum();
            scatter_active_columns(acc_t.data(), R.data(), nc, act.indices.data(),
                                   act.offsets.data() + b0, nb);
          }
        }
      });
      if (gradient) {
        // sum_b s_bj R_bi = 2 sum_b x_bj R_bi - sum_b R_bi
        P.bottomRows(N) = 2.0 * acc_t.transpose();
        P.bottomRows(N).rowwise() -= gh_c.transpose();
      }
      add_segment();
    }
  } else {
    MatrixXd ST;  // rows of the block as columns, s = 2x - 1 (when there is no cache)
    const MatrixXd& cache = prep_->dense_cache_;
    const MatrixXd theta_c = theta.middleCols(i0, nc);
    const VectorXd h_c = h.segment(i0, nc);
    MatrixXd Hm(nc, block);
    auto step = [&](const auto& STb, std::int64_t b0, std::int64_t nb) {
      Hm.resize(nc, nb);
      Hm.noalias() = theta_c.transpose() * STb;  // GEMM
      Hm.colwise() += h_c;
      H = Hm.array();
      S = STb.middleRows(i0, nc).array();
      nonlinearity(loss, H, S, weighted ? weights_.data() + b0 : nullptr, gradient, phi, R);
      loss_c += phi.matrix().rowwise().sum();
      if (gradient) {
        gh_c += R.matrix().rowwise().sum();
        P.bottomRows(N).noalias() += STb * R.matrix().transpose();  // GEMM
      }
    };
    for (std::int64_t seg = first_segment_; seg < end_segment_; ++seg) {
      start_segment();
      for_each_piece(seg, [&](const RowRange& g) {
        for (std::int64_t b0 = g.begin; b0 < g.end; b0 += block) {
          const std::int64_t nb = std::min(block, g.end - b0);
          if (cache.size() > 0) {
            step(cache.middleCols(b0, nb), b0, nb);
          } else {
            ByteMap bytes(rows_->row(b0), N, nb, Eigen::OuterStride<>(N));
            ST = bytes.cast<double>() * 2.0 - MatrixXd::Ones(N, nb);
            step(ST, b0, nb);
          }
        }
      });
      add_segment();
    }
  }
}

}  // namespace spinfer::detail
