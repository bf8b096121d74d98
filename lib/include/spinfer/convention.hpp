// The two variable conventions of a binary unit.
//   binary: x in {0, 1}   (activity; neuroscience and genomics)
//   spin:   s in {-1, +1} (physics), with s = 2x - 1.
// Data always store the "active" bit (x); the convention says how values are read and how a
// model's fields and couplings are parameterised.
#pragma once

#include <string>
#include <string_view>

namespace spinfer {

enum class Convention { binary, spin };

/// "binary" or "spin".
std::string to_string(Convention c);

/// Parses "binary" or "spin" (also accepts "01" and "pm1"); throws InputError otherwise.
Convention parse_convention(std::string_view text);

/// Value of an active (true) or inactive (false) unit in a convention: 1/0 or +1/-1.
inline double unit_value(bool active, Convention c) {
  return active ? 1.0 : (c == Convention::binary ? 0.0 : -1.0);
}

}  // namespace spinfer
