// .npy parsing edge cases on hand-made bytes (layout per numpy/lib/format.py). Round trips
// against numpy itself live in tests/python/test_io.py.
#include <cstring>
#include <doctest/doctest.h>

#include "spinfer/errors.hpp"
#include "spinfer/npy.hpp"

using namespace spinfer;

namespace {

// A .npy file: magic, version, little-endian header length, header padded to 64 bytes, data.
std::string npy_bytes(const std::string& dict, const std::string& data, int major = 1) {
  const std::size_t prefix = major == 1 ? 10 : 12;
  std::string header = dict;
  const std::size_t total = (prefix + header.size() + 1 + 63) / 64 * 64;
  header.append(total - prefix - header.size() - 1, ' ');
  header += '\n';
  std::string out = "\x93NUMPY";
  out += char(major);
  out += char(0);
  const std::size_t n = header.size();
  for (std::size_t k = 0; k < prefix - 8; ++k) out += char((n >> (8 * k)) & 0xff);
  return out + header + data;
}

NpyArray parse(const std::string& bytes) { return parse_npy(bytes.data(), bytes.size(), "t.npy"); }

}  // namespace

TEST_CASE("npy: keys in any order, versions 1.0/2.0/3.0, tight or padded headers") {
  const std::string data("\x00\x01\x01\x00\x01\x01", 6);
  for (int major : {1, 2, 3}) {
    const NpyArray a =
        parse(npy_bytes("{ 'shape' : (2,3),'fortran_order':False,\"descr\":'|u1'}", data, major));
    CHECK(a.descr == "|u1");
    CHECK(a.shape == std::vector<std::int64_t>{2, 3});
    CHECK(!a.fortran);
    const SpinMatrix m = npy_to_matrix(a, std::nullopt, "t.npy");
    CHECK(m.active(0, 1));
    CHECK(!m.active(1, 0));
  }
}

TEST_CASE("npy: Fortran order and big-endian data are read as the same matrix") {
  // Matrix [[1, 0, 1], [0, 1, 1]] stored column by column as big-endian int32.
  const int cols_major[] = {1, 0, 0, 1, 1, 1};
  std::string data;
  for (int v : cols_major) data += std::string{0, 0, 0, char(v)};
  const NpyArray a =
      parse(npy_bytes("{'descr': '>i4', 'fortran_order': True, 'shape': (2, 3), }", data));
  CHECK(a.descr == "<i4");  // swapped to little-endian on reading
  const SpinMatrix m = npy_to_matrix(a, std::nullopt, "t.npy");
  const int expected[2][3] = {{1, 0, 1}, {0, 1, 1}};
  for (int t = 0; t < 2; ++t)
    for (int i = 0; i < 3; ++i) CHECK(m.active(t, i) == bool(expected[t][i]));
}

TEST_CASE("npy: encode then parse is the identity, and the data start is 64-byte aligned") {
  NpyArray a;
  a.descr = "<f8";
  a.shape = {3};
  const double v[] = {0.5, -1, 2};
  a.bytes.assign(reinterpret_cast<const char*>(v), reinterpret_cast<const char*>(v) + sizeof v);
  const std::string enc = encode_npy(a);
  CHECK((enc.size() - sizeof v) % 64 == 0);
  CHECK(enc.find("'shape': (3,)") != std::string::npos);  // 1-D tuples keep their comma
  const NpyArray b = parse(enc);
  CHECK(b.shape == a.shape);
  CHECK(b.bytes == a.bytes);
}

TEST_CASE("npy: corrupt, truncated and unsupported files are rejected with the reason") {
  const std::string ok_dict = "{'descr': '|u1', 'fortran_order': False, 'shape': (2, 2), }";
  const std::string four("\x00\x01\x01\x00", 4);
  CHECK_THROWS_WITH_AS(parse(""), "t.npy: empty file (not a .npy array)", InputError);
  CHECK_THROWS_WITH_AS(parse("PK\x03\x04 something"), "t.npy: not a .npy file (bad magic string)",
                       InputError);
  CHECK_THROWS_WITH_AS(parse(npy_bytes(ok_dict, four.substr(0, 3))),
                       "t.npy: truncated .npy data: expected 4 bytes for shape and dtype '|u1', found 3",
                       InputError);
  CHECK_THROWS_AS(parse(npy_bytes(ok_dict, four + "x")), InputError);  // trailing bytes
  CHECK_THROWS_AS(parse(npy_bytes(ok_dict, four).substr(0, 40)), InputError);  // cut header
  CHECK_THROWS_AS(parse(npy_bytes("{'descr': '|u1', 'shape': (2, 2)}", four)), InputError);
  CHECK_THROWS_AS(parse(npy_bytes("{'descr': '|u1', 'fortran_order': False, 'shape': (2, 2), 'x': 1}", four)),
                  InputError);
  CHECK_THROWS_AS(parse(npy_bytes("{'descr': '|u1', 'fortran_order': Nope, 'shape': (2, 2)}", four)),
                  InputError);
  CHECK_THROWS_AS(parse(npy_bytes(ok_dict, four, 4)), InputError);  // unknown version
  const auto message_of = [&](const std::string& descr) {
    try {
      parse(npy_bytes("{'descr': " + descr + ", 'fortran_order': False, 'shape': (1,), }", "12345678"));
    } catch (const InputError& e) {
      return std::string(e.what());
    }
    return std::string("no error");
  };
  CHECK(message_of("'|O'").find("object arrays") != std::string::npos);
  CHECK(message_of("[('a', '<i4'), ('b', '<i4')]").find("structured") != std::string::npos);
  CHECK(message_of("'<M8[s]'").find("dates and times") != std::string::npos);
  CHECK(message_of("'<c8'").find("complex") != std::string::npos);
  CHECK(message_of("'<f2'").find("float32 and float64") != std::string::npos);
  // A header longer than the cap, declared in a version 2.0 preamble.
  std::string huge = npy_bytes(ok_dict, four, 2);
  huge[8] = '\x00';
  huge[9] = '\x00';
  huge[10] = '\x01';  // 65536 bytes
  CHECK_THROWS_WITH_AS(parse(huge), "t.npy: .npy header of 65536 bytes exceeds the limit of 10000",
                       InputError);
}

TEST_CASE("npy: matrices must be 2-D and hold binary values; strings are not data") {
  const auto array = [](const std::string& shape, const std::string& data) {
    return parse(npy_bytes("{'descr': '|u1', 'fortran_order': False, 'shape': " + shape + ", }", data));
  };
  CHECK_THROWS_WITH_AS(npy_to_matrix(array("(3,)", std::string("\x01\x00\x01", 3)), std::nullopt, "t.npy"),
                       "t.npy: expected a 2-D array (samples x units), got shape (3,)", InputError);
  CHECK_THROWS_AS(npy_to_matrix(array("(1, 1, 2)", "\x01\x00"), std::nullopt, "t.npy"), InputError);
  CHECK_THROWS_WITH_AS(npy_to_matrix(array("(1, 2)", "\x01\x02"), std::nullopt, "t.npy"),
                       "t.npy: row 1, column 2: value 2 is not binary; expected 0/1 or -1/+1",
                       InputError);
  const NpyArray names = strings_to_npy({"a", "\xC3\xA9t\xC3\xA9", "unit 10"});
  CHECK(names.descr == "<U7");
  CHECK(npy_to_strings(names, "n") == std::vector<std::string>{"a", "\xC3\xA9t\xC3\xA9", "unit 10"});
  CHECK_THROWS_AS(npy_to_matrix(names, std::nullopt, "n"), InputError);
}
