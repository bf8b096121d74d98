// Model files whose couplings live in a sibling .npy file: exact round trips, the automatic size
// threshold, refusal of stale or mismatched pairs naming both files, and the pair's atomic write.
#include <doctest/doctest.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>

#include "spinfer/checksum.hpp"
#include "spinfer/errors.hpp"
#include "temp_dir.hpp"
#include "spinfer/model_io.hpp"
#include "spinfer/npy.hpp"

using namespace spinfer;
namespace fs = std::filesystem;

namespace {

fs::path temp_dir() { return spinfer::testing::temp_dir("couplings-file"); }

IsingModel random_model(int N, std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0, 0.3);
  IsingModel m;
  m.convention = Convention::spin;
  m.fields.resize(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) {
    m.fields(i) = g(rng);
    for (int k = i + 1; k < N; ++k) m.couplings(i, k) = m.couplings(k, i) = g(rng) / 7.0;
  }
  m.provenance.method = "pseudo-likelihood";
  m.provenance.units = N;
  return m;
}

nlohmann::json read_json(const fs::path& p) {
  std::ifstream in(p);
  return nlohmann::json::parse(in);
}

void write_json(const fs::path& p, const nlohmann::json& j) { std::ofstream(p) << j.dump(); }

std::size_t entries(const fs::path& dir) {
  return std::size_t(std::distance(fs::directory_iterator(dir), fs::directory_iterator()));
}

}  // namespace

TEST_CASE("couplings file: names, options and the automatic threshold") {
  CHECK(couplings_sibling_path("out/run1.json") == (fs::path("out") / "run1.couplings.npy").string());
  CHECK(couplings_sibling_path("model") == "model.couplings.npy");
  CHECK(couplings_sibling_path("a.b.json") == "a.b.couplings.npy");
  CHECK(parse_couplings_storage("auto", "x") == CouplingsStorage::automatic);
  CHECK(parse_couplings_storage("inline", "x") == CouplingsStorage::inline_lists);
  CHECK(parse_couplings_storage("npy", "x") == CouplingsStorage::npy_file);
  CHECK_THROWS_WITH_AS(parse_couplings_storage("hdf5", "--couplings-file"),
                       doctest::Contains("--couplings-file 'hdf5': expected auto, inline or npy"), InputError);
  CHECK(!couplings_in_sibling(kInlineCouplingsMaxUnits, CouplingsStorage::automatic));
  CHECK(couplings_in_sibling(kInlineCouplingsMaxUnits + 1, CouplingsStorage::automatic));
  CHECK(couplings_in_sibling(2, CouplingsStorage::npy_file));
  CHECK(!couplings_in_sibling(5000, CouplingsStorage::inline_lists));

  // The threshold as save_model applies it.
  const fs::path dir = temp_dir();
  const IsingModel at = random_model(int(kInlineCouplingsMaxUnits), 1);
  const IsingModel above = random_model(int(kInlineCouplingsMaxUnits) + 1, 2);
  save_model((dir / "at.json").string(), at);
  save_model((dir / "above.json").string(), above);
  CHECK(read_json(dir / "at.json")["couplings"].is_array());
  CHECK(!fs::exists(dir / "at.couplings.npy"));
  CHECK(read_json(dir / "above.json")["couplings"].is_object());
  CHECK(fs::exists(dir / "above.couplings.npy"));
  CHECK(load_model((dir / "above.json").string()).couplings == above.couplings);
  fs::remove_all(dir);
}

