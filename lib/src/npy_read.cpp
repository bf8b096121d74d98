// .npy decoding: magic, version, header length, header dict, then the raw data.
#include <algorithm>
#include <cstring>
#include <limits>

#include "npy_header.hpp"
#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/npy.hpp"

namespace spinfer {
namespace {

constexpr char kMagic[] = "\x93NUMPY";
constexpr std::size_t kMagicLen = 6;

std::uint32_t read_le(const char* p, int bytes) {
  std::uint32_t v = 0;
  for (int k = bytes - 1; k >= 0; --k) v = (v << 8) | static_cast<unsigned char>(p[k]);
  return v;
}

std::int64_t element_count(const std::vector<std::int64_t>& shape, std::int64_t item,
                           const std::string& source) {
  std::int64_t n = 1;
  for (std::int64_t d : shape) {
    if (d != 0 && n > std::numeric_limits<std::int64_t>::max() / item / d)
      throw InputError(source + ": array shape too large");
    n *= d;
  }
  return n;
}

void swap_bytes(std::vector<char>& bytes, std::int64_t unit) {
  if (unit <= 1) return;
  for (std::size_t k = 0; k + std::size_t(unit) <= bytes.size(); k += std::size_t(unit))
    std::reverse(bytes.begin() + std::ptrdiff_t(k), bytes.begin() + std::ptrdiff_t(k + unit));
}

}  // namespace

std::int64_t NpyArray::size() const {
  std::int64_t n = 1;
  for (std::int64_t d : shape) n *= d;
  return n;
}

std::int64_t NpyArray::item_size() const { return detail::parse_descr(descr, "array").item_size; }

NpyArray parse_npy(const char* data, std::size_t size, const std::string& source) {
  if (size == 0) throw InputError(source + ": empty file (not a .npy array)");
  if (size < kMagicLen + 2 || std::memcmp(data, kMagic, kMagicLen) != 0)
    throw InputError(source + ": not a .npy file (bad magic string)");
  const int major = static_cast<unsigned char>(data[6]);
  const int minor = static_cast<unsigned char>(data[7]);
  if ((major != 1 && major != 2 && major != 3) || minor != 0)
    throw InputError(source + ": unsupported .npy format version " + std::to_string(major) + "." +
                     std::to_string(minor));
  const int len_bytes = major == 1 ? 2 : 4;
  const std::size_t prefix = kMagicLen + 2 + std::size_t(len_bytes);
  if (size < prefix) throw InputError(source + ": truncated .npy file (no header length)");
  const std::size_t header_len = read_le(data + 8, len_bytes);
  if (header_len > kMaxNpyHeaderBytes)
    throw InputError(source + ": .npy header of " + std::to_string(header_len) +
                     " bytes exceeds the limit of " + std::to_string(kMaxNpyHeaderBytes));
  if (size < prefix + header_len) throw InputError(source + ": truncated .npy header");

  const detail::NpyHeader h =
      detail::parse_npy_header(std::string_view(data + prefix, header_len), source);
  const detail::Dtype d = detail::parse_descr(h.descr, source);
  const std::int64_t n = element_count(h.shape, d.item_size, source);
  const std::size_t expected = std::size_t(n * d.item_size);
  const std::size_t available = size - prefix - header_len;
  if (available < expected)
    throw InputError(source + ": truncated .npy data: expected " + std::to_string(expected) +
                     " bytes for shape and dtype '" + h.descr + "', found " +
                     std::to_string(available));
  if (available > expected)
    throw InputError(source + ": corrupt .npy file: " + std::to_string(available - expected) +
                     " unexpected bytes after the data");

  NpyArray a;
  a.shape = h.shape;
  a.fortran = h.fortran;
  a.bytes.assign(data + prefix + header_len, data + size);
  if (d.order == '>') swap_bytes(a.bytes, d.swap_unit);
  a.descr = std::string(1, d.item_size == 1 || d.kind == 'S' ? '|' : '<') + d.kind +
            h.descr.substr(2);
  return a;
}

NpyArray read_npy(const std::string& path) {
  const std::string data = read_text_file(path);
  return parse_npy(data.data(), data.size(), path);
}

}  // namespace spinfer
