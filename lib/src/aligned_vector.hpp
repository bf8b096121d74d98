// Internal: std::vector storage aligned to 64 bytes (one cache line, one AVX-512 register), for
// arrays the sampler's wide kernels stream through: a 64-byte load from an array aligned only to
// 16 bytes straddles two cache lines three times out of four.
#pragma once

#include <cstddef>
#include <new>
#include <vector>

namespace spinfer::detail {

template <class T>
struct CacheLineAllocator {
  using value_type = T;
  static constexpr std::size_t kAlignment = 64;
  CacheLineAllocator() = default;
  template <class U>
  CacheLineAllocator(const CacheLineAllocator<U>&) noexcept {}
  T* allocate(std::size_t n) {
    return static_cast<T*>(::operator new(n * sizeof(T), std::align_val_t(kAlignment)));
  }
  void deallocate(T* p, std::size_t) noexcept { ::operator delete(p, std::align_val_t(kAlignment)); }
  template <class U>
  bool operator==(const CacheLineAllocator<U>&) const noexcept { return true; }
  template <class U>
  bool operator!=(const CacheLineAllocator<U>&) const noexcept { return false; }
};

template <class T>
using AlignedVector = std::vector<T, CacheLineAllocator<T>>;

}  // namespace spinfer::detail
