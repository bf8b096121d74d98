#include "spinfer/values.hpp"

#include <cmath>
#include <sstream>
#include <type_traits>

#include "spinfer/errors.hpp"

namespace spinfer {
namespace {

template <typename T>
std::string show(T v) {
  std::ostringstream s;
  if constexpr (std::is_floating_point_v<T>) {
    s.precision(17);
    s << double(v);
  } else if constexpr (std::is_same_v<T, bool>) {
    s << (v ? "True" : "False");
  } else {
    s << (long long)(v);
  }
  return s.str();
}

}  // namespace

Convention decide_convention(bool saw_zero, bool saw_minus_one, std::optional<Convention> stated,
                             const std::string& source) {
  if (saw_zero && saw_minus_one)
    throw InputError(source + ": values mix 0 and -1; expected {0,1} or {-1,+1}");
  if (stated) {
    if (*stated == Convention::binary && saw_minus_one)
      throw InputError(source + ": convention 'binary' was stated but the values contain -1");
    if (*stated == Convention::spin && saw_zero)
      throw InputError(source + ": convention 'spin' was stated but the values contain 0");
    return *stated;
  }
  return saw_minus_one ? Convention::spin : Convention::binary;
}

template <typename T>
SpinMatrix values_to_matrix(const T* values, std::int64_t rows, std::int64_t cols,
                            std::int64_t row_stride, std::int64_t col_stride,
                            std::optional<Convention> stated, const std::string& source) {
  if (rows <= 0 || cols <= 0)
    throw InputError(source + ": empty matrix (" + std::to_string(rows) + " x " +
                     std::to_string(cols) + ")");
  std::vector<std::uint8_t> bits(std::size_t(rows * cols));
  bool saw_zero = false, saw_minus_one = false;
  for (std::int64_t t = 0; t < rows; ++t) {
    for (std::int64_t i = 0; i < cols; ++i) {
      const T v = values[t * row_stride + i * col_stride];
      std::uint8_t b;
      if constexpr (std::is_same_v<T, bool>) {
        b = v ? 1 : 0;
        saw_zero |= !v;
      } else {
        if constexpr (std::is_floating_point_v<T>) {
          if (!std::isfinite(v))
            throw InputError(where(source, t + 1, i + 1) + "value " + show(v) +
                             " is not finite; expected 0/1 or -1/+1");
        }
        if (v == T(1)) {
          b = 1;
        } else if (v == T(0)) {
          b = 0;
          saw_zero = true;
        } else if (std::is_signed_v<T> && v == T(-1)) {
          b = 0;
          saw_minus_one = true;
        } else {
          throw InputError(where(source, t + 1, i + 1) + "value " + show(v) +
                           " is not binary; expected 0/1 or -1/+1");
        }
      }
      bits[std::size_t(t * cols + i)] = b;
      if (saw_zero && saw_minus_one)
        throw InputError(where(source, t + 1, i + 1) +
                         "values mix 0 and -1; expected {0,1} or {-1,+1}");
    }
  }
  const Convention c = decide_convention(saw_zero, saw_minus_one, stated, source);
  return SpinMatrix(std::move(bits), rows, cols, c);
}

#define SPINFER_INSTANTIATE(T)                                                                   \
  template SpinMatrix values_to_matrix<T>(const T*, std::int64_t, std::int64_t, std::int64_t,    \
                                          std::int64_t, std::optional<Convention>,               \
                                          const std::string&);
SPINFER_INSTANTIATE(bool)
SPINFER_INSTANTIATE(std::int8_t)
SPINFER_INSTANTIATE(std::uint8_t)
SPINFER_INSTANTIATE(std::int16_t)
SPINFER_INSTANTIATE(std::uint16_t)
SPINFER_INSTANTIATE(std::int32_t)
SPINFER_INSTANTIATE(std::uint32_t)
SPINFER_INSTANTIATE(std::int64_t)
SPINFER_INSTANTIATE(std::uint64_t)
SPINFER_INSTANTIATE(float)
SPINFER_INSTANTIATE(double)
#undef SPINFER_INSTANTIATE

}  // namespace spinfer
