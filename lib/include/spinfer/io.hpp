// Reading and writing binary data matrices by file extension:
//   .npy          one 2-D array (bool, integer or float holding 0/1 or -1/+1)
//   .npz          a member chosen by name, or the only member; an archive written by
//                 write_matrix holds "X" (the matrix) and, when there are names, "names"
//   .csv .tsv .txt  delimited text, optional header row of names (see csv.hpp)
// Missing or unreadable files: FileError. Empty, truncated or malformed content: InputError
// naming the file (and the row/line and column where it applies).
#pragma once

#include <optional>
#include <string>

#include "spinfer/csv.hpp"
#include "spinfer/npy.hpp"
#include "spinfer/npz.hpp"
#include "spinfer/spin_matrix.hpp"

namespace spinfer {

struct ReadOptions {
  /// How the file's values are read; nullopt detects it from the values (see values.hpp).
  std::optional<Convention> convention;
  /// .npz member ("name" or "name.npy"); empty: "X" when the archive has it, else the only one.
  std::string member;
  /// Text files only.
  CsvOptions csv;
};

/// Lower-case file extension including the dot (".npy"), or "" if none.
std::string file_extension(const std::string& path);

/// Reads a matrix, dispatching on the extension. The file must exist (FileError otherwise).
SpinMatrix read_matrix(const std::string& path, const ReadOptions& options = {});

/// Writes a matrix in the format its extension names, atomically (values by its convention).
/// In .npz the matrix is member "X" and its names (if any) member "names".
void write_matrix(const std::string& path, const SpinMatrix& data);

}  // namespace spinfer
