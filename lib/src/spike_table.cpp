// Spike tables: reading (unit, time) rows from delimited text, and validating given arrays.
#include <algorithm>
#include <cctype>
#include <cmath>
#include <iomanip>
#include <sstream>
#include <unordered_map>

#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/spikes.hpp"

namespace spinfer {
namespace {

std::string lower(std::string s) {
  std::transform(s.begin(), s.end(), s.begin(), [](unsigned char c) { return char(std::tolower(c)); });
  return s;
}

struct Columns {
  std::size_t unit = 0, time = 1, min_width = 2;
  bool header = false;
};

// A first row is a header when it names a "time" column or its time cell is not a number
// (unit ids may be text, so they say nothing).
Columns find_columns(const std::vector<CsvCell>& cells, const std::string& path, std::int64_t line) {
  Columns c;
  bool named = false;
  for (const CsvCell& cell : cells) named |= lower(cell.text) == "time" || lower(cell.text) == "unit";
  c.header = named || cells.size() < 2 || !parse_number(cells[1].text);
  if (!c.header) {
    if (cells.size() != 2)
      throw InputError(csv_where(path, line) + std::to_string(cells.size()) +
                       " cells; a spike table without a header has two columns: unit, time");
    return c;
  }
  bool have_unit = false, have_time = false;
  for (std::size_t k = 0; k < cells.size(); ++k) {
    const std::string name = lower(cells[k].text);
    if (name == "unit" && !have_unit) {
      c.unit = k;
      have_unit = true;
    }
    if (name == "time" && !have_time) {
      c.time = k;
      have_time = true;
    }
  }
  if (!have_unit || !have_time)
    throw InputError(csv_where(path, line) +
                     "the header must name the columns 'unit' and 'time' (time in seconds)");
  c.min_width = std::max(c.unit, c.time) + 1;
  return c;
}

void check_time(double t, const std::string& where_text) {
  if (!std::isfinite(t)) throw InputError(where_text + "spike time is not finite");
  if (t < 0) {
    std::ostringstream s;
    s << where_text << "spike time " << std::setprecision(10) << t << " is negative";
    throw InputError(s.str());
  }
}

}  // namespace

SpikeTable read_spike_table(const std::string& path) {
  const std::string text = read_text_file(path);
  const char delimiter = delimiter_for(path);
  SpikeTable table;
  table.source = path;
  std::unordered_map<std::string, std::int32_t> ids;
  Columns cols;
  std::size_t width = 0;
  bool first = true;
  for_each_csv_row(text, delimiter, path, [&](std::int64_t line, const std::vector<CsvCell>& cells) {
    if (first) {
      first = false;
      cols = find_columns(cells, path, line);
      width = cells.size();
      if (cols.header) return;
    }
    if (cells.size() != width)
      throw InputError(csv_where(path, line) + std::to_string(cells.size()) +
                       " cells, expected " + std::to_string(width));
    const std::string& id = cells[cols.unit].text;
    if (id.empty())
      throw InputError(csv_where(path, line, std::int64_t(cols.unit) + 1) + "empty unit id");
    const CsvCell& tc = cells[cols.time];
    const std::optional<double> t = parse_number(tc.text);
    const std::string at = csv_where(path, line, std::int64_t(cols.time) + 1);
    if (!t) throw InputError(at + "'" + tc.text + "' is not a time in seconds");
    check_time(*t, at);
    const auto [it, fresh] = ids.emplace(id, std::int32_t(table.unit_ids.size()));
    if (fresh) table.unit_ids.push_back(id);
    table.unit.push_back(it->second);
    table.time.push_back(*t);
  });
  if (table.time.empty()) throw InputError(path + ": no spikes in the file");
  return table;
}

void validate_spike_table(const SpikeTable& t) {
  if (t.unit.size() != t.time.size())
    throw InputError(t.source + ": " + std::to_string(t.unit.size()) + " unit labels but " +
                     std::to_string(t.time.size()) + " spike times");
  std::unordered_map<std::string, std::size_t> seen;
  for (std::size_t k = 0; k < t.unit_ids.size(); ++k) {
    if (t.unit_ids[k].empty()) throw InputError(t.source + ": empty unit id");
    if (!seen.emplace(t.unit_ids[k], k).second)
      throw InputError(t.source + ": unit id '" + t.unit_ids[k] + "' is listed twice");
  }
  for (std::size_t k = 0; k < t.time.size(); ++k) {
    const bool time_ok = std::isfinite(t.time[k]) && t.time[k] >= 0;
    const bool unit_ok = t.unit[k] >= 0 && std::size_t(t.unit[k]) < t.unit_ids.size();
    if (time_ok && unit_ok) continue;  // the message is built only on failure
    const std::string at = t.source + ": spike " + std::to_string(k + 1) + ": ";
    check_time(t.time[k], at);
    throw InputError(at + "unit index out of range");
  }
}

SpikeTable make_spike_table(std::vector<std::string> unit_ids, std::vector<std::int32_t> unit,
                            std::vector<double> time, const std::string& source) {
  SpikeTable t;
  t.unit_ids = std::move(unit_ids);
  t.unit = std::move(unit);
  t.time = std::move(time);
  t.source = source;
  validate_spike_table(t);
  return t;
}

}  // namespace spinfer
