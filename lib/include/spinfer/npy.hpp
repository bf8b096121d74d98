// NumPy .npy files, read and written by our own code (format: numpy/lib/format.py, "NPY format").
//
// Layout: magic "\x93NUMPY", version bytes (1.0: uint16 LE header length; 2.0 and 3.0: uint32 LE;
// 3.0 means a UTF-8 header), then a Python dict literal {'descr': ..., 'fortran_order': ...,
// 'shape': (...)} padded with spaces and ending in '\n' so data start at a multiple of 64 bytes.
// Keys may come in any order. Data follow: prod(shape) items, C or Fortran order.
//
// Supported item types (descr): |b1 |u1 |i1 <u2 <i2 <u4 <i4 <u8 <i8 <f4 <f8, the same with '>'
// (big-endian: swapped to little-endian on reading) or '=' (native), and fixed-width strings
// <U n / |S n (read only, e.g. a "names" member of an .npz). Object arrays (pickles), structured
// (record) dtypes, complex, float16 and datetime types are rejected with InputError.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/spin_matrix.hpp"

namespace spinfer {

/// Largest header we accept (the same limit numpy's loader applies by default).
constexpr std::size_t kMaxNpyHeaderBytes = 10000;

/// A typed n-dimensional array as raw bytes.
struct NpyArray {
  /// Little-endian (or byte-order-free) descr: "|b1", "|u1", "|i1", "<u2", ..., "<f8", "<U7",
  /// "|S3". Arrays returned by the readers are always little-endian (big-endian files are
  /// swapped on reading); the writer accepts only '<' and '|' descrs.
  std::string descr;
  std::vector<std::int64_t> shape;  ///< empty = a scalar (one element)
  bool fortran = false;             ///< column-major data
  std::vector<char> bytes;          ///< prod(shape) * item_size() bytes

  std::int64_t size() const;        ///< number of elements
  std::int64_t item_size() const;   ///< bytes per element (from descr)
};

/// Parses .npy bytes already in memory. `source` names the file for messages. Throws InputError
/// on a bad magic string, a corrupt or oversized header, unsupported dtypes, truncated or
/// trailing data.
NpyArray parse_npy(const char* data, std::size_t size, const std::string& source);

/// Reads a .npy file. Missing/unreadable file: FileError; bad content: InputError.
NpyArray read_npy(const std::string& path);

/// Everything before the data in a .npy file (magic string, version, header length and the
/// padded header) for an array of this descr, order and shape; the raw data follow it. InputError
/// for an unsupported or big-endian descr or a negative dimension.
std::string npy_preamble(const std::string& descr, bool fortran, const std::vector<std::int64_t>& shape);

/// The complete .npy encoding (version 1.0, or 2.0 if the header needs it) of an array.
std::string encode_npy(const NpyArray& array);

/// Writes an array to `path` atomically.
void write_npy(const std::string& path, const NpyArray& array);

/// A 2-D numeric array as a SpinMatrix (values 0/1 or -1/+1; see values.hpp), honouring
/// Fortran order. Throws InputError for other shapes, dtypes or values.
SpinMatrix npy_to_matrix(const NpyArray& array, std::optional<Convention> stated,
                         const std::string& source);

/// The matrix as an array: uint8 0/1 for the binary convention, int8 -1/+1 for spin.
NpyArray matrix_to_npy(const SpinMatrix& data);

/// Decodes a 1-D string array (<U n or |S n) into UTF-8 strings (trailing NULs removed).
std::vector<std::string> npy_to_strings(const NpyArray& array, const std::string& source);

/// A 1-D <U n array holding the strings (UTF-8 in, UTF-32 stored, as numpy does).
NpyArray strings_to_npy(const std::vector<std::string>& strings);

/// Reads a 2-D .npy file as a SpinMatrix.
SpinMatrix read_npy_matrix(const std::string& path, std::optional<Convention> stated = {});

/// Writes a SpinMatrix (uint8 0/1 or int8 -1/+1, by its convention) atomically.
void write_npy(const std::string& path, const SpinMatrix& data);
/// Writes a float64 matrix atomically (Fortran order, Eigen's layout; numpy reads the same matrix).
void write_npy(const std::string& path, const Eigen::MatrixXd& matrix);
/// Writes a float64 vector (shape (n,)) atomically.
void write_npy(const std::string& path, const Eigen::VectorXd& vector);

}  // namespace spinfer
