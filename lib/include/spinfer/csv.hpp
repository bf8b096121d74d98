// Delimited text matrices (CSV / TSV).
//
//   - delimiter: ',' for .csv, tab for .tsv and .txt, unless given explicitly;
//   - lines whose first non-blank character is '#' and blank lines are skipped;
//   - an optional header row of unit names: in automatic mode the first row is a header when any
//     of its cells is not a number or is quoted; names must be unique and non-empty;
//   - cells may be quoted with double quotes ("" inside a quoted cell is one quote); the writer
//     quotes every name, so numeric names ("3", "17") still read back as a header;
//   - every row must have the same number of cells.
// Errors (InputError) name the file and the 1-based line and column.
#pragma once

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "spinfer/spin_matrix.hpp"

namespace spinfer {

enum class HeaderMode { automatic, present, absent };

struct CsvOptions {
  char delimiter = 0;  ///< 0: from the file extension
  HeaderMode header = HeaderMode::automatic;
};

/// ',' for .csv, '\t' for .tsv and .txt; InputError for other extensions.
char delimiter_for(const std::string& path);

struct CsvCell {
  std::string text;     ///< unquoted, without surrounding spaces
  bool quoted = false;  ///< the cell was written in double quotes
};

/// Calls `row(line, cells)` for every data-bearing line (comments and blank lines skipped).
/// `line` is 1-based. A UTF-8 byte-order mark and '\r' line ends are accepted.
void for_each_csv_row(const std::string& text, char delimiter, const std::string& source,
                      const std::function<void(std::int64_t, const std::vector<CsvCell>&)>& row);

/// "file.csv: line 3, column 2: " (1-based; column omitted when < 0).
std::string csv_where(const std::string& source, std::int64_t line, std::int64_t column = -1);

/// Parses a whole cell as a number (leading '+' allowed, surrounding spaces not). Returns
/// nullopt if the cell is not a number; "nan" and "inf" parse (callers reject them).
std::optional<double> parse_number(std::string_view cell);

/// Reads the whole file into memory. FileError if it cannot be opened or read.
std::string read_text_file(const std::string& path);

/// Reads a 0/1 or -1/+1 matrix. Unit names come from the header row, if there is one.
SpinMatrix read_csv_matrix(const std::string& path, std::optional<Convention> stated = {},
                           const CsvOptions& options = {});

/// Writes the matrix (0/1 or -1/+1 by its convention) with a header row of names when the
/// matrix has names, atomically.
void write_csv_matrix(const std::string& path, const SpinMatrix& data, const CsvOptions& options = {});

}  // namespace spinfer
