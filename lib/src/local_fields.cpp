#include "local_fields.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

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

LocalFields::LocalFields(const PreparedData& prepared, int threads)
    : LocalFields(prepared, {RowRange{0, prepared.original().rows()}}, threads) {}

LocalFields::LocalFields(const PreparedData& prepared, const std::vector<RowRange>& ranges,
                         int threads)
    : prep_(&prepared), N_(prepared.original().cols()), threads_(resolve_threads(threads)) {
  const SpinMatrix& data = prepared.original();
  for (const RowRange& g : ranges)
    if (g.begin < 0 || g.end > data.rows() || g.begin > g.end)
      throw InputError("row range [" + std::to_string(g.begin) + ", " + std::to_string(g.end) +
                       ") is outside the data's " + std::to_string(data.rows()) + " rows");
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
      if (q > p) ranges_.push_back({p, q});
      p = q;
    }
    weights_ = std::move(w);
  } else {
    rows_ = &data;
    for (const RowRange& g : ranges)
      if (g.end > g.begin) ranges_.push_back(g);
    if (data.weighted()) weights_ = data.weights();
  }
  for (const RowRange& g : ranges) {
    samples_ += g.end - g.begin;
    for (std::int64_t t = g.begin; t < g.end; ++t) total_weight_ += data.weight(t);
  }
  if (!(total_weight_ > 0)) throw InputError("no samples (or zero total weight) to fit");
}

VectorXd LocalFields::spin_means() const {
  VectorXd m = VectorXd::Zero(N_);
  for (const RowRange& g : ranges_)
    for (std::int64_t r = g.begin; r < g.end; ++r) {
      const std::uint8_t* x = rows_->row(r);
      const double w = weight(r);
      for (std::int64_t i = 0; i < N_; ++i) m(i) += w * (2.0 * x[i] - 1.0);
    }
  return m / total_weight_;
}

MatrixXd LocalFields::second_moments() const {
  // Fixed blocks of kernel rows, one partial sum each, added in block order.
  constexpr std::int64_t block = 4096;
  std::vector<std::pair<std::int64_t, std::int64_t>> blocks;
  for (const RowRange& g : ranges_)
    for (std::int64_t b0 = g.begin; b0 < g.end; b0 += block)
      blocks.emplace_back(b0, std::min(block, g.end - b0));
  std::vector<MatrixXd> partial(blocks.size());
  const std::int64_t N = N_;
  SingleThreadedBlas single;
  parallel_for(std::int64_t(blocks.size()), threads_, [&](std::int64_t k) {
    const auto [b0, nb] = blocks[std::size_t(k)];
    MatrixXd Z(N + 1, nb);
    ByteMap bytes(rows_->row(b0), N, nb, Eigen::OuterStride<>(N));
    Z.topRows(N) = bytes.cast<double>() * 2.0 - MatrixXd::Ones(N, nb);
    Z.row(N).setOnes();
    MatrixXd Zw = Z;
    if (!weights_.empty())
      for (std::int64_t b = 0; b < nb; ++b) Zw.col(b) *= weights_[std::size_t(b0 + b)];
    partial[std::size_t(k)].noalias() = Zw * Z.transpose();  // GEMM
  });
  MatrixXd M = MatrixXd::Zero(N + 1, N + 1);
  for (const MatrixXd& p : partial) M += p;
  return M / total_weight_;
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
  SingleThreadedBlas single;
  parallel_for(std::int64_t(todo.size()), threads_, [&](std::int64_t k) {
    const std::int64_t i0 = todo[std::size_t(k)] * chunk, nc = std::min(chunk, N_ - i0);
    evaluate_chunk(loss, theta, h, gradient, i0, nc, loss_sums, grad, grad_h);
  });
  if (gradient) grad.diagonal().setZero();
}

void LocalFields::evaluate_chunk(LocalLoss loss, const MatrixXd& theta, const VectorXd& h,
                                 bool gradient, std::int64_t i0, std::int64_t nc,
                                 VectorXd& loss_sums, MatrixXd& grad, VectorXd& grad_h) const {
  const std::int64_t N = N_;
  const bool sparse = prep_->sparse_kernel();
  const std::int64_t block = sparse ? 512 : 1024;
  const bool weighted = !weights_.empty();
  ArrayXXd H(nc, block), S(nc, block), phi, R;
  VectorXd loss_c = VectorXd::Zero(nc), gh_c = VectorXd::Zero(nc);

  if (sparse) {
    // S Theta = 2 X Theta - 1 colsum(Theta): fields h' = h - colsum, rows gather 2 Theta_j.
    const ActiveLists& act = prep_->active_;
    const MatrixXd theta2_t = 2.0 * theta.middleCols(i0, nc).transpose();  // nc x N
    const VectorXd hprime = h.segment(i0, nc) - theta.middleCols(i0, nc).colwise().sum().transpose();
    MatrixXd acc_t;  // nc x N: sum_b x_bj R_bi, transposed
    if (gradient) acc_t.setZero(nc, N);
    for (const RowRange& g : ranges_) {
      for (std::int64_t b0 = g.begin; b0 < g.end; b0 += block) {
        const std::int64_t nb = std::min(block, g.end - b0);
        H.resize(nc, nb);
        S.resize(nc, nb);
        for (std::int64_t b = 0; b < nb; ++b) {
          auto col = H.col(b).matrix();
          col = hprime;
          const std::int32_t* j = act.indices.data() + act.offsets[std::size_t(b0 + b)];
          const std::int32_t* jend = act.indices.data() + act.offsets[std::size_t(b0 + b + 1)];
          for (; j < jend; ++j) col += theta2_t.col(*j);
          const std::uint8_t* x = rows_->row(b0 + b) + i0;
          for (std::int64_t i = 0; i < nc; ++i) S(i, b) = 2.0 * x[i] - 1.0;
        }
        nonlinearity(loss, H, S, weighted ? weights_.data() + b0 : nullptr, gradient, phi, R);
        loss_c += phi.matrix().rowwise().sum();
        if (gradient) {
          gh_c += R.matrix().rowwise().sum();
          for (std::int64_t b = 0; b < nb; ++b) {
            const std::int32_t* j = act.indices.data() + act.offsets[std::size_t(b0 + b)];
            const std::int32_t* jend = act.indices.data() + act.offsets[std::size_t(b0 + b + 1)];
            for (; j < jend; ++j) acc_t.col(*j) += R.col(b).matrix();
          }
        }
      }
    }
    if (gradient) {
      // sum_b s_bj R_bi = 2 sum_b x_bj R_bi - sum_b R_bi
      grad.middleCols(i0, nc) = 2.0 * acc_t.transpose();
      grad.middleCols(i0, nc).rowwise() -= gh_c.transpose();
    }
  } else {
    MatrixXd ST;  // rows of the block as columns, s = 2x - 1 (when there is no cache)
    const MatrixXd& cache = prep_->dense_cache_;
    const MatrixXd theta_c = theta.middleCols(i0, nc);
    const VectorXd h_c = h.segment(i0, nc);
    MatrixXd Hm(nc, block);
    MatrixXd grad_c;
    if (gradient) grad_c.setZero(N, nc);
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
        grad_c.noalias() += STb * R.matrix().transpose();  // GEMM
      }
    };
    for (const RowRange& g : ranges_) {
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
    }
    if (gradient) grad.middleCols(i0, nc) = grad_c;
  }
  loss_sums.segment(i0, nc) = loss_c;
  if (gradient) grad_h.segment(i0, nc) = gh_c;
}

}  // namespace spinfer::detail
