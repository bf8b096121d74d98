// Unique-pattern compression: distinct rows of a SpinMatrix with their summed weights.
// Recordings with few active units per bin repeat the same patterns many times (the silent
// pattern alone is often most of the bins), so estimators iterate over unique patterns with
// counts instead of all T rows when that is smaller.
#pragma once

#include <cstdint>
#include <vector>

#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct PatternTable {
  /// Distinct rows, in order of first appearance; weights() are the summed sample weights
  /// (counts for unweighted data). Names and convention are carried over.
  SpinMatrix patterns;
  /// For each original row, the index of its pattern (filled only if requested).
  std::vector<std::int64_t> row_to_pattern;
  /// Number of distinct patterns / number of rows.
  double compression_ratio() const;
  std::int64_t original_rows = 0;
};

/// Compress rows into distinct patterns. Cost O(T N / 64) hashing on packed words.
PatternTable unique_patterns(const SpinMatrix& data, bool keep_row_map = false);

}  // namespace spinfer
