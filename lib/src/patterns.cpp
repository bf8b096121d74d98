#include "spinfer/patterns.hpp"

#include <cstring>

namespace spinfer {
namespace {

// splitmix64 finaliser: a cheap, well-mixed 64-bit hash step.
std::uint64_t mix(std::uint64_t x) {
  x += 0x9e3779b97f4a7c15ULL;
  x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
  x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
  return x ^ (x >> 31);
}

}  // namespace

double PatternTable::compression_ratio() const {
  return original_rows == 0 ? 1.0 : double(patterns.rows()) / double(original_rows);
}

PatternTable unique_patterns(const SpinMatrix& data, bool keep_row_map) {
  const std::int64_t T = data.rows(), N = data.cols();
  const std::int64_t W = (N + 63) / 64;  // packed words per row
  std::vector<std::uint64_t> keys;       // packed distinct patterns, W words each
  std::vector<std::int64_t> first_row;   // a row holding each pattern
  std::vector<double> weight;
  std::vector<std::int64_t> slots(64, -1);  // open addressing: pattern index or -1
  std::vector<std::uint64_t> packed(static_cast<std::size_t>(W), 0);
  PatternTable out;
  out.original_rows = T;
  if (keep_row_map) out.row_to_pattern.resize(std::size_t(T));

  for (std::int64_t t = 0; t < T; ++t) {
    std::fill(packed.begin(), packed.end(), 0);
    const std::uint8_t* r = data.row(t);
    for (std::int64_t i = 0; i < N; ++i) packed[std::size_t(i >> 6)] |= std::uint64_t(r[i]) << (i & 63);
    std::uint64_t h = 0;
    for (std::uint64_t w : packed) h = mix(h ^ w);
    std::size_t mask = slots.size() - 1, s = std::size_t(h) & mask;
    std::int64_t found = -1;
    while (slots[s] >= 0) {
      const std::uint64_t* k = keys.data() + slots[s] * W;
      if (std::memcmp(k, packed.data(), std::size_t(W) * 8) == 0) {
        found = slots[s];
        break;
      }
      s = (s + 1) & mask;
    }
    if (found < 0) {
      found = std::int64_t(first_row.size());
      slots[s] = found;
      keys.insert(keys.end(), packed.begin(), packed.end());
      first_row.push_back(t);
      weight.push_back(0.0);
      if (first_row.size() * 2 > slots.size()) {  // grow and rehash at load 1/2
        std::vector<std::int64_t> bigger(slots.size() * 2, -1);
        const std::size_t m2 = bigger.size() - 1;
        for (std::int64_t p = 0; p < std::int64_t(first_row.size()); ++p) {
          std::uint64_t hh = 0;
          for (std::int64_t w = 0; w < W; ++w) hh = mix(hh ^ keys[std::size_t(p * W + w)]);
          std::size_t q = std::size_t(hh) & m2;
          while (bigger[q] >= 0) q = (q + 1) & m2;
          bigger[q] = p;
        }
        slots.swap(bigger);
      }
    }
    weight[std::size_t(found)] += data.weight(t);
    if (keep_row_map) out.row_to_pattern[std::size_t(t)] = found;
  }
  out.patterns = data.take_rows(first_row);
  out.patterns.set_weights(weight);
  return out;
}

}  // namespace spinfer
