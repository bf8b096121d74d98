#include "spinfer/atomic_file.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <memory>
#include <random>

#include "spinfer/errors.hpp"

namespace spinfer {
namespace {

namespace fs = std::filesystem;

// A unique name beside `target`, hidden and marked with the process id.
fs::path temporary_sibling(const fs::path& target, const char* kind) {
  static thread_local std::random_device rd;
  return target.parent_path() / ("." + target.filename().string() + "." + kind + "-" +
                                 std::to_string(::getpid()) + "-" + std::to_string(rd()));
}

// Removes its file on destruction unless released.
struct RemoveOnExit {
  fs::path p;
  bool armed = true;
  explicit RemoveOnExit(fs::path path) : p(std::move(path)) {}
  RemoveOnExit(const RemoveOnExit&) = delete;
  RemoveOnExit& operator=(const RemoveOnExit&) = delete;
  ~RemoveOnExit() {
    if (armed) {
      std::error_code ec;
      fs::remove(p, ec);
    }
  }
};

// Writes one output to a flushed temporary file; the returned guard removes it unless released.
std::unique_ptr<RemoveOnExit> stage(const FileOutput& output) {
  const fs::path target(output.first);
  if (target.filename().empty()) throw FileError(output.first + ": not a file name");
  auto tmp = std::make_unique<RemoveOnExit>(temporary_sibling(target, "tmp"));
  {
    std::ofstream out(tmp->p, std::ios::binary | std::ios::trunc);
    if (!out) throw FileError(output.first + ": cannot create file (" + std::strerror(errno) + ")");
    output.second(out);
    out.flush();
    if (!out) throw FileError(output.first + ": write failed (" + std::strerror(errno) + ")");
  }
  // Flush the data to disk before the rename makes it visible.
  const int fd = ::open(tmp->p.c_str(), O_RDONLY);
  if (fd >= 0) {
    ::fsync(fd);
    ::close(fd);
  }
  return tmp;
}

// What a committed output replaced: a saved copy of the previous file, or nothing.
struct Replaced {
  fs::path target;
  std::unique_ptr<RemoveOnExit> backup;  // null: there was no previous file
};

}  // namespace

void write_files_atomically(const std::vector<FileOutput>& outputs) {
  std::vector<std::unique_ptr<RemoveOnExit>> staged;
  for (const auto& o : outputs) staged.push_back(stage(o));
  std::vector<Replaced> done;
  auto roll_back = [&] {
    for (auto it = done.rbegin(); it != done.rend(); ++it) {
      std::error_code ec;
      if (it->backup) {
        fs::rename(it->backup->p, it->target, ec);
        if (!ec) it->backup->armed = false;
      } else {
        fs::remove(it->target, ec);
      }
    }
  };
  for (std::size_t k = 0; k < outputs.size(); ++k) {
    const fs::path target(outputs[k].first);
    Replaced r{target, nullptr};
    std::error_code ec;
    // Keep the previous file under another name (a hard link costs nothing; copy if the file
    // system has none) so that a later failure can put it back. The last output needs none: once
    // its rename succeeds nothing can fail (and a single file is simply one atomic rename).
    if (k + 1 < outputs.size() && fs::is_regular_file(target, ec)) {
      r.backup = std::make_unique<RemoveOnExit>(temporary_sibling(target, "old"));
      fs::create_hard_link(target, r.backup->p, ec);
      if (ec) {
        ec.clear();
        fs::copy_file(target, r.backup->p, ec);
      }
      if (ec) {
        const std::string why = ec.message();
        roll_back();
        throw FileError(outputs[k].first + ": cannot keep a copy of the previous file (" + why + ")");
      }
    }
    if (std::rename(staged[k]->p.c_str(), target.c_str()) != 0) {
      const std::string why = std::strerror(errno);
      roll_back();
      throw FileError(outputs[k].first + ": cannot move the finished file into place (" + why + ")" +
                      (done.empty() ? "" : "; the files written with it were rolled back"));
    }
    staged[k]->armed = false;
    done.push_back(std::move(r));
  }
  // Success: the saved previous files are removed by their guards.
}

void write_file_atomically(const std::string& path,
                           const std::function<void(std::ostream&)>& write) {
  write_files_atomically({FileOutput(path, write)});
}

}  // namespace spinfer
