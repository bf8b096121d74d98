#include "spinfer/stats.hpp"

#include <algorithm>
#include <cstring>

#include "spinfer/errors.hpp"
#include "spinfer/threads.hpp"

namespace spinfer {
namespace {

constexpr std::int64_t kDenseBlockRows = 2048;

// Appends the indices of the active bytes of a row to `on`, skipping all-zero 8-byte words
// (most words at low activity).
void collect_active(const std::uint8_t* r, std::int64_t N, std::vector<std::int32_t>& on) {
  on.clear();
  std::int64_t i = 0;
  for (; i + 8 <= N; i += 8) {
    std::uint64_t word;
    std::memcpy(&word, r + i, 8);
    if (!word) continue;
    for (int k = 0; k < 8; ++k)
      if (r[i + k]) on.push_back(std::int32_t(i + k));
  }
  for (; i < N; ++i)
    if (r[i]) on.push_back(std::int32_t(i));
}

// Sum over rows of w_t x_t x_t^T (upper triangle incl. diagonal), sparse kernel: for each row,
// increment every pair of its active units. Cost ~ T k^2 / 2 for k active units per row.
// Unweighted data count in 32-bit integers (half the memory traffic; exact).
template <typename Acc>
Eigen::MatrixXd pair_counts_sparse_typed(const SpinMatrix& data, int threads) {
  const std::int64_t N = data.cols();
  using AccMatrix = Eigen::Matrix<Acc, Eigen::Dynamic, Eigen::Dynamic>;
  std::vector<AccMatrix> partial(static_cast<std::size_t>(resolve_threads(threads)));
  parallel_chunks(data.rows(), threads, [&](std::int64_t b, std::int64_t e, int tid) {
    AccMatrix& acc = partial[std::size_t(tid)];
    acc = AccMatrix::Zero(N, N);
    std::vector<std::int32_t> on;
    on.reserve(std::size_t(N));
    for (std::int64_t t = b; t < e; ++t) {
      collect_active(data.row(t), N, on);
      const Acc w = data.weighted() ? Acc(data.weight(t)) : Acc(1);
      const std::size_t k = on.size();
      for (std::size_t a = 0; a < k; ++a) {
        Acc* col = acc.data() + std::int64_t(on[a]) * N;  // column on[a]: acc(i, on[a]) at col[i]
        for (std::size_t c = 0; c <= a; ++c) col[on[c]] += w;  // on[c] <= on[a]: upper triangle
      }
    }
  });
  Eigen::MatrixXd total = Eigen::MatrixXd::Zero(N, N);
  for (auto& p : partial)
    if (p.size()) total += p.template cast<double>();
  return total;
}

Eigen::MatrixXd pair_counts_sparse(const SpinMatrix& data, int threads) {
  // 32-bit counts hold at most 2^32 - 1 rows per thread; longer recordings count in doubles
  // (still exact: integers below 2^53).
  if (!data.weighted() && data.rows() < (std::int64_t(1) << 32) - 1)
    return pair_counts_sparse_typed<std::uint32_t>(data, threads);
  return pair_counts_sparse_typed<double>(data, threads);
}

// Dense kernel: blocks of rows converted to floating point, products through BLAS (sgemm when
// unweighted: block sums of 0/1 products are integers < 2^24, exact in float).
Eigen::MatrixXd pair_counts_dense(const SpinMatrix& data, int threads) {
  const std::int64_t N = data.cols();
  const int nt = resolve_threads(threads);
  std::vector<Eigen::MatrixXd> partial(static_cast<std::size_t>(nt));
  set_blas_threads(1);
  const std::int64_t blocks = (data.rows() + kDenseBlockRows - 1) / kDenseBlockRows;
  parallel_chunks(blocks, nt, [&](std::int64_t b, std::int64_t e, int tid) {
    Eigen::MatrixXd& acc = partial[std::size_t(tid)];
    acc = Eigen::MatrixXd::Zero(N, N);
    if (!data.weighted()) {
      Eigen::MatrixXf X(kDenseBlockRows, N);
      Eigen::MatrixXf G(N, N);
      for (std::int64_t blk = b; blk < e; ++blk) {
        const std::int64_t t0 = blk * kDenseBlockRows;
        const std::int64_t rows = std::min(kDenseBlockRows, data.rows() - t0);
        for (std::int64_t t = 0; t < rows; ++t) {
          const std::uint8_t* r = data.row(t0 + t);
          for (std::int64_t i = 0; i < N; ++i) X(t, i) = float(r[i]);
        }
        auto Xb = X.topRows(rows);
        G.noalias() = Xb.transpose() * Xb;
        acc += G.cast<double>();
      }
    } else {
      Eigen::MatrixXd X(kDenseBlockRows, N), XW(kDenseBlockRows, N);
      for (std::int64_t blk = b; blk < e; ++blk) {
        const std::int64_t t0 = blk * kDenseBlockRows;
        const std::int64_t rows = std::min(kDenseBlockRows, data.rows() - t0);
        for (std::int64_t t = 0; t < rows; ++t) {
          const std::uint8_t* r = data.row(t0 + t);
          const double w = data.weight(t0 + t);
          for (std::int64_t i = 0; i < N; ++i) {
            X(t, i) = r[i];
            XW(t, i) = w * r[i];
          }
        }
        acc.noalias() += XW.topRows(rows).transpose() * X.topRows(rows);
      }
    }
  });
  Eigen::MatrixXd total = Eigen::MatrixXd::Zero(N, N);
  for (auto& p : partial)
    if (p.size()) total += p;
  return total;
}

}  // namespace

Moments convert_moments(const Moments& m, Convention to) {
  if (m.convention == to) return m;
  Moments out = m;
  out.convention = to;
  const Eigen::Index N = m.mean.size();
  if (to == Convention::spin) {  // s = 2x - 1
    out.mean = 2.0 * m.mean.array() - 1.0;
    for (Eigen::Index i = 0; i < N; ++i)
      for (Eigen::Index j = 0; j < N; ++j)
        out.second(i, j) = 4.0 * m.second(i, j) - 2.0 * m.mean(i) - 2.0 * m.mean(j) + 1.0;
    out.connected = 4.0 * m.connected;
  } else {  // x = (s + 1) / 2
    out.mean = (m.mean.array() + 1.0) / 2.0;
    for (Eigen::Index i = 0; i < N; ++i)
      for (Eigen::Index j = 0; j < N; ++j)
        out.second(i, j) = (m.second(i, j) + m.mean(i) + m.mean(j) + 1.0) / 4.0;
    out.connected = m.connected / 4.0;
  }
  return out;
}

Moments compute_moments(const SpinMatrix& data, Convention out, const StatsOptions& options) {
  if (data.rows() == 0) throw InputError("statistics: the data have no samples");
  const std::int64_t N = data.cols();
  PairKernel kernel = options.kernel;
  if (kernel == PairKernel::automatic) {
    kernel = estimate_density(data) < options.sparse_density_threshold ? PairKernel::sparse
                                                                        : PairKernel::dense;
  }
  Eigen::MatrixXd counts = kernel == PairKernel::sparse ? pair_counts_sparse(data, options.threads)
                                                        : pair_counts_dense(data, options.threads);
  const double W = data.total_weight();
  Moments m;
  m.convention = Convention::binary;
  m.total_weight = W;
  m.samples = data.rows();
  m.kernel_used = kernel == PairKernel::sparse ? "sparse" : "dense";
  m.second = counts.triangularView<Eigen::Upper>();
  m.second.triangularView<Eigen::StrictlyLower>() = m.second.transpose();
  m.second /= W;
  m.mean = m.second.diagonal();  // x_i^2 = x_i
  m.connected = m.second - m.mean * m.mean.transpose();
  (void)N;
  return convert_moments(m, out);
}

Eigen::VectorXd compute_means(const SpinMatrix& data, Convention out, int threads) {
  if (data.rows() == 0) throw InputError("statistics: the data have no samples");
  const std::int64_t N = data.cols();
  std::vector<Eigen::VectorXd> partial(static_cast<std::size_t>(resolve_threads(threads)));
  parallel_chunks(data.rows(), threads, [&](std::int64_t b, std::int64_t e, int tid) {
    Eigen::VectorXd acc = Eigen::VectorXd::Zero(N);
    for (std::int64_t t = b; t < e; ++t) {
      const std::uint8_t* r = data.row(t);
      const double w = data.weight(t);
      for (std::int64_t i = 0; i < N; ++i) acc(i) += w * r[i];
    }
    partial[std::size_t(tid)] = acc;
  });
  Eigen::VectorXd total = Eigen::VectorXd::Zero(N);
  for (auto& p : partial)
    if (p.size()) total += p;
  total /= data.total_weight();
  if (out == Convention::spin) total = 2.0 * total.array() - 1.0;
  return total;
}

Eigen::VectorXd active_count_distribution(const SpinMatrix& data, int threads) {
  if (data.rows() == 0) throw InputError("statistics: the data have no samples");
  const std::int64_t N = data.cols();
  std::vector<Eigen::VectorXd> partial(static_cast<std::size_t>(resolve_threads(threads)));
  parallel_chunks(data.rows(), threads, [&](std::int64_t b, std::int64_t e, int tid) {
    Eigen::VectorXd h = Eigen::VectorXd::Zero(N + 1);
    for (std::int64_t t = b; t < e; ++t) {
      const std::uint8_t* r = data.row(t);
      std::int64_t k = 0;
      for (std::int64_t i = 0; i < N; ++i) k += r[i];
      h(k) += data.weight(t);
    }
    partial[std::size_t(tid)] = h;
  });
  Eigen::VectorXd total = Eigen::VectorXd::Zero(N + 1);
  for (auto& p : partial)
    if (p.size()) total += p;
  return total / data.total_weight();
}

std::vector<double> connected_triplets(const SpinMatrix& data,
                                       const std::vector<std::array<std::int64_t, 3>>& triples,
                                       Convention out, int threads) {
  if (data.rows() == 0) throw InputError("statistics: the data have no samples");
  for (std::size_t q = 0; q < triples.size(); ++q)
    for (auto i : triples[q])
      if (i < 0 || i >= data.cols())
        throw InputError("triplets: triple " + std::to_string(q + 1) + " has a unit index out of range");
  const Eigen::VectorXd m = compute_means(data, Convention::binary, threads);
  const double W = data.total_weight();
  std::vector<double> result(triples.size());
  // Raw moments by direct counting, then the connected combination
  // c_ijk = <x_i x_j x_k> - m_i <x_j x_k> - m_j <x_i x_k> - m_k <x_i x_j> + 2 m_i m_j m_k.
  parallel_for(std::int64_t(triples.size()), threads, [&](std::int64_t q) {
    const auto [i, j, k] = triples[std::size_t(q)];
    double xijk = 0, xij = 0, xik = 0, xjk = 0;
    for (std::int64_t t = 0; t < data.rows(); ++t) {
      const std::uint8_t* r = data.row(t);
      const double w = data.weight(t);
      const bool a = r[i], b = r[j], c = r[k];
      if (a && b) xij += w;
      if (a && c) xik += w;
      if (b && c) xjk += w;
      if (a && b && c) xijk += w;
    }
    xijk /= W, xij /= W, xik /= W, xjk /= W;
    double c = xijk - m(i) * xjk - m(j) * xik - m(k) * xij + 2 * m(i) * m(j) * m(k);
    result[std::size_t(q)] = out == Convention::spin ? 8.0 * c : c;
  });
  return result;
}

}  // namespace spinfer
