#include "spinfer/exact.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <vector>

#include "spinfer/errors.hpp"
#include "spinfer/threads.hpp"

namespace spinfer {
namespace {

// Gray-code walks cover blocks of 2^kBlockBits states (the low bits); the high bits number the
// block. Short walks keep the accumulated rounding of the incremental energy at the 1e-14 level.
constexpr int kBlockBits = 12;
// Weights are exp(a - ref); the reference is raised only when a state beats it by this much, so
// every weight stays below e^40 and rescaling is rare.
constexpr double kRescaleMargin = 40.0;
constexpr int kBatchRows = 256;

void check_exact_input(const IsingModel& model, double temperature, const char* what) {
  validate_model(model, "model");
  const std::int64_t N = model.size();
  if (N == 0) throw InputError(std::string(what) + ": the model has no units");
  if (N > kMaxExactUnits)
    throw InputError(std::string(what) + ": exact enumeration needs N <= " +
                     std::to_string(kMaxExactUnits) + " units (2^N states); this model has " +
                     std::to_string(N) + "; use the Monte Carlo sampler instead");
  if (!std::isfinite(temperature) || temperature <= 0)
    throw InputError(std::string(what) + ": temperature must be finite and positive, got " +
                     std::to_string(temperature));
}

int block_bits(std::int64_t N) { return int(std::min<std::int64_t>(N, kBlockBits)); }

// Visits every state of block `block` in Gray-code order: visit(state, energy, bits, active_count).
// Flipping unit i changes v_i by d and E by -d * H_i, with H_i = h_i + sum_j J_ij v_j (J_ii = 0).
template <typename Visit>
void walk_block(const IsingModel& model, int low_bits, std::int64_t block, Visit&& visit) {
  const Eigen::Index N = model.fields.size();
  const double inactive = unit_value(false, model.convention);
  std::uint64_t state = std::uint64_t(block) << low_bits;
  std::vector<std::uint8_t> bits(std::size_t(N), 0);
  Eigen::VectorXd v(N);
  int count = 0;
  for (Eigen::Index i = 0; i < N; ++i) {
    bits[std::size_t(i)] = std::uint8_t((state >> i) & 1u);
    count += bits[std::size_t(i)];
    v(i) = unit_value(bits[std::size_t(i)] != 0, model.convention);
  }
  Eigen::VectorXd H = model.fields + model.couplings * v;
  // E = -sum_i h_i v_i - 1/2 sum_ij J_ij v_i v_j = -1/2 sum_i v_i (h_i + H_i)
  double E = -0.5 * v.dot(model.fields + H);
  visit(state, E, bits.data(), count);
  const std::uint64_t steps = std::uint64_t(1) << low_bits;
  const double* J = model.couplings.data();  // column-major; column i is J_.i = J_i. (symmetric)
  for (std::uint64_t k = 1; k < steps; ++k) {
    int i = 0;
    while (!((k >> i) & 1u)) ++i;  // the Gray code flips the lowest set bit of k
    const bool was_active = bits[std::size_t(i)] != 0;
    const double d = was_active ? inactive - 1.0 : 1.0 - inactive;
    E -= d * H(i);
    bits[std::size_t(i)] = was_active ? 0 : 1;
    count += was_active ? -1 : 1;
    state ^= std::uint64_t(1) << i;
    const double* col = J + std::ptrdiff_t(i) * N;
    for (Eigen::Index j = 0; j < N; ++j) H(j) += col[j] * d;
    visit(state, E, bits.data(), count);
  }
}

// Weighted sums relative to exp(ref): w = sum exp(a - ref) with a = -E/T, energy mean and
// centred second moment (weighted Welford), and optionally the binary moments and P(K).
struct Accumulator {
  double ref = -std::numeric_limits<double>::infinity();
  double w = 0;
  double e_mean = 0, e_m2 = 0;
  Eigen::VectorXd first;
  Eigen::MatrixXd second;
  Eigen::VectorXd pk;

  void rescale(double new_ref) {
    if (w > 0) {
      const double f = std::exp(ref - new_ref);
      w *= f;
      e_m2 *= f;
      if (first.size()) {
        first *= f;
        second *= f;
        pk *= f;
      }
    }
    ref = new_ref;
  }

