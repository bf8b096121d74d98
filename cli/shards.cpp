#include "shards.hpp"

#include <cstdlib>
#include <fstream>
#include <iomanip>

#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"

namespace spinfer::cli {
namespace {

std::int64_t parse_count(const std::string& text, const std::string& what) {
  std::size_t used = 0;
  long long v = 0;
  try {
    v = std::stoll(text, &used);
  } catch (const std::exception&) {
    used = 0;
  }
  if (used == 0 || used != text.size())
    throw InputError(what + " '" + text + "' is not a whole number");
  return v;
}

}  // namespace

ShardChoice parse_shard(const std::string& text) {
  const auto slash = text.find('/');
  if (slash == std::string::npos)
    throw InputError("--shard '" + text + "': expected K/N, e.g. 3/10 for the third of ten shards");
  ShardChoice c;
  c.index = parse_count(text.substr(0, slash), "--shard K");
  c.count = parse_count(text.substr(slash + 1), "--shard N");
  if (c.count < 1 || c.index < 1 || c.index > c.count)
    throw InputError("--shard '" + text + "': need 1 <= K <= N");
  return c;
}

ShardChoice shard_from_slurm() {
  auto get = [](const char* name) -> std::string {
    const char* v = std::getenv(name);
    if (!v || !*v)
      throw InputError(std::string("--shard-from-slurm: ") + name +
                       " is not set (run inside a job array: sbatch --array=...)");
    return v;
  };
  const std::int64_t id = parse_count(get("SLURM_ARRAY_TASK_ID"), "SLURM_ARRAY_TASK_ID");
  const std::int64_t count = parse_count(get("SLURM_ARRAY_TASK_COUNT"), "SLURM_ARRAY_TASK_COUNT");
  const char* min_text = std::getenv("SLURM_ARRAY_TASK_MIN");
  const std::int64_t min = min_text && *min_text ? parse_count(min_text, "SLURM_ARRAY_TASK_MIN") : 0;
  ShardChoice c{id - min + 1, count};
  if (c.count < 1 || c.index < 1 || c.index > c.count)
    throw InputError("--shard-from-slurm: task " + std::to_string(id) + " (min " +
                     std::to_string(min) + ") of " + std::to_string(count) +
                     " is not a shard 1..N; use a contiguous array such as --array=0-" +
                     std::to_string(count - 1));
  return c;
}

void write_shard_file(const std::string& path, const ShardFile& shard) {
  const nlohmann::json j = {{"format", "spinfer-shard"},
                            {"format_version", 1},
                            {"manifest", shard.manifest},
                            {"fits", unit_fits_to_json(shard.fits)}};
  write_file_atomically(path, [&](std::ostream& out) { out << j.dump(1) << '\n'; });
}

ShardFile read_shard_file(const std::string& path) {
  std::ifstream in(path);
  if (!in) throw FileError(path + ": cannot open shard file");
  nlohmann::json j;
  try {
    in >> j;
  } catch (const nlohmann::json::exception&) {
    throw InputError(path + ": not a JSON shard file (empty, truncated or damaged)");
  }
  if (!j.is_object() || j.value("format", "") != "spinfer-shard")
    throw InputError(path + ": not a spinfer shard file (format must be \"spinfer-shard\")");
  if (j.value("format_version", 0) != 1)
    throw InputError(path + ": shard file format_version " + j.value("format_version", nlohmann::json()).dump() +
                     " is not supported (expected 1)");
  if (!j.contains("manifest") || !j["manifest"].is_object() || !j.contains("fits"))
    throw InputError(path + ": shard file lacks its manifest or fits");
  ShardFile s;
  s.manifest = j["manifest"];
  s.fits = unit_fits_from_json(j["fits"], path);
  return s;
}

}  // namespace spinfer::cli
