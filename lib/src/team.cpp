#include "spinfer/team.hpp"

#include <cstring>

#include "spinfer/errors.hpp"

namespace spinfer {
namespace {

std::vector<double> to_doubles(const std::vector<std::uint8_t>& bytes) {
  if (bytes.size() % sizeof(double) != 0)
    throw std::logic_error("team: gathered byte count is not a whole number of doubles");
  std::vector<double> out(bytes.size() / sizeof(double));
  if (!out.empty()) std::memcpy(out.data(), bytes.data(), bytes.size());
  return out;
}

const std::uint8_t* as_bytes(const std::vector<double>& v) {
  return reinterpret_cast<const std::uint8_t*>(v.data());
}

}  // namespace

double Team::sum_value(double value) const {
  sum(&value, 1);
  return value;
}

std::vector<double> Team::all_gather(const std::vector<double>& local) const {
  return to_doubles(gather_bytes(as_bytes(local), local.size() * sizeof(double), true));
}

std::vector<double> Team::gather(const std::vector<double>& local) const {
  return to_doubles(gather_bytes(as_bytes(local), local.size() * sizeof(double), false));
}

std::vector<std::uint8_t> Team::all_gather(const std::vector<std::uint8_t>& local) const {
  return gather_bytes(local.data(), local.size(), true);
}

std::vector<std::uint8_t> Team::gather(const std::vector<std::uint8_t>& local) const {
  return gather_bytes(local.data(), local.size(), false);
}

void Team::broadcast(std::vector<double>& values) const {
  std::vector<std::uint8_t> bytes(values.size() * sizeof(double));
  if (!bytes.empty()) std::memcpy(bytes.data(), values.data(), bytes.size());
  broadcast_bytes(bytes);
  values = to_doubles(bytes);
}

std::pair<std::int64_t, std::int64_t> Team::share(std::int64_t n, int rank, int size) {
  if (size < 1 || rank < 0 || rank >= size || n < 0)
    throw InputError("team: no share for rank " + std::to_string(rank) + " of " +
                     std::to_string(size) + " in " + std::to_string(n) + " items");
  // 128-bit products: n * rank overflows 64 bits only for absurd n, but costs nothing to avoid.
  __extension__ using i128 = __int128;
  const auto at = [&](int r) { return std::int64_t(i128(n) * r / size); };
  return {at(rank), at(rank + 1)};
}

}  // namespace spinfer
