// Model file round trip and validation. Exactness of the double round trip relies on nlohmann's
// serializer writing the shortest representation that parses back to the same double
// (nlohmann/json 3.11, detail/conversions/to_chars.hpp); this test verifies it on hard values.
#include <doctest/doctest.h>

#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <random>

#include "spinfer/errors.hpp"
#include "temp_dir.hpp"
#include "spinfer/model_io.hpp"

using namespace spinfer;
namespace fs = std::filesystem;

namespace {

fs::path temp_dir() { return spinfer::testing::temp_dir("model-io"); }

IsingModel awkward_model() {
  std::mt19937_64 rng(99);
  std::uniform_real_distribution<double> u(-3, 3);
  const int N = 6;
  IsingModel m;
  m.convention = Convention::binary;
  m.fields.resize(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) {
    m.fields(i) = u(rng) / 3.0;
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = u(rng) * 1e-3 / 7.0;
  }
  // Values whose decimal forms need all 17 significant digits, or are extreme.
  m.fields(0) = 0.1;
  m.fields(1) = 1.0 / 3.0;
  m.fields(2) = std::numeric_limits<double>::denorm_min();
  m.fields(3) = -std::numeric_limits<double>::max();
  m.couplings(0, 1) = m.couplings(1, 0) = std::nextafter(1.0, 2.0);
  m.couplings(2, 5) = m.couplings(5, 2) = -1e-300;
  m.names = {"a", "b", "c", "d", "e", "f\"quoted\" ü"};
  m.provenance.method = "tap";
  m.provenance.l1 = 0.01;
  m.provenance.iterations = 12;
  m.provenance.converged = false;
  m.provenance.objective = -0.6931471805599453;
  m.provenance.samples = 123456789012;
  m.provenance.units = N;
  m.provenance.seed = std::numeric_limits<std::uint64_t>::max();
  m.provenance.version = "0.1.0";
  m.provenance.extra = {{"shrinkage", 0.05}, {"list", {1, 2, 3}}};
  return m;
}

void write(const fs::path& p, const std::string& text) { std::ofstream(p) << text; }

}  // namespace

TEST_CASE("model file: save and load round-trip every double exactly") {
  const fs::path dir = temp_dir();
  const IsingModel m = awkward_model();
  const std::string path = (dir / "model.json").string();
  save_model(path, m);
  const IsingModel r = load_model(path);
  CHECK(r.convention == m.convention);
  CHECK(r.fields == m.fields);  // bit-exact
  CHECK(r.couplings == m.couplings);
  CHECK(r.names == m.names);
  CHECK(r.provenance.method == "tap");
  CHECK(r.provenance.l1 == 0.01);
  CHECK(r.provenance.iterations == 12);
  CHECK(!r.provenance.converged);
  CHECK(r.provenance.objective == m.provenance.objective);
  CHECK(r.provenance.samples == m.provenance.samples);
  CHECK(r.provenance.seed == m.provenance.seed);
  CHECK(r.provenance.extra == m.provenance.extra);
  // Through the JSON value as well, and the document is valid JSON with the documented keys.
  const nlohmann::json j = model_to_json(m);
  CHECK(j["format"] == "spinfer-model");
  CHECK(j["format_version"] == 1);
  CHECK(model_from_json(nlohmann::json::parse(j.dump()), "x").couplings == m.couplings);
  // Many random doubles.
  std::mt19937_64 rng(5);
  IsingModel big;
  big.convention = Convention::spin;
  big.fields.resize(40);
  big.couplings = Eigen::MatrixXd::Zero(40, 40);
  for (int i = 0; i < 40; ++i) {
    std::uint64_t bits = rng();
    double v;
    std::memcpy(&v, &bits, sizeof v);
    big.fields(i) = std::isfinite(v) ? v : 1.5;
    for (int k = i + 1; k < 40; ++k)
      big.couplings(i, k) = big.couplings(k, i) = std::ldexp(double(rng() >> 11), -53) - 0.5;
  }
  save_model(path, big);
  const IsingModel rb = load_model(path);
  CHECK(rb.fields == big.fields);
  CHECK(rb.couplings == big.couplings);
  CHECK(rb.names.empty());
  fs::remove_all(dir);
}

