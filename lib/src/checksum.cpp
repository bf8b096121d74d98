#include "spinfer/checksum.hpp"

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <vector>

#include "spinfer/errors.hpp"

namespace spinfer {

std::uint64_t fnv1a64(const void* data, std::size_t size, std::uint64_t state) {
  const auto* p = static_cast<const unsigned char*>(data);
  for (std::size_t k = 0; k < size; ++k) {
    state ^= p[k];
    state *= 0x100000001b3ULL;
  }
  return state;
}

std::string fnv1a64_hex(std::uint64_t hash) {
  char hex[17];
  std::snprintf(hex, sizeof hex, "%016llx", static_cast<unsigned long long>(hash));
  return hex;
}

std::string file_fnv1a64(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw FileError(path + ": cannot open file (" + std::strerror(errno) + ")");
  std::uint64_t h = kFnv1a64Basis;
  std::vector<char> buf(1 << 16);
  while (in) {
    in.read(buf.data(), std::streamsize(buf.size()));
    h = fnv1a64(buf.data(), std::size_t(in.gcount()), h);
  }
  if (in.bad()) throw FileError(path + ": read failed");
  return fnv1a64_hex(h);
}

}  // namespace spinfer
