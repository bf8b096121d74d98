// Test helper: a fresh directory under the system's temporary directory, named
// "spinfer-<purpose>-<random>", for tests that write files.
#pragma once

#include <filesystem>
#include <random>
#include <string>

namespace spinfer::testing {

inline std::filesystem::path temp_dir(const std::string& purpose) {
  std::random_device rd;
  const std::filesystem::path d =
      std::filesystem::temp_directory_path() / ("spinfer-" + purpose + "-" + std::to_string(rd()));
  std::filesystem::create_directories(d);
  return d;
}

}  // namespace spinfer::testing
