// FNV-1a 64 against the published test vectors of the algorithm's authors (Fowler, Noll, Vo:
// the FNV test suite lists "" -> cbf29ce484222325, "a" -> af63dc4c8601ec8c,
// "foobar" -> 85944171f73967e8).
#include <doctest/doctest.h>

#include <filesystem>
#include <fstream>
#include <random>
#include <string>

#include "spinfer/checksum.hpp"
#include "spinfer/errors.hpp"

using namespace spinfer;
namespace fs = std::filesystem;

TEST_CASE("checksum: FNV-1a 64 matches the published test vectors") {
  CHECK(fnv1a64_hex(fnv1a64("", 0)) == "cbf29ce484222325");
  CHECK(fnv1a64_hex(fnv1a64("a", 1)) == "af63dc4c8601ec8c");
  CHECK(fnv1a64_hex(fnv1a64("foobar", 6)) == "85944171f73967e8");
  // Hashing in pieces continues the same state.
  CHECK(fnv1a64("bar", 3, fnv1a64("foo", 3)) == fnv1a64("foobar", 6));
}

TEST_CASE("checksum: a file's hash is the hash of its bytes, read in blocks") {
  std::random_device rd;
  const fs::path path = fs::temp_directory_path() / ("spinfer-checksum-" + std::to_string(rd()));
  std::string bytes(200000, '\0');  // several 64 KiB blocks
  std::mt19937 rng(3);
  for (char& c : bytes) c = char(rng() & 0xff);
  std::ofstream(path, std::ios::binary).write(bytes.data(), std::streamsize(bytes.size()));
  CHECK(file_fnv1a64(path.string()) == fnv1a64_hex(fnv1a64(bytes.data(), bytes.size())));
  fs::remove(path);
  CHECK_THROWS_AS(file_fnv1a64(path.string()), FileError);
}
