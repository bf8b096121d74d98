// 64-bit FNV-1a checksums (Fowler, Noll and Vo; the parameters published with the algorithm:
// offset basis 0xcbf29ce484222325, prime 0x100000001b3). Used to tie files together (a model
// file and its couplings file) and to record inputs in provenance. Not a cryptographic hash: it
// detects mismatched or stale files, not tampering.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>

namespace spinfer {

constexpr std::uint64_t kFnv1a64Basis = 0xcbf29ce484222325ULL;

/// Continues an FNV-1a 64 hash over `size` bytes (start with `state` = kFnv1a64Basis).
std::uint64_t fnv1a64(const void* data, std::size_t size, std::uint64_t state = kFnv1a64Basis);

/// The hash as 16 lower-case hex digits.
std::string fnv1a64_hex(std::uint64_t hash);

/// The hash of a file's bytes as 16 hex digits. FileError if it cannot be read.
std::string file_fnv1a64(const std::string& path);

}  // namespace spinfer
