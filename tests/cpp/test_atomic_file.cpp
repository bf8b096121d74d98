// Atomic outputs: single files and files written together (all appear, or none and the previous
// files stay as they were).
#include <doctest/doctest.h>

#include <filesystem>
#include <fstream>
#include <sstream>
#include <stdexcept>

#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "temp_dir.hpp"

using namespace spinfer;
namespace fs = std::filesystem;

namespace {

fs::path temp_dir() { return spinfer::testing::temp_dir("atomic"); }

std::string slurp(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

FileOutput text(const fs::path& p, const std::string& content) {
  return {p.string(), [content](std::ostream& out) { out << content; }};
}

std::size_t entries(const fs::path& dir) {
  return std::size_t(std::distance(fs::directory_iterator(dir), fs::directory_iterator()));
}

}  // namespace

TEST_CASE("atomic files: a pair appears together and replaces the previous pair") {
  const fs::path dir = temp_dir();
  write_files_atomically({text(dir / "a.bin", "first a"), text(dir / "b.json", "first b")});
  CHECK(slurp(dir / "a.bin") == "first a");
  CHECK(slurp(dir / "b.json") == "first b");
  write_files_atomically({text(dir / "a.bin", "second a"), text(dir / "b.json", "second b")});
  CHECK(slurp(dir / "a.bin") == "second a");
  CHECK(slurp(dir / "b.json") == "second b");
  CHECK(entries(dir) == 2);  // no temporary or saved copy left behind
  fs::remove_all(dir);
}

TEST_CASE("atomic files: a failure leaves neither new file and restores the previous one") {
  const fs::path dir = temp_dir();
  SUBCASE("a write that throws creates nothing") {
    CHECK_THROWS_AS(write_files_atomically(
                        {text(dir / "a.bin", "new"),
                         {(dir / "b.json").string(), [](std::ostream&) { throw std::runtime_error("boom"); }}}),
                    std::runtime_error);
    CHECK(entries(dir) == 0);
  }
  SUBCASE("the second rename fails after the first succeeded: the first is removed") {
    fs::create_directories(dir / "b.json" / "occupied");  // a folder cannot be replaced by a file
    CHECK_THROWS_WITH_AS(write_files_atomically({text(dir / "a.bin", "new"), text(dir / "b.json", "new")}),
                         doctest::Contains("rolled back"), FileError);
    CHECK(!fs::exists(dir / "a.bin"));
    CHECK(entries(dir) == 1);
  }
  SUBCASE("the second rename fails: the first file's previous content comes back") {
    std::ofstream(dir / "a.bin") << "old a";
    fs::create_directories(dir / "b.json" / "occupied");
    CHECK_THROWS_AS(write_files_atomically({text(dir / "a.bin", "new"), text(dir / "b.json", "new")}),
                    FileError);
    CHECK(slurp(dir / "a.bin") == "old a");
    CHECK(entries(dir) == 2);
  }
  fs::remove_all(dir);
}
