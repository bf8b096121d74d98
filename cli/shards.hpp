// Job-array shards of a per-variable fit: which shard this task is, and the shard file.
//
// A shard file is JSON: {"format": "spinfer-shard", "format_version": 1, "manifest": {...},
// "fits": <unit_fits_to_json>}. The manifest holds what must agree between the shards of one
// fit: the input file's checksum, every setting that changes the result, the shard count, and
// the data shape; `spinfer merge` refuses shards whose manifests differ (naming the key), and
// missing or repeated shard numbers.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "spinfer/unit_fits.hpp"

namespace spinfer::cli {

struct ShardChoice {
  std::int64_t index = 0;  ///< 1-based
  std::int64_t count = 0;  ///< 0 = not sharded
};

/// Parses "K/N" (1 <= K <= N). InputError naming --shard otherwise.
ShardChoice parse_shard(const std::string& text);

/// This task's shard from SLURM job-array variables: K = SLURM_ARRAY_TASK_ID -
/// SLURM_ARRAY_TASK_MIN + 1 (MIN defaults to 0) and N = SLURM_ARRAY_TASK_COUNT, so both
/// --array=0-9 and --array=1-10 give shards 1..10. InputError naming the variable when one is
/// missing or malformed, or when the array is not contiguous.
ShardChoice shard_from_slurm();

struct ShardFile {
  nlohmann::json manifest;
  UnitFits fits;
};

void write_shard_file(const std::string& path, const ShardFile& shard);
/// Reads and checks the format (InputError/FileError naming the file).
ShardFile read_shard_file(const std::string& path);

}  // namespace spinfer::cli
