// Exception types of the spinfer core. Failures are exceptions; outcomes (converged or not,
// iterations) are data in the result types. Front ends translate each type exactly once:
//   InputError     -> Python ValueError,  CLI exit code 65 (bad input data)
//   FileError      -> Python OSError,     CLI exit code 66 (cannot open / read / write a file)
//   NumericalError -> Python ArithmeticError, CLI exit code 70
//   Interrupted    -> Python KeyboardInterrupt, CLI exit code 128+signal
#pragma once

#include <cstdint>
#include <stdexcept>
#include <string>

namespace spinfer {

/// The data (or an argument) is not what the function accepts. The message names the file and,
/// where it applies, the 1-based row and column.
class InputError : public std::invalid_argument {
 public:
  using std::invalid_argument::invalid_argument;
};

/// A file could not be opened, read or written (missing, permissions, truncated container).
class FileError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// A computation has no finite answer (singular matrix, no real root, divergence).
class NumericalError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// A long computation was stopped by its progress callback (Ctrl-C, SIGTERM).
class Interrupted : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// "file.npy: row 3, column 7: " style prefix. Rows and columns are 1-based in messages; pass -1
/// to omit one.
std::string where(const std::string& source, std::int64_t row = -1, std::int64_t column = -1);

}  // namespace spinfer
