// SpinMatrix: T x N binary samples (rows = time bins or cells, columns = units or genes).
//
// Storage: one byte per entry, row-major, holding the "active" bit (1 = active / +1, 0 = inactive /
// 0 or -1). Bytes rather than bits because (a) numpy bool/uint8 arrays are used without a copy,
// (b) every estimator consumes rows, and unpacking bits in each hot loop costs more than the 8x
// memory saving buys at the sizes we target (10^7 x 200 = 2 GB as bytes); the compact forms that
// estimators actually iterate over are the unique-pattern table (patterns.hpp) and the sparse
// active lists (ActiveLists below), both derived from this type.
//
// Sample indices are 64-bit. Optional per-sample weights (non-negative, finite) and column names.
// The convention records how the source file wrote the values ({0,1} or {-1,+1}); it never changes
// the stored bits.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "spinfer/convention.hpp"

namespace spinfer {

class SpinMatrix {
 public:
  SpinMatrix() = default;

  /// Owning constructor. `active` has rows*cols bytes, row-major, each 0 or 1 (checked).
  SpinMatrix(std::vector<std::uint8_t> active, std::int64_t rows, std::int64_t cols,
             Convention convention);

  /// Non-owning view of row-major 0/1 bytes kept alive by `owner` (e.g. a numpy array).
  /// Values are checked unless `trusted` is set.
  static SpinMatrix view(const std::uint8_t* active, std::int64_t rows, std::int64_t cols,
                         Convention convention, std::shared_ptr<const void> owner,
                         bool trusted = false);

  std::int64_t rows() const { return rows_; }
  std::int64_t cols() const { return cols_; }
  Convention convention() const { return convention_; }
  void set_convention(Convention c) { convention_ = c; }

  /// Pointer to the cols() bytes of row t.
  const std::uint8_t* row(std::int64_t t) const { return data_ + t * cols_; }
  const std::uint8_t* data() const { return data_; }
  bool active(std::int64_t t, std::int64_t i) const { return data_[t * cols_ + i] != 0; }
  /// Value in the matrix's own convention: 0/1 or -1/+1.
  double value(std::int64_t t, std::int64_t i) const {
    return unit_value(active(t, i), convention_);
  }

  /// Per-sample weights; empty means every sample has weight 1.
  const std::vector<double>& weights() const { return weights_; }
  bool weighted() const { return !weights_.empty(); }
  double weight(std::int64_t t) const { return weights_.empty() ? 1.0 : weights_[t]; }
  /// Sum of weights (= rows() when unweighted).
  double total_weight() const;
  /// Sets weights; throws InputError unless size == rows() and every weight is finite and >= 0,
  /// with a positive total.
  void set_weights(std::vector<double> w);

  /// Column names; empty means unnamed. Names must be unique and non-empty.
  const std::vector<std::string>& names() const { return names_; }
  void set_names(std::vector<std::string> names);
  /// Name of column i, or "unit <i+1>" when unnamed.
  std::string name(std::int64_t i) const;

  /// A copy with only the listed columns (in the given order); weights and names follow.
  SpinMatrix select_columns(const std::vector<std::int64_t>& keep) const;
  /// A copy of rows [begin, end) (weights follow).
  SpinMatrix slice_rows(std::int64_t begin, std::int64_t end) const;
  /// A copy of the listed rows (repeats allowed: used by the bootstrap).
  SpinMatrix take_rows(const std::vector<std::int64_t>& rows) const;

  /// Number of active entries in each column, weighted.
  std::vector<double> column_activity() const;

  /// True if this object owns its bytes (false for views of foreign memory).
  bool owns_data() const { return owned_ != nullptr; }

 private:
  std::shared_ptr<std::vector<std::uint8_t>> owned_;
  std::shared_ptr<const void> owner_;
  const std::uint8_t* data_ = nullptr;
  std::int64_t rows_ = 0;
  std::int64_t cols_ = 0;
  Convention convention_ = Convention::binary;
  std::vector<double> weights_;
  std::vector<std::string> names_;
};

/// Units whose activity is constant: never active or always active (weighted).
struct ConstantUnits {
  std::vector<std::int64_t> never_active;
  std::vector<std::int64_t> always_active;
  bool empty() const { return never_active.empty() && always_active.empty(); }
  /// "units never active: a, b; units always active: c" with names.
  std::string describe(const SpinMatrix& data) const;
};
ConstantUnits find_constant_units(const SpinMatrix& data);

/// Throws InputError naming every constant unit (by name) unless there are none.
/// `source` names the file or array for the message.
void require_no_constant_units(const SpinMatrix& data, const std::string& source);

/// Returns the matrix without its constant units and the list of dropped column indices.
SpinMatrix drop_constant_units(const SpinMatrix& data, ConstantUnits* dropped = nullptr);

/// Sparse view: for each row the sorted column indices of its active units (CSR layout).
struct ActiveLists {
  std::int64_t rows = 0;
  std::int64_t cols = 0;
  std::vector<std::int64_t> offsets;  ///< size rows+1
  std::vector<std::int32_t> indices;  ///< size offsets.back()
  double density() const {
    return rows * cols == 0 ? 0.0 : double(indices.size()) / double(rows * cols);
  }
};
ActiveLists active_lists(const SpinMatrix& data, int threads = 1);

/// Fraction of active entries (unweighted), computed on a strided sample of at most
/// `max_rows` rows so it is cheap on very long recordings.
double estimate_density(const SpinMatrix& data, std::int64_t max_rows = 100000);

}  // namespace spinfer
