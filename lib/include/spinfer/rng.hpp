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

/// One xoshiro256** step on the state words s0..s3; the output goes to `out` (a reference rather
/// than a return value, so no wide-vector return crosses a function boundary). Word is std::uint64_t
/// or a GCC vector of them (then every lane is its own generator): the sampler's vectorised
/// generators use the same step as Rng. The multiplications by 5 and 9 are written as shifts and
/// adds (the same value modulo 2^64; vector 64-bit multiplies are slow). Always inlined: the
/// sampler compiles it into one copy per instruction set, which must never share an
/// out-of-line instance.
template <typename Word>
[[gnu::always_inline]] inline void xoshiro256ss_step(Word& s0, Word& s1, Word& s2, Word& s3, Word& out) {
  const Word x = (s1 << 2) + s1;
  const Word r = (x << 7) | (x >> 57);
  out = (r << 3) + r;
  const Word t = s1 << 17;
  s2 ^= s0;
  s3 ^= s1;
  s1 ^= s2;
  s0 ^= s3;
  s2 ^= t;
  s3 = (s3 << 45) | (s3 >> 19);
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
    std::uint64_t out;
    xoshiro256ss_step(s_[0], s_[1], s_[2], s_[3], out);
    return out;
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
  std::uint64_t s_[4];
};

}  // namespace spinfer