  // Chan et al.'s pairwise combination of weighted means and centred second moments.
  void merge(Accumulator other) {
    if (other.w == 0) return;
    if (w == 0) {
      *this = std::move(other);
      return;
    }
    const double r = std::max(ref, other.ref);
    rescale(r);
    other.rescale(r);
    const double total = w + other.w;
    const double delta = other.e_mean - e_mean;
    e_mean += delta * other.w / total;
    e_m2 += other.e_m2 + delta * delta * w * other.w / total;
    w = total;
    if (first.size()) {
      first += other.first;
      second += other.second;
      pk += other.pk;
    }
  }
};

Accumulator accumulate_block(const IsingModel& model, double inv_T, int low_bits,
                             std::int64_t block, bool moments) {
  const Eigen::Index N = model.fields.size();
  Accumulator acc;
  Eigen::MatrixXd X;
  Eigen::VectorXd a, e;
  std::vector<int> k;
  if (moments) {
    acc.first = Eigen::VectorXd::Zero(N);
    acc.second = Eigen::MatrixXd::Zero(N, N);
    acc.pk = Eigen::VectorXd::Zero(N + 1);
    X.resize(kBatchRows, N);
  }
  a.resize(kBatchRows);
  e.resize(kBatchRows);
  k.resize(kBatchRows);
  int rows = 0;
  auto flush = [&]() {
    if (rows == 0) return;
    const double top = a.head(rows).maxCoeff();
    if (top > acc.ref + kRescaleMargin || acc.w == 0) acc.rescale(std::max(top, acc.ref));
    Eigen::VectorXd ww = (a.head(rows).array() - acc.ref).exp();
    for (int r = 0; r < rows; ++r) {
      const double wn = acc.w + ww(r);
      if (wn > 0) {
        const double delta = e(r) - acc.e_mean;
        acc.e_mean += delta * ww(r) / wn;
        acc.e_m2 += ww(r) * delta * (e(r) - acc.e_mean);
      }
      acc.w = wn;
    }
    if (moments) {
      auto Xb = X.topRows(rows);
      acc.first.noalias() += Xb.transpose() * ww;
      const Eigen::MatrixXd Xw = Xb.array().colwise() * ww.array();
      acc.second.noalias() += Xw.transpose() * Xb;
      for (int r = 0; r < rows; ++r) acc.pk(k[std::size_t(r)]) += ww(r);
    }
    rows = 0;
  };
  walk_block(model, low_bits, block,
             [&](std::uint64_t, double E, const std::uint8_t* bits, int count) {
               a(rows) = -E * inv_T;
               e(rows) = E;
               if (moments) {
                 for (Eigen::Index i = 0; i < N; ++i) X(rows, i) = bits[i];
                 k[std::size_t(rows)] = count;
               }
               if (++rows == kBatchRows) flush();
             });
  flush();
  return acc;
}

Accumulator accumulate_all(const IsingModel& model, double temperature, int threads,
                           bool moments) {
  const std::int64_t N = model.size();
  const int low = block_bits(N);
  const std::int64_t blocks = std::int64_t(1) << (N - low);
  std::vector<Accumulator> parts(static_cast<std::size_t>(blocks));
  set_blas_threads(1);
  parallel_chunks(blocks, threads, [&](std::int64_t b, std::int64_t e, int) {
    for (std::int64_t blk = b; blk < e; ++blk)
      parts[std::size_t(blk)] = accumulate_block(model, 1.0 / temperature, low, blk, moments);
  });
  Accumulator total;
  for (auto& p : parts) total.merge(std::move(p));  // fixed order: deterministic
  return total;
}

}  // namespace

ExactStatistics exact_statistics(const IsingModel& model, const ExactOptions& options) {
  check_exact_input(model, options.temperature, "exact statistics");
  const double T = options.temperature;
  const Accumulator acc = accumulate_all(model, T, options.threads, true);
  ExactStatistics s;
  s.temperature = T;
  s.model_convention = model.convention;
  s.log_partition = acc.ref + std::log(acc.w);
  Moments m;
  m.convention = Convention::binary;  // accumulated on the active bits
  m.mean = acc.first / acc.w;
  m.second = acc.second / acc.w;
  m.second = 0.5 * (m.second + m.second.transpose()).eval();
  m.second.diagonal() = m.mean;  // x_i^2 = x_i
  m.connected = m.second - m.mean * m.mean.transpose();
  m.total_weight = 1.0;
  m.samples = 0;
  m.kernel_used = "exact";
  s.moments = convert_moments(m, options.convention);
  s.active_count = acc.pk / acc.w;
  s.mean_energy = acc.e_mean;
  s.specific_heat = acc.e_m2 / acc.w / (double(model.size()) * T * T);
  // S = -<log P> = <E>/T + log Z
  s.entropy = s.mean_energy / T + s.log_partition;
  return s;
}

double exact_log_partition(const IsingModel& model, double temperature, int threads) {
  check_exact_input(model, temperature, "exact log partition");
  const Accumulator acc = accumulate_all(model, temperature, threads, false);
  return acc.ref + std::log(acc.w);
}

Eigen::VectorXd exact_state_probabilities(const IsingModel& model, double temperature,
                                          int threads) {
  check_exact_input(model, temperature, "exact state probabilities");
  const std::int64_t N = model.size();
  const int low = block_bits(N);
  const std::int64_t blocks = std::int64_t(1) << (N - low);
  Eigen::VectorXd la(std::int64_t(1) << N);
  std::vector<double> block_max(static_cast<std::size_t>(blocks));
  const double inv_T = 1.0 / temperature;
  parallel_chunks(blocks, threads, [&](std::int64_t b, std::int64_t e, int) {
    for (std::int64_t blk = b; blk < e; ++blk) {
      double mx = -std::numeric_limits<double>::infinity();
      walk_block(model, low, blk, [&](std::uint64_t state, double E, const std::uint8_t*, int) {
        la(Eigen::Index(state)) = -E * inv_T;
        mx = std::max(mx, -E * inv_T);
      });
      block_max[std::size_t(blk)] = mx;
    }
  });
  const double top = *std::max_element(block_max.begin(), block_max.end());
  std::vector<double> block_sum(static_cast<std::size_t>(blocks));
  const std::int64_t per = std::int64_t(1) << low;
  parallel_chunks(blocks, threads, [&](std::int64_t b, std::int64_t e, int) {
    for (std::int64_t blk = b; blk < e; ++blk) {
      auto seg = la.segment(blk * per, per);
      seg = (seg.array() - top).exp();
      block_sum[std::size_t(blk)] = seg.sum();
    }
  });
  double z = 0;
  for (double s : block_sum) z += s;
  la /= z;
  return la;
}

SpinMatrix exact_weighted_states(const IsingModel& model, Convention convention,
                                 double temperature, int threads) {
  if (model.size() > 20)
    throw InputError("exact weighted states: limited to N <= 20 units (2^N x N bytes); this "
                     "model has " + std::to_string(model.size()));
  const Eigen::VectorXd p = exact_state_probabilities(model, temperature, threads);
  const std::int64_t N = model.size(), S = p.size();
  std::vector<std::uint8_t> bits(std::size_t(S * N));
  for (std::int64_t k = 0; k < S; ++k)
    for (std::int64_t i = 0; i < N; ++i) bits[std::size_t(k * N + i)] = std::uint8_t((k >> i) & 1);
  SpinMatrix out(std::move(bits), S, N, convention);
  out.set_weights(std::vector<double>(p.data(), p.data() + S));
  if (!model.names.empty()) out.set_names(model.names);
  return out;
}

double exact_log_likelihood(const IsingModel& model, const SpinMatrix& data, int threads) {
  check_exact_input(model, 1.0, "exact log-likelihood");
  if (data.cols() != model.size())
    throw InputError("exact log-likelihood: the data have " + std::to_string(data.cols()) +
                     " units but the model has " + std::to_string(model.size()));
  if (data.rows() == 0) throw InputError("exact log-likelihood: the data have no samples");
  const double log_z = exact_log_partition(model, 1.0, threads);
  // Fixed row blocks reduced in order, so the sum does not depend on the thread count.
  constexpr std::int64_t kRowsPerBlock = 4096;
  const std::int64_t blocks = (data.rows() + kRowsPerBlock - 1) / kRowsPerBlock;
  std::vector<double> sums(static_cast<std::size_t>(blocks), 0.0);
  parallel_chunks(blocks, threads, [&](std::int64_t b, std::int64_t e, int) {
    for (std::int64_t blk = b; blk < e; ++blk) {
      double s = 0;
      const std::int64_t end = std::min(data.rows(), (blk + 1) * kRowsPerBlock);
      for (std::int64_t t = blk * kRowsPerBlock; t < end; ++t)
        s += data.weight(t) * energy(model, data.row(t));
      sums[std::size_t(blk)] = s;
    }
  });
  double total = 0;
  for (double s : sums) total += s;
  return -total / data.total_weight() - log_z;
}

}  // namespace spinfer
