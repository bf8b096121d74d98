// .npy encoding: version 1.0 when the header fits in 65535 bytes, else 2.0; the preamble is
// padded with spaces and a final '\n' to a multiple of 64 bytes (numpy's ARRAY_ALIGN).
#include "npy_header.hpp"
#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/npy.hpp"

namespace spinfer {
namespace {

// The preamble of an array whose bytes are checked against its shape and dtype.
std::string checked_preamble(const NpyArray& a) {
  std::string preamble = npy_preamble(a.descr, a.fortran, a.shape);  // validates descr and shape
  if (std::int64_t(a.bytes.size()) != a.size() * a.item_size())
    throw InputError("encode_npy: " + std::to_string(a.bytes.size()) +
                     " bytes do not match the shape and dtype");
  return preamble;
}

}  // namespace

std::string npy_preamble(const std::string& descr, bool fortran, const std::vector<std::int64_t>& shape) {
  const detail::Dtype d = detail::parse_descr(descr, "array");
  if (d.order == '>') throw InputError("encode_npy: only little-endian arrays are written");
  for (std::int64_t dim : shape)
    if (dim < 0) throw InputError("encode_npy: negative dimension");
  std::string header = detail::format_npy_header(descr, fortran, shape);
  const bool v2 = header.size() + 1 + 10 > 65535;
  const std::size_t prefix = v2 ? 12 : 10;
  const std::size_t total = (prefix + header.size() + 1 + 63) / 64 * 64;
  header.append(total - prefix - header.size() - 1, ' ');
  header += '\n';
  std::string out = "\x93NUMPY";
  out += char(v2 ? 2 : 1);
  out += char(0);
  const std::uint32_t len = std::uint32_t(header.size());
  for (std::size_t k = 0; k < (v2 ? 4u : 2u); ++k) out += char((len >> (8 * k)) & 0xff);
  out += header;
  return out;
}

std::string encode_npy(const NpyArray& a) {
  std::string out = checked_preamble(a);
  out.append(a.bytes.data(), a.bytes.size());
  return out;
}

void write_npy(const std::string& path, const NpyArray& array) {
  const std::string preamble = checked_preamble(array);  // validates before any file is created
  write_file_atomically(path, [&](std::ostream& out) {
    out.write(preamble.data(), std::streamsize(preamble.size()));
    out.write(array.bytes.data(), std::streamsize(array.bytes.size()));
  });
}

}  // namespace spinfer
