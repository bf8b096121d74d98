// Integer fields for dense couplings; see integer_fields.hpp.
#include "integer_fields.hpp"

#include <algorithm>
#include <climits>
#include <cmath>

#include "sampler_integer_groups.hpp"
#include "sampler_kernels.hpp"

namespace spinfer::detail {

double IntegerModel::resolution() const { return std::ldexp(1.0, -scale); }

double IntegerModel::energy(std::int64_t E2) const { return std::ldexp(double(E2), -(scale + 1)); }

std::optional<IntegerModel> quantise(const Eigen::VectorXd& h, const double* J, std::int64_t N,
                                     std::int32_t lo, std::int32_t hi,
                                     const std::vector<std::int32_t>& order) {
  // The largest |h_i| + sum_j |J_ij| bounds every field of every state (|v| <= 1).
  double widest = 0;
  for (std::int64_t i = 0; i < N; ++i) {
    double row = std::abs(h(i));
    for (std::int64_t j = 0; j < N; ++j) row += std::abs(J[j * N + i]);
    if (!std::isfinite(row)) return std::nullopt;
    widest = std::max(widest, row);
  }
  // Rounding adds at most 1/2 per term, so keep 2^s widest + (N + 1) / 2 below 2^30.
  const double room = std::ldexp(1.0, 30) - double(N + 1);
  int s = IntegerModel::kMaxScale;
  while (s >= IntegerModel::kMinScale && std::ldexp(widest, s) > room) --s;
  if (s < IntegerModel::kMinScale) return std::nullopt;

  IntegerModel m;
  m.scale = s;
  m.N = N;
  m.NP = (N + 15) / 16 * 16;
  m.lo = lo;
  m.hi = hi;
  m.unit.resize(std::size_t(N));
  for (std::int64_t p = 0; p < N; ++p) m.unit[std::size_t(p)] = order.empty() ? std::int32_t(p) : order[std::size_t(p)];
  auto q = [s](double x) { return std::int32_t(std::lround(std::ldexp(x, s))); };
  const std::int32_t span = hi - lo;
  m.columns.assign(std::size_t(2 * N * m.NP), 0);
  m.fields.resize(std::size_t(N));
  for (std::int64_t p = 0; p < N; ++p) {
    const std::int64_t k = m.unit[std::size_t(p)];
    m.fields[std::size_t(p)] = q(h(k));
    for (std::int64_t r = 0; r < N; ++r) {
      const std::int32_t x = span * q(J[k * N + m.unit[std::size_t(r)]]);
      m.columns[std::size_t(p * m.NP + r)] = x;
      m.columns[std::size_t((N + p) * m.NP + r)] = -x;
    }
  }
  return m;
}

namespace {

// Integer bounds on w from argument bounds on x = c w (c > 0), one unit further out than the
// rounding of x / c, clamped to the int32 range (no field comes near it: |w| < 2^30).
std::int32_t at_or_above(double x, double c) {
  if (!(x < std::ldexp(1.0, 62) * c)) return INT32_MAX;
  const double w = std::ceil(x / c) + 1;
  return std::int32_t(std::clamp(w, double(INT32_MIN), double(INT32_MAX)));
}
std::int32_t at_or_below(double x, double c) {
  if (!(x > -std::ldexp(1.0, 62) * c)) return INT32_MIN;
  const double w = std::floor(x / c) - 1;
  return std::int32_t(std::clamp(w, double(INT32_MIN), double(INT32_MAX)));
}

}  // namespace

IntegerBounds integer_bounds(const IntegerModel& m, double beta, bool gibbs) {
  IntegerBounds b;
  b.c = std::ldexp(beta * double(m.hi - m.lo), -m.scale);
  b.gibbs = gibbs;
  const DrawBrackets& t = draw_brackets();
  for (std::int64_t cell = 0; cell < IntegerBounds::kCells; ++cell) {
    double first, second;
    if (gibbs) {
      // x >= first: active for every draw of the cell; x <= second: inactive.
      unpack_bracket(t.heat_bath[std::size_t(cell)], &first, &second);
      b.pass[cell] = at_or_above(first, b.c);
      b.fail[cell] = at_or_below(second, b.c);
    } else {
      // y = -c w <= first: accept; y >= second: reject. w >= 0 (y <= 0) always accepts.
      unpack_bracket(t.metropolis[std::size_t(cell)], &first, &second);
      b.pass[cell] = std::min(at_or_above(-first, b.c), 0);
      b.fail[cell] = at_or_below(-second, b.c);
    }
  }
  return b;
}

bool integer_exact(double c, bool gibbs, std::int32_t w, std::uint32_t d, std::uint64_t* tie) {
  const std::uint64_t m = std::uint64_t(d) << 37 | tie_bits(tie);
  const double x = c * double(w);
  return gibbs ? AcceptanceTable::exact_heat_bath(x, m) : AcceptanceTable::exact_metropolis(-x, m);
}

bool integer_decide(const IntegerBounds& b, std::int32_t w, std::uint32_t d, std::uint64_t* tie) {
  const std::uint32_t cell = d >> (16 - DrawBrackets::kBits);
  if (w >= b.pass[cell]) return true;
  if (w <= b.fail[cell]) return false;
  return integer_exact(b.c, b.gibbs, w, d, tie);
}

void integer_fields(const IntegerModel& m, const double* v, std::int32_t* Hq, std::int64_t* E2) {
  const std::int64_t N = m.N;
  const std::int32_t span = m.hi - m.lo;
  std::vector<std::int32_t> x(static_cast<std::size_t>(N));  // values by position
  for (std::int64_t p = 0; p < N; ++p) x[std::size_t(p)] = std::int32_t(v[m.unit[std::size_t(p)]]);
  std::int64_t e = 0;
  for (std::int64_t r = 0; r < N; ++r) {
    // Column p holds span Jq; span divides it exactly.
    std::int64_t s = m.fields[std::size_t(r)];
    for (std::int64_t p = 0; p < N; ++p) s += std::int64_t(m.columns[std::size_t(p * m.NP + r)] / span) * x[std::size_t(p)];
    Hq[r] = std::int32_t(s);
    e -= std::int64_t(x[std::size_t(r)]) * (s + m.fields[std::size_t(r)]);
  }
  for (std::int64_t r = N; r < m.NP; ++r) Hq[r] = 0;
  *E2 = e;
}

std::int64_t integer_sweep(const IntegerModel& m, const IntegerBounds& b, double* v, std::int32_t* Hq,
                           std::int64_t* E2, const std::uint64_t* words, std::uint64_t* tie, Rng* random_scan) {
  const std::int64_t N = m.N, NP = m.NP;
  const std::int32_t lo = m.lo, hi = m.hi, span = hi - lo;
  const std::int32_t* columns = m.columns.data();
  std::int64_t flips = 0, e = *E2;
  for (std::int64_t i = 0; i < N; ++i) {
    const std::int64_t p = random_scan ? std::int64_t(random_scan->below(std::uint64_t(N))) : i;
    const std::int32_t k = m.unit[std::size_t(p)];
    const bool was_high = v[k] == double(hi);
    const std::int32_t field = Hq[p];
    const std::int32_t w = !b.gibbs && was_high ? -field : field;
    const bool pass = integer_decide(b, w, draw_piece(words[i >> 2], i), tie);
    const bool high = b.gibbs ? pass : (pass != was_high);
    if (high == was_high) continue;
    ++flips;
    v[k] = double(high ? hi : lo);
    e -= 2 * std::int64_t(high ? span : -span) * field;
    add_column(Hq, columns + (high ? p : N + p) * NP, NP);
  }
  *E2 = e;
  return flips;
}

}  // namespace spinfer::detail