TEST_CASE("couplings file: the pair round-trips every double and documents itself") {
  const fs::path dir = temp_dir();
  IsingModel m = random_model(7, 3);
  m.couplings(0, 1) = m.couplings(1, 0) = std::nextafter(1.0, 2.0);
  m.couplings(2, 6) = m.couplings(6, 2) = -1e-300;
  m.names = {"a", "b", "c", "d", "e", "f", "g"};
  const std::string path = (dir / "m.json").string();
  save_model(path, m, CouplingsStorage::npy_file);
  const nlohmann::json j = read_json(path);
  CHECK(j["format_version"] == 2);
  CHECK(j["names"] == nlohmann::json(m.names));
  const nlohmann::json& ref = j["couplings"];
  CHECK(ref["npy"] == "m.couplings.npy");
  CHECK(ref["shape"] == nlohmann::json({7, 7}));
  CHECK(ref["dtype"] == "float64");
  CHECK(ref["fnv1a64"] == file_fnv1a64((dir / "m.couplings.npy").string()));
  // The sibling is an ordinary .npy of the matrix (numpy's side is in tests/python).
  const NpyArray a = read_npy((dir / "m.couplings.npy").string());
  CHECK(a.descr == "<f8");
  CHECK(a.shape == std::vector<std::int64_t>{7, 7});
  const IsingModel r = load_model(path);
  CHECK(r.couplings == m.couplings);  // bit-exact
  CHECK(r.fields == m.fields);
  CHECK(r.names == m.names);
  CHECK(r.provenance.method == "pseudo-likelihood");
  // Moving the pair together keeps it readable (the reference is relative).
  fs::create_directories(dir / "moved");
  fs::rename(dir / "m.json", dir / "moved" / "m.json");
  fs::rename(dir / "m.couplings.npy", dir / "moved" / "m.couplings.npy");
  CHECK(load_model((dir / "moved" / "m.json").string()).couplings == m.couplings);
  // Rewriting inline makes an ordinary version-1 file.
  save_model(path, m, CouplingsStorage::inline_lists);
  CHECK(read_json(path)["format_version"] == 1);
  CHECK(load_model(path).couplings == m.couplings);
  fs::remove_all(dir);
}

TEST_CASE("couplings file: C-order files are read in their own order") {
  // A matrix symmetric only to rounding tells the two orders apart.
  const fs::path dir = temp_dir();
  IsingModel m = random_model(3, 4);
  m.couplings(0, 1) = 0.25;
  m.couplings(1, 0) = std::nextafter(0.25, 1.0);
  const std::string path = (dir / "m.json").string();
  save_model(path, m, CouplingsStorage::npy_file);
  NpyArray c;
  c.descr = "<f8";
  c.shape = {3, 3};
  c.fortran = false;
  c.bytes.resize(9 * sizeof(double));
  auto* v = reinterpret_cast<double*>(c.bytes.data());
  for (int i = 0; i < 3; ++i)
    for (int k = 0; k < 3; ++k) v[i * 3 + k] = m.couplings(i, k);
  write_npy((dir / "m.couplings.npy").string(), c);
  nlohmann::json j = read_json(path);
  j["couplings"]["fnv1a64"] = file_fnv1a64((dir / "m.couplings.npy").string());
  write_json(path, j);
  const IsingModel r = load_model(path);
  CHECK(r.couplings(0, 1) == 0.25);
  CHECK(r.couplings(1, 0) == std::nextafter(0.25, 1.0));
  fs::remove_all(dir);
}

