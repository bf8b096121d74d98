#include "checkpoint_state.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "spinfer/errors.hpp"

namespace spinfer::checkpoint {

nlohmann::json number(double v) {
  if (std::isnan(v)) return "nan";
  if (std::isinf(v)) return v > 0 ? "inf" : "-inf";
  return v;
}

nlohmann::json numbers(const double* data, std::size_t n) {
  nlohmann::json out = nlohmann::json::array();
  for (std::size_t k = 0; k < n; ++k) out.push_back(number(data[k]));
  return out;
}

nlohmann::json matrix(const Eigen::MatrixXd& m) {
  nlohmann::json out = nlohmann::json::array();
  for (Eigen::Index r = 0; r < m.rows(); ++r) {
    const Eigen::VectorXd row = m.row(r).transpose();
    out.push_back(vector(row));
  }
  return out;
}

nlohmann::json bits(const std::vector<std::uint8_t>& v, std::int64_t rows, std::int64_t cols) {
  nlohmann::json out = nlohmann::json::array();
  for (std::int64_t r = 0; r < rows; ++r) {
    std::string s(static_cast<std::size_t>(cols), '0');
    for (std::int64_t c = 0; c < cols; ++c)
      if (v[std::size_t(r * cols + c)]) s[std::size_t(c)] = '1';
    out.push_back(std::move(s));
  }
  return out;
}

StateReader::StateReader(const nlohmann::json& state, std::string context, const std::string& kind,
                         int version)
    : state_(state), context_(std::move(context)) {
  if (!state_.is_object()) fail("expected a JSON object");
  if (!state_.contains("kind") || !state_["kind"].is_string())
    fail("no \"kind\" (not a saved state)");
  const std::string got = state_["kind"].get<std::string>();
  if (got != kind) fail("it was saved by \"" + got + "\", not \"" + kind + "\"");
  if (integer("version", 0, std::numeric_limits<int>::max()) != version)
    fail("layout version " + state_["version"].dump() + " is not the supported " + std::to_string(version));
}

void StateReader::fail(const std::string& message) const { throw InputError(context_ + message); }

const nlohmann::json& StateReader::at(const std::string& key) const {
  if (!state_.contains(key)) fail("missing \"" + key + "\"");
  return state_[key];
}

std::int64_t StateReader::integer(const std::string& key, std::int64_t low, std::int64_t high) const {
  const nlohmann::json& j = at(key);
  if (!j.is_number_integer()) fail("\"" + key + "\" must be an integer, got " + j.dump());
  const bool too_large = j.is_number_unsigned() && j.get<std::uint64_t>() > std::uint64_t(std::max<std::int64_t>(high, 0));
  const std::int64_t v = too_large ? high : j.get<std::int64_t>();
  if (too_large || v < low || v > high)
    fail("\"" + key + "\" = " + j.dump() + " is outside [" + std::to_string(low) + ", " + std::to_string(high) + "]");
  return v;
}

std::uint64_t StateReader::unsigned_integer(const std::string& key) const {
  const nlohmann::json& j = at(key);
  if (!j.is_number_integer() || (!j.is_number_unsigned() && j.get<std::int64_t>() < 0))
    fail("\"" + key + "\" must be an integer >= 0, got " + j.dump());
  return j.get<std::uint64_t>();
}

std::string StateReader::text(const std::string& key) const {
  const nlohmann::json& j = at(key);
  if (!j.is_string()) fail("\"" + key + "\" must be a string");
  return j.get<std::string>();
}

double StateReader::number_of(const nlohmann::json& j, const std::string& what) const {
  if (j.is_number()) return j.get<double>();
  if (j.is_string()) {
    const std::string s = j.get<std::string>();
    if (s == "nan") return std::numeric_limits<double>::quiet_NaN();
    if (s == "inf") return std::numeric_limits<double>::infinity();
    if (s == "-inf") return -std::numeric_limits<double>::infinity();
  }
  fail("\"" + what + "\" must be a number, got " + j.dump());
}

std::vector<double> StateReader::numbers_of(const nlohmann::json& j, const std::string& what,
                                            std::int64_t size) const {
  if (!j.is_array()) fail("\"" + what + "\" must be a list of numbers");
  if (size >= 0 && std::int64_t(j.size()) != size)
    fail("\"" + what + "\" has " + std::to_string(j.size()) + " values, expected " + std::to_string(size));
  std::vector<double> out;
  out.reserve(j.size());
  for (const auto& v : j) out.push_back(number_of(v, what));
  return out;
}

Eigen::VectorXd StateReader::vector(const std::string& key, std::int64_t size) const {
  const std::vector<double> v = numbers(key, size);
  return Eigen::Map<const Eigen::VectorXd>(v.data(), Eigen::Index(v.size()));
}

Eigen::MatrixXd StateReader::matrix_of(const nlohmann::json& j, const std::string& what, std::int64_t rows,
                                       std::int64_t cols) const {
  if (!j.is_array() || std::int64_t(j.size()) != rows)
    fail("\"" + what + "\" must be a list of " + std::to_string(rows) + " rows");
  Eigen::MatrixXd m(rows, cols);
  for (std::int64_t r = 0; r < rows; ++r) {
    const std::vector<double> row = numbers_of(j[std::size_t(r)], what + " row " + std::to_string(r + 1), cols);
    for (std::int64_t c = 0; c < cols; ++c) m(r, c) = row[std::size_t(c)];
  }
  return m;
}

const nlohmann::json& StateReader::list(const std::string& key) const {
  const nlohmann::json& j = at(key);
  if (!j.is_array()) fail("\"" + key + "\" must be a list");
  return j;
}

std::vector<std::uint8_t> StateReader::bits(const std::string& key, std::int64_t rows, std::int64_t cols) const {
  const nlohmann::json& j = at(key);
  if (!j.is_array() || std::int64_t(j.size()) != rows)
    fail("\"" + key + "\" must be a list of " + std::to_string(rows) + " strings");
  std::vector<std::uint8_t> out(static_cast<std::size_t>(rows * cols));
  for (std::int64_t r = 0; r < rows; ++r) {
    const nlohmann::json& s = j[std::size_t(r)];
    if (!s.is_string() || std::int64_t(s.get_ref<const std::string&>().size()) != cols)
      fail("\"" + key + "\" entry " + std::to_string(r + 1) + " must be a string of " + std::to_string(cols) +
           " characters 0/1");
    const std::string& text = s.get_ref<const std::string&>();
    for (std::int64_t c = 0; c < cols; ++c) {
      const char ch = text[std::size_t(c)];
      if (ch != '0' && ch != '1')
        fail("\"" + key + "\" entry " + std::to_string(r + 1) + " has '" + std::string(1, ch) + "' (expected 0/1)");
      out[std::size_t(r * cols + c)] = ch == '1';
    }
  }
  return out;
}

void check_hooks(const CheckpointHooks& hooks, const std::string& context) {
  if (!(hooks.every_seconds >= 0) || !std::isfinite(hooks.every_seconds))
    throw InputError(context + ": checkpoint every_seconds must be finite and >= 0");
}

}  // namespace spinfer::checkpoint