TEST_CASE("model file: every schema violation names the file and the key") {
  const fs::path dir = temp_dir();
  const std::string path = (dir / "m.json").string();
  IsingModel m = awkward_model();
  m.names.clear();
  const nlohmann::json good = model_to_json(m);
  auto expect = [&](nlohmann::json j, const std::string& fragment) {
    write(path, j.dump());
    CAPTURE(fragment);
    CHECK_THROWS_WITH_AS(load_model(path), doctest::Contains((path + ": " + fragment).c_str()), InputError);
  };
  nlohmann::json j = good;
  j.erase("fields");
  expect(j, "key 'fields': missing");
  j = good;
  j["extra_key"] = 1;
  expect(j, "key 'extra_key': unknown key");
  j = good;
  j["format"] = "something-else";
  expect(j, "key 'format': expected \"spinfer-model\"");
  j = good;
  j["format_version"] = 3;
  expect(j, "key 'format_version': version 3 is not supported");
  j = good;
  j["convention"] = "pm1";
  expect(j, "key 'convention': expected \"binary\" or \"spin\"");
  j = good;
  j["energy"] = "E = -1/2 sum_{i!=j} J_ij v_i v_j";
  expect(j, "key 'energy': expected");
  j = good;
  j["fields"][2] = "0.5";
  expect(j, "key 'fields': entry 3: expected a number, got string");
  j = good;
  j["couplings"][1].erase(0);
  expect(j, "key 'couplings': row 2: expected 6 numbers, got 5");
  j = good;
  j["couplings"].erase(5);
  expect(j, "key 'couplings': expected 6 lists");
  j = good;
  j["couplings"][3][4] = nullptr;
  expect(j, "key 'couplings': row 4, column 5: expected a number, got null");
  j = good;
  j["couplings"][0][1] = 0.5;
  expect(j, "key 'couplings': row 1, column 2: not symmetric (0.5 here,");
  j = good;
  j["couplings"][2][2] = 0.1;
  expect(j, "key 'couplings': row 3, column 3: the diagonal must be zero");
  j = good;
  j["names"] = {"a", "b", "c", "d", "e", "a"};
  expect(j, "key 'names': entry 6: duplicate name");
  j = good;
  j["names"] = {"a", "b"};
  expect(j, "key 'names': expected null or 6 strings, got 2 entries");
  j = good;
  j["provenance"]["iterations"] = 1.5;
  expect(j, "key 'provenance.iterations': expected an integer");
  j = good;
  j["provenance"]["methd"] = "x";
  expect(j, "key 'provenance.methd': unknown provenance key");
  write(path, "{\"format\": ");
  CHECK_THROWS_WITH_AS(load_model(path), doctest::Contains((path + ": not valid JSON").c_str()), InputError);
  CHECK_THROWS_AS(load_model((dir / "missing.json").string()), FileError);
  // Provenance keys are optional; a minimal hand-written file loads.
  j = good;
  j["provenance"] = nlohmann::json::object();
  write(path, j.dump());
  CHECK(load_model(path).provenance.method.empty());
  fs::remove_all(dir);
}

TEST_CASE("model file: writing is atomic and refuses invalid models") {
  const fs::path dir = temp_dir();
  IsingModel m = awkward_model();
  m.couplings(0, 1) = 7;  // asymmetric
  const std::string path = (dir / "bad.json").string();
  CHECK_THROWS_AS(save_model(path, m), InputError);
  CHECK(!fs::exists(path));
  CHECK_THROWS_AS(save_model((dir / "no-such-dir" / "m.json").string(), awkward_model()), FileError);
  CHECK(fs::is_empty(dir));  // no temporary left behind
  fs::remove_all(dir);
}
