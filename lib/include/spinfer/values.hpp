// Turning arrays of numbers (from numpy, .npy, CSV) into a SpinMatrix, with the convention
// detected from the values or checked against a stated one:
//   values in {0, 1}    -> binary
//   values in {-1, +1}  -> spin
//   only 1s present     -> ambiguous: the stated convention is used, else binary
// Anything else (2, 0.5, NaN, inf, or 0 and -1 together) is rejected with the 1-based row and
// column of the first offending value.
#pragma once

#include <cstdint>
#include <optional>
#include <string>

#include "spinfer/spin_matrix.hpp"

namespace spinfer {

/// Generic strided source: element (t, i) is at values[t * row_stride + i * col_stride]
/// (strides in elements, so C order is (cols, 1) and Fortran order is (1, rows)).
template <typename T>
SpinMatrix values_to_matrix(const T* values, std::int64_t rows, std::int64_t cols,
                            std::int64_t row_stride, std::int64_t col_stride,
                            std::optional<Convention> stated, const std::string& source);

/// Which convention a set of observed values implies. `saw_zero`, `saw_minus_one` say what was
/// seen; throws InputError if both are seen or the stated convention contradicts the values.
Convention decide_convention(bool saw_zero, bool saw_minus_one,
                             std::optional<Convention> stated, const std::string& source);

}  // namespace spinfer