TEST_CASE("couplings file: stale, mismatched, missing or malformed siblings are refused") {
  const fs::path dir = temp_dir();
  const std::string a = (dir / "a.json").string(), b = (dir / "b.json").string();
  const std::string a_npy = (dir / "a.couplings.npy").string();
  const IsingModel ma = random_model(5, 5);
  save_model(a, ma, CouplingsStorage::npy_file);
  save_model(b, random_model(5, 6), CouplingsStorage::npy_file);
  const nlohmann::json good = read_json(a);

  SUBCASE("another model's couplings file: both files named") {
    fs::copy_file(dir / "b.couplings.npy", a_npy, fs::copy_options::overwrite_existing);
    CHECK_THROWS_WITH_AS(load_model(a),
                         doctest::Contains((a + ": key 'couplings': the couplings file " + a_npy +
                                            " does not belong to this model file").c_str()),
                         InputError);
  }
  SUBCASE("a missing couplings file is a file error naming both") {
    fs::remove(a_npy);
    CHECK_THROWS_WITH_AS(load_model(a),
                         doctest::Contains((a + ": key 'couplings': cannot read its couplings file: " + a_npy).c_str()),
                         FileError);
  }
  SUBCASE("the reference's own keys") {
    auto expect = [&](nlohmann::json j, const std::string& fragment) {
      write_json(a, j);
      CAPTURE(fragment);
      CHECK_THROWS_WITH_AS(load_model(a), doctest::Contains((a + ": " + fragment).c_str()), InputError);
    };
    nlohmann::json j = good;
    j["couplings"].erase("fnv1a64");
    expect(j, "key 'couplings.fnv1a64': missing");
    j = good;
    j["couplings"]["order"] = "C";
    expect(j, "key 'couplings.order': unknown key");
    j = good;
    j["couplings"]["npy"] = (dir / "a.couplings.npy").string();
    expect(j, "key 'couplings.npy': expected a path relative to the model file");
    j = good;
    j["couplings"]["shape"] = {5, 4};
    expect(j, "key 'couplings.shape': expected [5,5] (one row and column per field), got [5,4]");
    j = good;
    j["couplings"]["dtype"] = "float32";
    expect(j, "key 'couplings.dtype': expected \"float64\"");
    j = good;
    j["couplings"]["fnv1a64"] = "XYZ";
    expect(j, "key 'couplings.fnv1a64': expected 16 lower-case hex digits");
    j = good;
    j["couplings"] = nlohmann::json::object();
    expect(j, "key 'couplings.npy': missing");
  }
  SUBCASE("a matching hash does not excuse a wrong shape, dtype or an asymmetric matrix") {
    auto with_file = [&](const auto& write) {
      write();
      nlohmann::json j = good;
      j["couplings"]["fnv1a64"] = file_fnv1a64(a_npy);
      write_json(a, j);
    };
    with_file([&] { write_npy(a_npy, Eigen::MatrixXd(Eigen::MatrixXd::Zero(5, 4))); });
    CHECK_THROWS_WITH_AS(load_model(a), doctest::Contains("holds a '<f8' array of shape [5,4]"), InputError);
    with_file([&] { write_npy(a_npy, Eigen::VectorXd(Eigen::VectorXd::Zero(25))); });
    CHECK_THROWS_WITH_AS(load_model(a), doctest::Contains("expects float64 of shape [5,5]"), InputError);
    Eigen::MatrixXd asym = ma.couplings;
    asym(0, 3) += 0.5;
    with_file([&] { write_npy(a_npy, asym); });
    CHECK_THROWS_WITH_AS(load_model(a),
                         doctest::Contains((a + ": key 'couplings': in " + a_npy + ": row 1, column 4: not symmetric").c_str()),
                         InputError);
    Eigen::MatrixXd diag = ma.couplings;
    diag(2, 2) = 1;
    with_file([&] { write_npy(a_npy, diag); });
    CHECK_THROWS_WITH_AS(load_model(a), doctest::Contains("row 3, column 3: the diagonal must be zero"), InputError);
    with_file([&] {
      std::ofstream(a_npy) << "not an array";
    });
    CHECK_THROWS_WITH_AS(load_model(a), doctest::Contains((a + ": key 'couplings': " + a_npy + ": not a .npy file").c_str()),
                         InputError);
  }
  SUBCASE("a JSON value alone cannot resolve the reference") {
    CHECK_THROWS_WITH_AS(model_from_json(good, "value"),
                         doctest::Contains("value: key 'couplings': the couplings are in a separate file (a.couplings.npy)"),
                         InputError);
    CHECK(model_from_json(good, "value", dir.string()).couplings == ma.couplings);
  }
  fs::remove_all(dir);
}

TEST_CASE("couplings file: writing the pair is atomic") {
  const fs::path dir = temp_dir();
  const std::string path = (dir / "m.json").string();
  SUBCASE("an invalid model writes nothing") {
    IsingModel m = random_model(4, 7);
    m.couplings(0, 1) = 9;
    CHECK_THROWS_AS(save_model(path, m, CouplingsStorage::npy_file), InputError);
    CHECK(entries(dir) == 0);
  }
  SUBCASE("the JSON cannot be placed: the new couplings file is removed") {
    fs::create_directories(dir / "m.json" / "occupied");
    CHECK_THROWS_AS(save_model(path, random_model(4, 7), CouplingsStorage::npy_file), FileError);
    CHECK(!fs::exists(dir / "m.couplings.npy"));
    CHECK(entries(dir) == 1);
  }
  SUBCASE("the JSON cannot be placed: a previous couplings file is restored") {
    const IsingModel old = random_model(4, 8);
    save_model(path, old, CouplingsStorage::npy_file);
    const std::string before = file_fnv1a64((dir / "m.couplings.npy").string());
    fs::rename(dir / "m.json", dir / "kept.json");
    fs::create_directories(dir / "m.json" / "occupied");
    CHECK_THROWS_AS(save_model(path, random_model(4, 9), CouplingsStorage::npy_file), FileError);
    CHECK(file_fnv1a64((dir / "m.couplings.npy").string()) == before);
    CHECK(entries(dir) == 3);  // kept.json, m.couplings.npy, the folder
  }
  fs::remove_all(dir);
}
