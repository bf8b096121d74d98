// Seedable pseudo-random numbers with independent streams.
//
// Generator: xoshiro256** (Blackman & Vigna, "Scrambled linear pseudorandom number generators",
// ACM TOMS 47:36, 2021), period 2^256 - 1. Its 256-bit state is filled with splitmix64 (Steele,
// Lea & Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014), which is the
// seeding procedure the xoshiro authors recommend.
//
// Streams: Rng(seed, stream) hashes (seed, stream) through splitmix64 into the state, so every
// (seed, stream) pair is a separate generator. Work that must be reproducible for any thread count
// (one Monte Carlo chain, one bootstrap replicate) takes its own stream indexed by the work item,
// never by the thread.
#pragma once

#include <cstdint>

namespace spinfer {

/// One step of splitmix64: advances `state` and returns a well-mixed 64-bit value.
inline std::uint64_t splitmix64(std::uint64_t& state) {
  std::uint64_t z = (state += 0x9e3779b97f4a7c15ULL);
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

class Rng {
 public:
  explicit Rng(std::uint64_t seed = 0, std::uint64_t stream = 0) {
    std::uint64_t a = seed;
    const std::uint64_t mixed_seed = splitmix64(a);
    std::uint64_t b = stream ^ 0x5851f42d4c957f2dULL;
    const std::uint64_t mixed_stream = splitmix64(b);
    std::uint64_t x = mixed_seed ^ (mixed_stream * 0xd1b54a32d192ed03ULL);
    for (auto& word : s_) word = splitmix64(x);
    // splitmix64 is a bijection of its counter, so four consecutive outputs are never all zero.
  }

  /// Next 64 random bits.
  std::uint64_t next() {
    const std::uint64_t result = rotl(s_[1] * 5, 7) * 9;
    const std::uint64_t t = s_[1] << 17;
    s_[2] ^= s_[0];
    s_[3] ^= s_[1];
    s_[1] ^= s_[2];
    s_[0] ^= s_[3];
    s_[2] ^= t;
    s_[3] = rotl(s_[3], 45);
    return result;
  }

  /// Uniform double in [0, 1) with 53 random bits.
  double uniform() { return double(next() >> 11) * 0x1.0p-53; }

  /// Uniform integer in [0, n) for n >= 1, without modulo bias (Lemire, "Fast random integer
  /// generation in an interval", ACM TOMACS 29:3, 2019).
  std::uint64_t below(std::uint64_t n) {
    __extension__ using u128 = unsigned __int128;
    u128 m = u128(next()) * n;
    auto low = std::uint64_t(m);
    if (low < n) {
      const std::uint64_t threshold = (0 - n) % n;
      while (low < threshold) {
        m = u128(next()) * n;
        low = std::uint64_t(m);
      }
    }
    return std::uint64_t(m >> 64);
  }

 private:
  static std::uint64_t rotl(std::uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  std::uint64_t s_[4];
};

}  // namespace spinfer
