#include "spinfer/atomic_file.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <random>

#include "spinfer/errors.hpp"

namespace spinfer {

void write_file_atomically(const std::string& path,
                           const std::function<void(std::ostream&)>& write) {
  namespace fs = std::filesystem;
  const fs::path target(path);
  if (target.filename().empty()) throw FileError(path + ": not a file name");
  std::random_device rd;
  const fs::path tmp = target.parent_path() /
                       ("." + target.filename().string() + ".tmp-" + std::to_string(::getpid()) +
                        "-" + std::to_string(rd()));
  struct Cleanup {
    fs::path p;
    bool armed = true;
    ~Cleanup() {
      if (armed) {
        std::error_code ec;
        fs::remove(p, ec);
      }
    }
  } cleanup{tmp};
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw FileError(path + ": cannot create file (" + std::strerror(errno) + ")");
    write(out);
    out.flush();
    if (!out) throw FileError(path + ": write failed (" + std::strerror(errno) + ")");
  }
  // Flush the data to disk before the rename makes it visible.
  const int fd = ::open(tmp.c_str(), O_RDONLY);
  if (fd >= 0) {
    ::fsync(fd);
    ::close(fd);
  }
  if (std::rename(tmp.c_str(), target.c_str()) != 0)
    throw FileError(path + ": cannot move the finished file into place (" + std::strerror(errno) + ")");
  cleanup.armed = false;
}

}  // namespace spinfer
