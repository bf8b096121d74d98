#include "spinfer/convention.hpp"

#include "spinfer/errors.hpp"

namespace spinfer {

std::string to_string(Convention c) { return c == Convention::binary ? "binary" : "spin"; }

Convention parse_convention(std::string_view text) {
  if (text == "binary" || text == "01") return Convention::binary;
  if (text == "spin" || text == "pm1") return Convention::spin;
  throw InputError("unknown convention '" + std::string(text) +
                   "': expected 'binary' ({0,1}) or 'spin' ({-1,+1})");
}

}  // namespace spinfer
