// Private helpers for checkpoint states (checkpoint.hpp): exact JSON for numbers, vectors,
// matrices and 0/1 chain states, and a reader that checks a resume state's kind, version and
// sizes and names what does not fit in an InputError.
#pragma once

#include <chrono>
#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "spinfer/checkpoint.hpp"

namespace spinfer::checkpoint {

/// A double as JSON: a number (nlohmann writes digits that parse back to the same double) or,
/// when not finite, the string "nan", "inf" or "-inf".
nlohmann::json number(double v);
nlohmann::json numbers(const double* data, std::size_t n);
inline nlohmann::json numbers(const std::vector<double>& v) { return numbers(v.data(), v.size()); }
inline nlohmann::json vector(const Eigen::VectorXd& v) { return numbers(v.data(), std::size_t(v.size())); }
/// Row by row (a list of rows).
nlohmann::json matrix(const Eigen::MatrixXd& m);
/// `rows` x `cols` bytes 0/1, row by row, as one string of '0'/'1' per row.
nlohmann::json bits(const std::vector<std::uint8_t>& v, std::int64_t rows, std::int64_t cols);

/// Reads members of a resume state; every failure is an InputError starting with `context`
/// (e.g. "refine: resume state: ").
class StateReader {
 public:
  /// Checks that `state` is an object of this kind and version.
  StateReader(const nlohmann::json& state, std::string context, const std::string& kind, int version);

  const nlohmann::json& at(const std::string& key) const;
  bool has(const std::string& key) const { return state_.contains(key) && !state_[key].is_null(); }
  std::int64_t integer(const std::string& key, std::int64_t low, std::int64_t high) const;
  std::uint64_t unsigned_integer(const std::string& key) const;
  double number(const std::string& key) const { return number_of(at(key), key); }
  std::string text(const std::string& key) const;
  /// A list of numbers; `size` < 0 accepts any length.
  std::vector<double> numbers(const std::string& key, std::int64_t size = -1) const {
    return numbers_of(at(key), key, size);
  }
  Eigen::VectorXd vector(const std::string& key, std::int64_t size) const;
  Eigen::MatrixXd matrix(const std::string& key, std::int64_t rows, std::int64_t cols) const {
    return matrix_of(at(key), key, rows, cols);
  }
  std::vector<std::uint8_t> bits(const std::string& key, std::int64_t rows, std::int64_t cols) const;

  // The same for values nested deeper (lists of records); `what` names them in messages.
  double number_of(const nlohmann::json& j, const std::string& what) const;
  std::vector<double> numbers_of(const nlohmann::json& j, const std::string& what, std::int64_t size) const;
  Eigen::MatrixXd matrix_of(const nlohmann::json& j, const std::string& what, std::int64_t rows,
                            std::int64_t cols) const;
  const nlohmann::json& list(const std::string& key) const;

  [[noreturn]] void fail(const std::string& message) const;

 private:
  const nlohmann::json& state_;
  std::string context_;
};

/// When to call CheckpointHooks::save between consistent points: after every_seconds have passed
/// since the start or the last save.
class SaveClock {
 public:
  explicit SaveClock(const CheckpointHooks& hooks) : hooks_(hooks), last_(Clock::now()) {}
  bool enabled() const { return bool(hooks_.save); }
  bool due() const {
    return enabled() && std::chrono::duration<double>(Clock::now() - last_).count() >= hooks_.every_seconds;
  }
  void save(const nlohmann::json& state) {
    hooks_.save(state);
    last_ = Clock::now();
  }

 private:
  using Clock = std::chrono::steady_clock;
  const CheckpointHooks& hooks_;
  Clock::time_point last_;
};

/// InputError unless every_seconds is finite and >= 0 (`context` names the computation).
void check_hooks(const CheckpointHooks& hooks, const std::string& context);

}  // namespace spinfer::checkpoint
