// Splitting delimited text into cells, and number parsing.
#include <charconv>
#include <cstdlib>

#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/io.hpp"

namespace spinfer {
namespace {

bool is_blank(char c, char delimiter) { return (c == ' ' || c == '\t') && c != delimiter; }

// Splits one line (without its '\n') into cells.
std::vector<CsvCell> split_line(std::string_view line, char delimiter, const std::string& source,
                                std::int64_t line_no) {
  std::vector<CsvCell> cells;
  std::size_t k = 0;
  while (true) {
    CsvCell cell;
    while (k < line.size() && is_blank(line[k], delimiter)) ++k;
    if (k < line.size() && line[k] == '"') {
      cell.quoted = true;
      ++k;
      while (true) {
        if (k >= line.size())
          throw InputError(csv_where(source, line_no, std::int64_t(cells.size()) + 1) +
                           "unterminated quoted cell");
        if (line[k] == '"') {
          if (k + 1 < line.size() && line[k + 1] == '"') {
            cell.text += '"';
            k += 2;
            continue;
          }
          ++k;
          break;
        }
        cell.text += line[k++];
      }
      while (k < line.size() && is_blank(line[k], delimiter)) ++k;
      if (k < line.size() && line[k] != delimiter)
        throw InputError(csv_where(source, line_no, std::int64_t(cells.size()) + 1) +
                         "unexpected text after a quoted cell");
    } else {
      const std::size_t end = std::min(line.find(delimiter, k), line.size());
      std::size_t last = end;
      while (last > k && is_blank(line[last - 1], delimiter)) --last;
      cell.text.assign(line.substr(k, last - k));
      k = end;
    }
    cells.push_back(std::move(cell));
    if (k >= line.size()) break;
    ++k;  // skip the delimiter; a trailing delimiter yields a final empty cell
  }
  return cells;
}

bool skip_line(std::string_view line) {
  const std::size_t first = line.find_first_not_of(" \t");
  return first == std::string_view::npos || line[first] == '#';
}

}  // namespace

std::string csv_where(const std::string& source, std::int64_t line, std::int64_t column) {
  std::string s = source + ": line " + std::to_string(line);
  if (column >= 0) s += ", column " + std::to_string(column);
  return s + ": ";
}

char delimiter_for(const std::string& path) {
  const std::string ext = file_extension(path);
  if (ext == ".csv") return ',';
  if (ext == ".tsv" || ext == ".txt") return '\t';
  throw InputError(path + ": cannot tell the delimiter from the extension '" + ext +
                   "'; use .csv (comma), .tsv or .txt (tab)");
}

void for_each_csv_row(const std::string& text, char delimiter, const std::string& source,
                      const std::function<void(std::int64_t, const std::vector<CsvCell>&)>& row) {
  std::string_view all(text);
  if (all.substr(0, 3) == "\xEF\xBB\xBF") all.remove_prefix(3);  // UTF-8 byte-order mark
  std::int64_t line_no = 0;
  std::size_t pos = 0;
  while (pos < all.size()) {
    const std::size_t nl = std::min(all.find('\n', pos), all.size());
    std::string_view line = all.substr(pos, nl - pos);
    pos = nl + 1;
    ++line_no;
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    if (skip_line(line)) continue;
    row(line_no, split_line(line, delimiter, source, line_no));
  }
}

std::optional<double> parse_number(std::string_view cell) {
  if (!cell.empty() && cell.front() == '+') cell.remove_prefix(1);
  if (cell.empty()) return std::nullopt;
  double v = 0;
  const auto [end, ec] = std::from_chars(cell.data(), cell.data() + cell.size(), v);
  if (ec == std::errc::result_out_of_range) {
    // from_chars leaves v unset on overflow and underflow; strtod gives +-inf or ~0 for them.
    return std::strtod(std::string(cell).c_str(), nullptr);
  }
  if (ec != std::errc() || end != cell.data() + cell.size()) return std::nullopt;
  return v;
}

}  // namespace spinfer
