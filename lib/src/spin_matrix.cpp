#include "spinfer/spin_matrix.hpp"

#include <cmath>
#include <cstring>
#include <unordered_set>

#include "spinfer/errors.hpp"
#include "spinfer/threads.hpp"

namespace spinfer {
namespace {

void check_shape(std::int64_t rows, std::int64_t cols) {
  if (rows < 0 || cols < 0) throw InputError("negative matrix shape");
}

void check_bits(const std::uint8_t* p, std::int64_t rows, std::int64_t cols) {
  const std::int64_t n = rows * cols;
  // Fast path: any byte above 1 has a bit of 0xFE set; test 8 bytes at a time.
  std::uint64_t bad = 0;
  std::int64_t k = 0;
  for (; k + 8 <= n; k += 8) {
    std::uint64_t w;
    std::memcpy(&w, p + k, 8);
    bad |= w & 0xFEFEFEFEFEFEFEFEULL;
  }
  for (; k < n; ++k) bad |= p[k] & 0xFE;
  if (!bad) return;
  for (k = 0; k < n; ++k) {
    if (p[k] > 1) {
      throw InputError(where("array", k / cols + 1, k % cols + 1) + "value " +
                       std::to_string(int(p[k])) + " is not a 0/1 activity bit");
    }
  }
}

}  // namespace

SpinMatrix::SpinMatrix(std::vector<std::uint8_t> active, std::int64_t rows, std::int64_t cols,
                       Convention convention)
    : rows_(rows), cols_(cols), convention_(convention) {
  check_shape(rows, cols);
  if (std::int64_t(active.size()) != rows * cols) {
    throw InputError("SpinMatrix: " + std::to_string(active.size()) + " values for a " +
                     std::to_string(rows) + " x " + std::to_string(cols) + " matrix");
  }
  check_bits(active.data(), rows, cols);
  owned_ = std::make_shared<std::vector<std::uint8_t>>(std::move(active));
  data_ = owned_->data();
}

SpinMatrix SpinMatrix::view(const std::uint8_t* active, std::int64_t rows, std::int64_t cols,
                            Convention convention, std::shared_ptr<const void> owner,
                            bool trusted) {
  check_shape(rows, cols);
  if (!trusted) check_bits(active, rows, cols);
  SpinMatrix m;
  m.owner_ = std::move(owner);
  m.data_ = active;
  m.rows_ = rows;
  m.cols_ = cols;
  m.convention_ = convention;
  return m;
}

double SpinMatrix::total_weight() const {
  if (weights_.empty()) return double(rows_);
  double s = 0;
  for (double w : weights_) s += w;
  return s;
}

void SpinMatrix::set_weights(std::vector<double> w) {
  if (w.empty()) {
    weights_.clear();
    return;
  }
  if (std::int64_t(w.size()) != rows_) {
    throw InputError("weights: " + std::to_string(w.size()) + " weights for " +
                     std::to_string(rows_) + " samples");
  }
  double total = 0;
  for (std::size_t t = 0; t < w.size(); ++t) {
    if (!std::isfinite(w[t]) || w[t] < 0) {
      throw InputError(where("weights", std::int64_t(t) + 1) +
                       "weight must be finite and non-negative");
    }
    total += w[t];
  }
  if (!(total > 0)) throw InputError("weights: the weights sum to zero");
  weights_ = std::move(w);
}

void SpinMatrix::set_names(std::vector<std::string> names) {
  if (names.empty()) {
    names_.clear();
    return;
  }
  if (std::int64_t(names.size()) != cols_) {
    throw InputError("names: " + std::to_string(names.size()) + " names for " +
                     std::to_string(cols_) + " columns");
  }
  std::unordered_set<std::string> seen;
  for (std::size_t i = 0; i < names.size(); ++i) {
    if (names[i].empty()) throw InputError(where("names", -1, std::int64_t(i) + 1) + "empty name");
    if (!seen.insert(names[i]).second) {
      throw InputError(where("names", -1, std::int64_t(i) + 1) + "duplicate column name '" +
                       names[i] + "'");
    }
  }
  names_ = std::move(names);
}

std::string SpinMatrix::name(std::int64_t i) const {
  return names_.empty() ? "unit " + std::to_string(i + 1) : names_[std::size_t(i)];
}

SpinMatrix SpinMatrix::select_columns(const std::vector<std::int64_t>& keep) const {
  const std::int64_t n = std::int64_t(keep.size());
  for (std::int64_t k : keep) {
    if (k < 0 || k >= cols_) throw InputError("select_columns: column index out of range");
  }
  std::vector<std::uint8_t> out(std::size_t(rows_ * n));
  for (std::int64_t t = 0; t < rows_; ++t) {
    const std::uint8_t* r = row(t);
    for (std::int64_t k = 0; k < n; ++k) out[std::size_t(t * n + k)] = r[keep[std::size_t(k)]];
  }
  SpinMatrix m(std::move(out), rows_, n, convention_);
  m.weights_ = weights_;
  if (!names_.empty()) {
    std::vector<std::string> names;
    for (std::int64_t k : keep) names.push_back(names_[std::size_t(k)]);
    m.names_ = std::move(names);
  }
  return m;
}

SpinMatrix SpinMatrix::slice_rows(std::int64_t begin, std::int64_t end) const {
  if (begin < 0 || end > rows_ || begin > end) throw InputError("slice_rows: bad row range");
  std::vector<std::uint8_t> out(data_ + begin * cols_, data_ + end * cols_);
  SpinMatrix m(std::move(out), end - begin, cols_, convention_);
  if (!weights_.empty()) m.weights_.assign(weights_.begin() + begin, weights_.begin() + end);
  m.names_ = names_;
  return m;
}

SpinMatrix SpinMatrix::take_rows(const std::vector<std::int64_t>& rows) const {
  std::vector<std::uint8_t> out(rows.size() * std::size_t(cols_));
  std::vector<double> w;
  if (!weights_.empty()) w.reserve(rows.size());
  for (std::size_t k = 0; k < rows.size(); ++k) {
    const std::int64_t t = rows[k];
    if (t < 0 || t >= rows_) throw InputError("take_rows: row index out of range");
    std::memcpy(out.data() + k * std::size_t(cols_), row(t), std::size_t(cols_));
    if (!weights_.empty()) w.push_back(weights_[std::size_t(t)]);
  }
  SpinMatrix m(std::move(out), std::int64_t(rows.size()), cols_, convention_);
  m.weights_ = std::move(w);
  m.names_ = names_;
  return m;
}

std::vector<double> SpinMatrix::column_activity() const {
  std::vector<double> a(std::size_t(cols_), 0.0);
  for (std::int64_t t = 0; t < rows_; ++t) {
    const std::uint8_t* r = row(t);
    const double w = weight(t);
    for (std::int64_t i = 0; i < cols_; ++i) a[std::size_t(i)] += w * r[i];
  }
  return a;
}

std::string ConstantUnits::describe(const SpinMatrix& data) const {
  auto list = [&](const std::vector<std::int64_t>& idx) {
    std::string s;
    for (std::size_t k = 0; k < idx.size(); ++k) {
      if (k) s += ", ";
      if (k == 20) {
        s += "... (" + std::to_string(idx.size()) + " in all)";
        break;
      }
      s += data.name(idx[k]);
    }
    return s;
  };
  std::string out;
  if (!never_active.empty()) out += "units never active: " + list(never_active);
  if (!always_active.empty()) {
    if (!out.empty()) out += "; ";
    out += "units always active: " + list(always_active);
  }
  return out;
}

ConstantUnits find_constant_units(const SpinMatrix& data) {
  ConstantUnits c;
  if (data.rows() == 0) return c;
  const std::vector<double> a = data.column_activity();
  const double total = data.total_weight();
  for (std::int64_t i = 0; i < data.cols(); ++i) {
    if (a[std::size_t(i)] <= 0) c.never_active.push_back(i);
    else if (a[std::size_t(i)] >= total) c.always_active.push_back(i);
  }
  return c;
}

void require_no_constant_units(const SpinMatrix& data, const std::string& source) {
  const ConstantUnits c = find_constant_units(data);
  if (!c.empty()) {
    throw InputError(source + ": " + c.describe(data) +
                     " (their fields are infinite; drop them, e.g. with --drop-constant)");
  }
}

SpinMatrix drop_constant_units(const SpinMatrix& data, ConstantUnits* dropped) {
  const ConstantUnits c = find_constant_units(data);
  if (dropped) *dropped = c;
  std::vector<bool> drop(std::size_t(data.cols()), false);
  for (auto i : c.never_active) drop[std::size_t(i)] = true;
  for (auto i : c.always_active) drop[std::size_t(i)] = true;
  std::vector<std::int64_t> keep;
  for (std::int64_t i = 0; i < data.cols(); ++i)
    if (!drop[std::size_t(i)]) keep.push_back(i);
  return data.select_columns(keep);
}

ActiveLists active_lists(const SpinMatrix& data, int threads) {
  ActiveLists a;
  a.rows = data.rows();
  a.cols = data.cols();
  a.offsets.assign(std::size_t(a.rows + 1), 0);
  // Pass 1: counts per row; pass 2: fill. Both split rows the same way.
  parallel_chunks(a.rows, threads, [&](std::int64_t b, std::int64_t e, int) {
    for (std::int64_t t = b; t < e; ++t) {
      const std::uint8_t* r = data.row(t);
      std::int64_t k = 0;
      for (std::int64_t i = 0; i < a.cols; ++i) k += r[i];
      a.offsets[std::size_t(t + 1)] = k;
    }
  });
  for (std::int64_t t = 0; t < a.rows; ++t) a.offsets[std::size_t(t + 1)] += a.offsets[std::size_t(t)];
  a.indices.resize(std::size_t(a.offsets.back()));
  parallel_chunks(a.rows, threads, [&](std::int64_t b, std::int64_t e, int) {
    for (std::int64_t t = b; t < e; ++t) {
      const std::uint8_t* r = data.row(t);
      std::int32_t* out = a.indices.data() + a.offsets[std::size_t(t)];
      for (std::int64_t i = 0; i < a.cols; ++i)
        if (r[i]) *out++ = std::int32_t(i);
    }
  });
  return a;
}

double estimate_density(const SpinMatrix& data, std::int64_t max_rows) {
  if (data.rows() == 0 || data.cols() == 0) return 0.0;
  const std::int64_t step = std::max<std::int64_t>(1, data.rows() / std::max<std::int64_t>(1, max_rows));
  std::int64_t ones = 0, seen = 0;
  for (std::int64_t t = 0; t < data.rows(); t += step) {
    const std::uint8_t* r = data.row(t);
    for (std::int64_t i = 0; i < data.cols(); ++i) ones += r[i];
    ++seen;
  }
  return double(ones) / double(seen * data.cols());
}

}  // namespace spinfer
