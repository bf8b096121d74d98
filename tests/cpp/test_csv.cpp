// Delimited-text matrices: header detection, comments, quoting and every rejected input, with the
// file, 1-based line and column in the message.
#include <doctest/doctest.h>

#include <filesystem>
#include <fstream>

#include "spinfer/errors.hpp"
#include "spinfer/io.hpp"

using namespace spinfer;

namespace {

struct TempDir {
  std::filesystem::path path;
  TempDir() {
    path = std::filesystem::temp_directory_path() /
           ("spinfer-io-test-" + std::to_string(std::hash<std::string>{}(
                                     std::to_string(reinterpret_cast<std::uintptr_t>(this)))));
    std::filesystem::create_directories(path);
  }
  ~TempDir() {
    std::error_code ec;
    std::filesystem::remove_all(path, ec);
  }
  std::string write(const std::string& name, const std::string& text) const {
    const std::string p = (path / name).string();
    std::ofstream(p, std::ios::binary) << text;
    return p;
  }
};

std::string error_of(const std::string& path) {
  try {
    read_matrix(path);
  } catch (const std::exception& e) {
    return e.what();
  }
  return "no error";
}

}  // namespace

TEST_CASE("csv: header row, comments, blank lines, CRLF and quoted names") {
  TempDir d;
  const std::string p = d.write("m.csv", "# recorded 2024\n\n\"1\", b ,c\r\n0,1,1\r\n  # note\n1,0,1\n");
  const SpinMatrix m = read_matrix(p);
  CHECK(m.rows() == 2);
  CHECK(m.cols() == 3);
  CHECK(m.names() == std::vector<std::string>{"1", "b", "c"});  // a quoted "1" is a name
  CHECK(m.convention() == Convention::binary);
  CHECK(m.active(0, 2));
  CHECK(!m.active(1, 1));

  const std::string s = d.write("s.tsv", "-1\t1\n1\t-1\n");  // no header, spin values
  const SpinMatrix sm = read_matrix(s);
  CHECK(sm.names().empty());
  CHECK(sm.convention() == Convention::spin);
  CHECK(sm.active(0, 1));

  // Written names are quoted, so numeric names read back as a header.
  SpinMatrix named = sm;
  named.set_names({"10", "x,y"});
  const std::string out = (d.path / "out.csv").string();
  write_matrix(out, named);
  const SpinMatrix back = read_matrix(out);
  CHECK(back.names() == named.names());
  CHECK(back.convention() == Convention::spin);
  CHECK(std::equal(back.data(), back.data() + 4, sm.data()));
}

TEST_CASE("csv: bad input names the file, line and column") {
  TempDir d;
  const std::string dir = d.path.string() + "/";
  CHECK(error_of(d.write("e.csv", "")) == dir + "e.csv: empty file (no data rows)");
  CHECK(error_of(d.write("c.csv", "# only a comment\n\n")) == dir + "c.csv: empty file (no data rows)");
  CHECK(error_of(d.write("h.csv", "a,b\n")) == dir + "h.csv: no data rows after the header");
  CHECK(error_of(d.write("r.csv", "a,b\n0,1\n\n1\n")) ==
        dir + "r.csv: line 4: 1 cells, expected 2 (as on line 1)");
  CHECK(error_of(d.write("n.csv", "0,1\n1,nan\n")) ==
        dir + "n.csv: line 2, column 2: value nan is not finite; expected 0/1 or -1/+1");
  CHECK(error_of(d.write("i.csv", "0,1\n1,inf\n")).find("line 2, column 2") != std::string::npos);
  CHECK(error_of(d.write("t.csv", "a,b\n0,1\n1,x\n")) ==
        dir + "t.csv: line 3, column 2: 'x' is not a number");
  CHECK(error_of(d.write("v.csv", "0,1\n1,2\n")) ==
        dir + "v.csv: line 2, column 2: value 2 is not binary; expected 0/1 or -1/+1");
  CHECK(error_of(d.write("x.csv", "0,1\n1,-1\n")).find("line 2, column 2: values mix 0 and -1") !=
        std::string::npos);
  CHECK(error_of(d.write("d.csv", "a,b,a\n0,1,1\n")) ==
        dir + "d.csv: line 1, column 3: duplicate column name 'a' (also column 1)");
  CHECK(error_of(d.write("q.csv", "\"a,b\n0,1\n")).find("line 1, column 1: unterminated") !=
        std::string::npos);
  CHECK(error_of(dir + "missing.csv") == dir + "missing.csv: no such file");
  CHECK_THROWS_AS(read_matrix(dir + "missing.csv"), FileError);
  CHECK_THROWS_AS(read_matrix(d.write("m.dat", "0,1\n")), InputError);  // unknown extension
}

TEST_CASE("parse_number accepts whole numbers only") {
  CHECK(parse_number("1") == 1.0);
  CHECK(parse_number("+1") == 1.0);
  CHECK(parse_number("-1.0e0") == -1.0);
  CHECK(!parse_number("1x"));
  CHECK(!parse_number(""));
  CHECK(!parse_number("one"));
}
