#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>

#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"

namespace spinfer {

std::string read_text_file(const std::string& path) {
  namespace fs = std::filesystem;
  std::error_code ec;
  const fs::file_status st = fs::status(path, ec);
  if (!fs::exists(st)) throw FileError(path + ": no such file");
  if (fs::is_directory(st)) throw FileError(path + ": is a directory, not a file");
  std::ifstream in(path, std::ios::binary);
  if (!in) throw FileError(path + ": cannot open (" + std::strerror(errno) + ")");
  std::string data;
  in.seekg(0, std::ios::end);
  const std::streamoff size = in.tellg();
  if (size < 0) throw FileError(path + ": cannot determine the file size");
  data.resize(std::size_t(size));
  in.seekg(0, std::ios::beg);
  in.read(data.data(), size);
  if (in.gcount() != size) throw FileError(path + ": read failed (" + std::strerror(errno) + ")");
  return data;
}

}  // namespace spinfer
