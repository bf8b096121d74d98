// Conversions between NpyArray and the library's types (SpinMatrix, Eigen, string lists).
#include <algorithm>
#include <cstring>

#include "npy_header.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/npy.hpp"
#include "spinfer/values.hpp"

namespace spinfer {
namespace {

std::string shape_text(const std::vector<std::int64_t>& shape) {
  std::string s = "(";
  for (std::size_t k = 0; k < shape.size(); ++k) s += (k ? ", " : "") + std::to_string(shape[k]);
  return s + (shape.size() == 1 ? ",)" : ")");
}

template <typename T>
SpinMatrix typed_to_matrix(const NpyArray& a, std::optional<Convention> stated,
                           const std::string& source) {
  const std::int64_t rows = a.shape[0], cols = a.shape[1];
  // Copy into aligned storage: the byte buffer gives no alignment guarantee for T.
  std::vector<T> values(std::size_t(rows * cols));
  if (!values.empty()) std::memcpy(values.data(), a.bytes.data(), values.size() * sizeof(T));
  const std::int64_t row_stride = a.fortran ? 1 : cols;
  const std::int64_t col_stride = a.fortran ? rows : 1;
  return values_to_matrix<T>(values.data(), rows, cols, row_stride, col_stride, stated, source);
}

NpyArray float_array(const double* data, std::vector<std::int64_t> shape, bool fortran) {
  NpyArray a;
  a.descr = "<f8";
  a.shape = std::move(shape);
  a.fortran = fortran;
  a.bytes.resize(std::size_t(a.size()) * sizeof(double));
  if (!a.bytes.empty()) std::memcpy(a.bytes.data(), data, a.bytes.size());
  return a;
}

void append_utf8(std::string& out, std::uint32_t cp) {
  if (cp < 0x80) {
    out += char(cp);
  } else if (cp < 0x800) {
    out += char(0xC0 | (cp >> 6));
    out += char(0x80 | (cp & 0x3F));
  } else if (cp < 0x10000) {
    out += char(0xE0 | (cp >> 12));
    out += char(0x80 | ((cp >> 6) & 0x3F));
    out += char(0x80 | (cp & 0x3F));
  } else {
    out += char(0xF0 | (cp >> 18));
    out += char(0x80 | ((cp >> 12) & 0x3F));
    out += char(0x80 | ((cp >> 6) & 0x3F));
    out += char(0x80 | (cp & 0x3F));
  }
}

// UTF-8 to code points; invalid bytes are taken as Latin-1 (names are informational).
std::vector<std::uint32_t> code_points(const std::string& s) {
  std::vector<std::uint32_t> out;
  std::size_t k = 0;
  while (k < s.size()) {
    const auto c = static_cast<unsigned char>(s[k]);
    const std::size_t extra = c >= 0xF0 ? 3 : c >= 0xE0 ? 2 : c >= 0xC0 ? 1 : 0;
    if (extra == 0 || k + extra >= s.size()) {
      out.push_back(c);
      ++k;
      continue;
    }
    std::uint32_t cp = c & (0x3Fu >> extra);
    for (std::size_t j = 1; j <= extra; ++j)
      cp = (cp << 6) | (static_cast<unsigned char>(s[k + j]) & 0x3Fu);
    out.push_back(cp);
    k += extra + 1;
  }
  return out;
}

}  // namespace

SpinMatrix npy_to_matrix(const NpyArray& a, std::optional<Convention> stated,
                         const std::string& source) {
  if (a.shape.size() != 2)
    throw InputError(source + ": expected a 2-D array (samples x units), got shape " +
                     shape_text(a.shape));
  const detail::Dtype d = detail::parse_descr(a.descr, source);
  switch (d.kind) {
    case 'b':  // read bool bytes as uint8 so a stray byte value is reported, not undefined
    case 'u':
      switch (d.item_size) {
        case 1: return typed_to_matrix<std::uint8_t>(a, stated, source);
        case 2: return typed_to_matrix<std::uint16_t>(a, stated, source);
        case 4: return typed_to_matrix<std::uint32_t>(a, stated, source);
        default: return typed_to_matrix<std::uint64_t>(a, stated, source);
      }
    case 'i':
      switch (d.item_size) {
        case 1: return typed_to_matrix<std::int8_t>(a, stated, source);
        case 2: return typed_to_matrix<std::int16_t>(a, stated, source);
        case 4: return typed_to_matrix<std::int32_t>(a, stated, source);
        default: return typed_to_matrix<std::int64_t>(a, stated, source);
      }
    case 'f':
      if (d.item_size == 4) return typed_to_matrix<float>(a, stated, source);
      return typed_to_matrix<double>(a, stated, source);
    default:
      throw InputError(source + ": a string array (dtype '" + a.descr +
                       "') is not a data matrix; expected bool, integers or floats");
  }
}

NpyArray matrix_to_npy(const SpinMatrix& data) {
  NpyArray a;
  a.shape = {data.rows(), data.cols()};
  const std::size_t n = std::size_t(data.rows() * data.cols());
  a.bytes.assign(reinterpret_cast<const char*>(data.data()),
                 reinterpret_cast<const char*>(data.data()) + n);
  if (data.convention() == Convention::binary) {
    a.descr = "|u1";
  } else {
    a.descr = "|i1";
    for (char& b : a.bytes) b = b ? char(1) : char(-1);
  }
  return a;
}

std::vector<std::string> npy_to_strings(const NpyArray& a, const std::string& source) {
  const detail::Dtype d = detail::parse_descr(a.descr, source);
  if ((d.kind != 'U' && d.kind != 'S') || a.shape.size() != 1)
    throw InputError(source + ": expected a 1-D string array, got dtype '" + a.descr +
                     "' and shape " + shape_text(a.shape));
  std::vector<std::string> out;
  for (std::int64_t k = 0; k < a.shape[0]; ++k) {
    const char* item = a.bytes.data() + k * d.item_size;
    std::string s;
    if (d.kind == 'S') {
      s.assign(item, strnlen(item, std::size_t(d.item_size)));
    } else {
      for (std::int64_t c = 0; c < d.item_size / 4; ++c) {
        std::uint32_t cp;
        std::memcpy(&cp, item + 4 * c, 4);
        if (cp == 0) break;
        append_utf8(s, cp);
      }
    }
    out.push_back(std::move(s));
  }
  return out;
}

NpyArray strings_to_npy(const std::vector<std::string>& strings) {
  std::vector<std::vector<std::uint32_t>> cps;
  std::size_t width = 1;
  for (const std::string& s : strings) {
    cps.push_back(code_points(s));
    width = std::max(width, cps.back().size());
  }
  NpyArray a;
  a.descr = "<U" + std::to_string(width);
  a.shape = {std::int64_t(strings.size())};
  a.bytes.assign(strings.size() * width * 4, 0);
  for (std::size_t k = 0; k < cps.size(); ++k)
    std::memcpy(a.bytes.data() + k * width * 4, cps[k].data(), cps[k].size() * 4);
  return a;
}

SpinMatrix read_npy_matrix(const std::string& path, std::optional<Convention> stated) {
  return npy_to_matrix(read_npy(path), stated, path);
}

void write_npy(const std::string& path, const SpinMatrix& data) {
  write_npy(path, matrix_to_npy(data));
}

void write_npy(const std::string& path, const Eigen::MatrixXd& matrix) {
  // Eigen stores columns contiguously: write them as a Fortran-order array (numpy reads it
  // as the same matrix).
  write_npy(path, float_array(matrix.data(), {matrix.rows(), matrix.cols()}, true));
}

void write_npy(const std::string& path, const Eigen::VectorXd& vector) {
  write_npy(path, float_array(vector.data(), {vector.size()}, false));
}

}  // namespace spinfer
