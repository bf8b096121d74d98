#include "spinfer/errors.hpp"

namespace spinfer {

std::string where(const std::string& source, std::int64_t row, std::int64_t column) {
  std::string out = source;
  if (row >= 0) out += ": row " + std::to_string(row);
  if (column >= 0) out += (row >= 0 ? ", column " : ": column ") + std::to_string(column);
  return out + ": ";
}

}  // namespace spinfer
