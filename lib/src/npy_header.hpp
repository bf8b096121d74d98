// Private: the .npy header (a Python dict literal) and the descr (item type) strings.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

namespace spinfer::detail {

struct NpyHeader {
  std::string descr;
  bool fortran = false;
  std::vector<std::int64_t> shape;
};

/// Parses "{'descr': '<f8', 'fortran_order': False, 'shape': (3, 4), }" (keys in any order,
/// trailing spaces/newline allowed). Throws InputError naming `source`.
NpyHeader parse_npy_header(std::string_view text, const std::string& source);

/// The dict literal with sorted keys as numpy writes it (no padding).
std::string format_npy_header(const std::string& descr, bool fortran,
                              const std::vector<std::int64_t>& shape);

struct Dtype {
  char order = '|';  ///< '<', '>' or '|' ('=' is resolved to '<' on this little-endian host)
  char kind = 'u';   ///< 'b', 'u', 'i', 'f', 'U', 'S'
  std::int64_t item_size = 1;
  /// Bytes per byte-swapped unit (item_size for numbers, 4 for 'U', 1 for 'S' and 1-byte types).
  std::int64_t swap_unit = 1;
};

/// Validates a descr string; InputError with a clear reason for unsupported types.
Dtype parse_descr(const std::string& descr, const std::string& source);

}  // namespace spinfer::detail
