// A 0/1 or -1/+1 matrix from delimited text, and back.
#include <cmath>
#include <sstream>
#include <unordered_map>

#include "spinfer/atomic_file.hpp"
#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/values.hpp"

namespace spinfer {
namespace {

bool looks_like_header(const std::vector<CsvCell>& cells) {
  for (const CsvCell& c : cells)
    if (c.quoted || !parse_number(c.text)) return true;
  return false;
}

std::vector<std::string> header_names(const std::vector<CsvCell>& cells, const std::string& path,
                                      std::int64_t line) {
  std::vector<std::string> names;
  std::unordered_map<std::string, std::size_t> seen;
  for (std::size_t k = 0; k < cells.size(); ++k) {
    const std::string& n = cells[k].text;
    if (n.empty())
      throw InputError(csv_where(path, line, std::int64_t(k) + 1) + "empty column name");
    const auto [it, fresh] = seen.emplace(n, k);
    if (!fresh)
      throw InputError(csv_where(path, line, std::int64_t(k) + 1) + "duplicate column name '" +
                       n + "' (also column " + std::to_string(it->second + 1) + ")");
    names.push_back(n);
  }
  return names;
}

// Accumulates validated values with their positions for messages.
struct MatrixBuilder {
  explicit MatrixBuilder(const std::string& p) : path(p) {}
  const std::string& path;
  std::size_t width = 0;
  std::int64_t width_line = 0;
  std::vector<std::int8_t> values;
  std::int64_t rows = 0;
  std::int64_t zero_line = 0, zero_col = 0, minus_line = 0, minus_col = 0;

  void add_row(std::int64_t line, const std::vector<CsvCell>& cells) {
    if (width == 0) {
      width = cells.size();
      width_line = line;
    }
    if (cells.size() != width)
      throw InputError(csv_where(path, line) + std::to_string(cells.size()) +
                       " cells, expected " + std::to_string(width) + " (as on line " +
                       std::to_string(width_line) + ")");
    for (std::size_t k = 0; k < cells.size(); ++k) add_value(line, std::int64_t(k) + 1, cells[k]);
    ++rows;
  }

  void add_value(std::int64_t line, std::int64_t col, const CsvCell& cell) {
    const std::optional<double> v = parse_number(cell.text);
    if (!v)
      throw InputError(csv_where(path, line, col) + "'" + cell.text + "' is not a number");
    if (!std::isfinite(*v))
      throw InputError(csv_where(path, line, col) + "value " + cell.text +
                       " is not finite; expected 0/1 or -1/+1");
    if (*v == 1) {
      values.push_back(1);
    } else if (*v == 0) {
      values.push_back(0);
      if (!zero_line) {
        zero_line = line;
        zero_col = col;
      }
    } else if (*v == -1) {
      values.push_back(-1);
      if (!minus_line) {
        minus_line = line;
        minus_col = col;
      }
    } else {
      throw InputError(csv_where(path, line, col) + "value " + cell.text +
                       " is not binary; expected 0/1 or -1/+1");
    }
    if (zero_line && minus_line)
      throw InputError(csv_where(path, line, col) + "values mix 0 and -1 (0 at line " +
                       std::to_string(zero_line) + ", column " + std::to_string(zero_col) +
                       "; -1 at line " + std::to_string(minus_line) + ", column " +
                       std::to_string(minus_col) + "); expected {0,1} or {-1,+1}");
  }
};

std::string quote(const std::string& name) {
  std::string s = "\"";
  for (char c : name) {
    if (c == '\n' || c == '\r') throw InputError("column name with a line break: cannot write it");
    s += c;
    if (c == '"') s += '"';
  }
  return s + "\"";
}

}  // namespace

SpinMatrix read_csv_matrix(const std::string& path, std::optional<Convention> stated,
                           const CsvOptions& options) {
  const std::string text = read_text_file(path);
  const char delimiter = options.delimiter ? options.delimiter : delimiter_for(path);
  std::vector<std::string> names;
  MatrixBuilder b(path);
  bool first = true;
  for_each_csv_row(text, delimiter, path, [&](std::int64_t line, const std::vector<CsvCell>& cells) {
    const bool header = first && (options.header == HeaderMode::present ||
                                  (options.header == HeaderMode::automatic && looks_like_header(cells)));
    first = false;
    if (header) {
      names = header_names(cells, path, line);
      b.width = names.size();
      b.width_line = line;
    } else {
      b.add_row(line, cells);
    }
  });
  if (b.rows == 0)
    throw InputError(path + (names.empty() ? ": empty file (no data rows)"
                                           : ": no data rows after the header"));
  SpinMatrix m = values_to_matrix<std::int8_t>(b.values.data(), b.rows, std::int64_t(b.width),
                                               std::int64_t(b.width), 1, stated, path);
  if (!names.empty()) m.set_names(std::move(names));
  return m;
}

void write_csv_matrix(const std::string& path, const SpinMatrix& data, const CsvOptions& options) {
  const char delimiter = options.delimiter ? options.delimiter : delimiter_for(path);
  std::string header;
  for (std::size_t k = 0; k < data.names().size(); ++k)
    header += (k ? std::string(1, delimiter) : std::string()) + quote(data.names()[k]);
  const char* off = data.convention() == Convention::binary ? "0" : "-1";
  write_file_atomically(path, [&](std::ostream& out) {
    if (!header.empty()) out << header << '\n';
    std::string line;
    for (std::int64_t t = 0; t < data.rows(); ++t) {
      line.clear();
      const std::uint8_t* r = data.row(t);
      for (std::int64_t i = 0; i < data.cols(); ++i) {
        if (i) line += delimiter;
        line += r[i] ? "1" : off;
      }
      line += '\n';
      out << line;
    }
  });
}

}  // namespace spinfer
