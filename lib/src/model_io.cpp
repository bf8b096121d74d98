#include "spinfer/model_io.hpp"

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>

#include "spinfer/atomic_file.hpp"
#include "spinfer/checksum.hpp"
#include "spinfer/csv.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/npy.hpp"

namespace spinfer {
namespace {

constexpr const char* kFormat = "spinfer-model";
constexpr int kFormatVersion = 1;         // couplings inline
constexpr int kSiblingFormatVersion = 2;  // couplings in a separate .npy file
constexpr const char* kCouplingsDescr = "<f8";

std::string energy_text(Convention c) {
  return std::string("E = -sum_i h_i v_i - sum_{i<j} J_ij v_i v_j, v_i in ") +
         (c == Convention::binary ? "{0, 1}" : "{-1, +1}") + ", P(v) = exp(-E(v)) / Z";
}

std::string without_spaces(const std::string& s) {
  std::string out;
  for (char ch : s)
    if (!std::isspace(static_cast<unsigned char>(ch))) out += ch;
  return out;
}

std::string key(const std::string& source, const std::string& name) {
  return source + ": key '" + name + "': ";
}

std::string type_name(const nlohmann::json& j) { return j.type_name(); }

// JSON has no NaN/inf: unknown values are written as null.
nlohmann::json number_or_null(double v) { return std::isfinite(v) ? nlohmann::json(v) : nlohmann::json(); }

double read_number(const nlohmann::json& j, const std::string& where_text) {
  if (!j.is_number()) throw InputError(where_text + "expected a number, got " + type_name(j));
  return j.get<double>();
}

Eigen::VectorXd read_vector(const nlohmann::json& j, const std::string& source,
                            const std::string& name) {
  if (!j.is_array())
    throw InputError(key(source, name) + "expected a list of numbers, got " + type_name(j));
  Eigen::VectorXd v(Eigen::Index(j.size()));
  for (std::size_t i = 0; i < j.size(); ++i)
    v(Eigen::Index(i)) = read_number(j[i], key(source, name) + "entry " + std::to_string(i + 1) + ": ");
  return v;
}

}  // namespace

Provenance provenance_from_json(const nlohmann::json& j, const std::string& source) {
  const std::string name = "provenance";
  if (!j.is_object()) throw InputError(key(source, name) + "expected an object, got " + type_name(j));
  static const std::set<std::string> known = {"method", "l1", "l2", "iterations", "converged",
                                              "objective", "samples", "units", "seed",
                                              "version", "extra"};
  for (auto it = j.begin(); it != j.end(); ++it)
    if (!known.count(it.key()))
      throw InputError(key(source, name + "." + it.key()) +
                       "unknown provenance key (put additions under 'extra')");
  Provenance p;
  auto text = [&](const char* k, std::string& out) {
    if (!j.contains(k)) return;
    if (!j[k].is_string())
      throw InputError(key(source, name + "." + k) + "expected a string, got " + type_name(j[k]));
    out = j[k].get<std::string>();
  };
  auto real = [&](const char* k, double& out) {
    if (!j.contains(k)) return;
    if (j[k].is_null()) {
      out = std::nan("");
      return;
    }
    out = read_number(j[k], key(source, name + "." + k));
  };
  auto integer = [&](const char* k, std::int64_t& out) {
    if (!j.contains(k)) return;
    if (!j[k].is_number_integer())
      throw InputError(key(source, name + "." + k) + "expected an integer, got " + j[k].dump());
    out = j[k].get<std::int64_t>();
  };
  text("method", p.method);
  text("version", p.version);
  real("l1", p.l1);
  real("l2", p.l2);
  real("objective", p.objective);
  integer("iterations", p.iterations);
  integer("samples", p.samples);
  integer("units", p.units);
  if (j.contains("converged")) {
    if (!j["converged"].is_boolean())
      throw InputError(key(source, name + ".converged") + "expected true or false, got " +
                       j["converged"].dump());
    p.converged = j["converged"].get<bool>();
  }
  if (j.contains("seed")) {
    if (!j["seed"].is_number_unsigned() && !(j["seed"].is_number_integer() && j["seed"].get<std::int64_t>() >= 0))
      throw InputError(key(source, name + ".seed") + "expected a non-negative integer, got " +
                       j["seed"].dump());
    p.seed = j["seed"].get<std::uint64_t>();
  }
  if (j.contains("extra")) {
    if (!j["extra"].is_object())
      throw InputError(key(source, name + ".extra") + "expected an object, got " +
                       type_name(j["extra"]));
    p.extra = j["extra"];
  }
  return p;
}

nlohmann::json provenance_to_json(const Provenance& p) {
  nlohmann::json prov;
  prov["method"] = p.method;
  prov["l1"] = number_or_null(p.l1);
  prov["l2"] = number_or_null(p.l2);
  prov["iterations"] = p.iterations;
  prov["converged"] = p.converged;
  prov["objective"] = number_or_null(p.objective);
  prov["samples"] = p.samples;
  prov["units"] = p.units;
  prov["seed"] = p.seed;
  prov["version"] = p.version;
  prov["extra"] = p.extra.is_object() ? p.extra : nlohmann::json::object();
  return prov;
}

namespace {

// Every key but "couplings", for a validated model.
nlohmann::json header_json(const IsingModel& model, int format_version) {
  nlohmann::json j;
  j["format"] = kFormat;
  j["format_version"] = format_version;
  j["convention"] = to_string(model.convention);
  j["energy"] = energy_text(model.convention);
  j["names"] = model.names.empty() ? nlohmann::json() : nlohmann::json(model.names);
  nlohmann::json fields = nlohmann::json::array();
  for (Eigen::Index i = 0; i < model.size(); ++i) fields.push_back(model.fields(i));
  j["fields"] = std::move(fields);
  j["provenance"] = provenance_to_json(model.provenance);
  return j;
}

}  // namespace

nlohmann::json model_to_json(const IsingModel& model) {
  validate_model(model, "model");
  const Eigen::Index N = model.size();
  nlohmann::json j = header_json(model, kFormatVersion);
  nlohmann::json couplings = nlohmann::json::array();
  for (Eigen::Index i = 0; i < N; ++i) {
    nlohmann::json row = nlohmann::json::array();
    for (Eigen::Index k = 0; k < N; ++k) row.push_back(model.couplings(i, k));
    couplings.push_back(std::move(row));
  }
  j["couplings"] = std::move(couplings);
  return j;
}

CouplingsStorage parse_couplings_storage(const std::string& text, const std::string& what) {
  if (text == "auto") return CouplingsStorage::automatic;
  if (text == "inline") return CouplingsStorage::inline_lists;
  if (text == "npy") return CouplingsStorage::npy_file;
  throw InputError(what + " '" + text + "': expected auto, inline or npy");
}

bool couplings_in_sibling(Eigen::Index units, CouplingsStorage storage) {
  switch (storage) {
    case CouplingsStorage::inline_lists: return false;
    case CouplingsStorage::npy_file: return true;
    case CouplingsStorage::automatic: break;
  }
  return units > kInlineCouplingsMaxUnits;
}

std::string couplings_sibling_path(const std::string& model_path) {
  std::filesystem::path p(model_path);  // "run.json" -> "run.couplings.npy"; else append
  if (p.extension() == ".json") p.replace_extension(".couplings.npy");
  else p += ".couplings.npy";
  return p.string();
}

namespace {

// The "couplings" value that refers to a separate file: checks the reference, reads the file,
// compares its hash, dtype and shape, and returns the matrix (not yet checked for symmetry).
// `shown` receives the file's path for later messages.
Eigen::MatrixXd read_couplings_file(const nlohmann::json& ref, Eigen::Index N,
                                    const std::string& source,
                                    const std::optional<std::string>& folder, std::string& shown) {
  static const std::vector<std::string> keys = {"npy", "shape", "dtype", "fnv1a64"};
  for (const auto& k : keys)
    if (!ref.contains(k)) throw InputError(key(source, "couplings." + k) + "missing");
  for (auto it = ref.begin(); it != ref.end(); ++it)
    if (std::find(keys.begin(), keys.end(), it.key()) == keys.end())
      throw InputError(key(source, "couplings." + it.key()) + "unknown key");
  const nlohmann::json& name = ref["npy"];
  if (!name.is_string() || name.get<std::string>().empty())
    throw InputError(key(source, "couplings.npy") + "expected a file name, got " + name.dump());
  const std::filesystem::path relative(name.get<std::string>());
  if (relative.is_absolute() || relative.has_root_name())
    throw InputError(key(source, "couplings.npy") + "expected a path relative to the model file, got " +
                     name.dump());
  const nlohmann::json expected_shape = {N, N};
  if (ref["shape"] != expected_shape)
    throw InputError(key(source, "couplings.shape") + "expected " + expected_shape.dump() +
                     " (one row and column per field), got " + ref["shape"].dump());
  if (ref["dtype"] != "float64")
    throw InputError(key(source, "couplings.dtype") + "expected \"float64\", got " + ref["dtype"].dump());
  const nlohmann::json& hash = ref["fnv1a64"];
  if (!hash.is_string() || hash.get<std::string>().size() != 16 ||
      hash.get<std::string>().find_first_not_of("0123456789abcdef") != std::string::npos)
    throw InputError(key(source, "couplings.fnv1a64") + "expected 16 lower-case hex digits, got " +
                     hash.dump());
  if (!folder)
    throw InputError(key(source, "couplings") + "the couplings are in a separate file (" +
                     relative.string() + "); read the model with load_model so its folder is known");
  shown = (std::filesystem::path(*folder) / relative).string();
  std::string bytes;
  try {
    bytes = read_text_file(shown);
  } catch (const FileError& e) {
    throw FileError(key(source, "couplings") + "cannot read its couplings file: " + e.what());
  }
  const std::string actual = fnv1a64_hex(fnv1a64(bytes.data(), bytes.size()));
  if (actual != hash.get<std::string>())
    throw InputError(key(source, "couplings") + "the couplings file " + shown +
                     " does not belong to this model file (its FNV-1a hash is " + actual +
                     ", the model file expects " + hash.get<std::string>() +
                     "): the pair is mismatched or one of them was replaced; keep the two files "
                     "that were written together");
  NpyArray a;
  try {
    a = parse_npy(bytes.data(), bytes.size(), shown);
  } catch (const InputError& e) {
    throw InputError(key(source, "couplings") + e.what());
  }
  bytes = std::string();  // release before the matrix copy
  if (a.descr != kCouplingsDescr || a.shape != std::vector<std::int64_t>{N, N})
    throw InputError(key(source, "couplings") + "the couplings file " + shown + " holds a '" +
                     a.descr + "' array of shape " + nlohmann::json(a.shape).dump() +
                     "; the model file expects float64 of shape " + expected_shape.dump());
  Eigen::MatrixXd m(N, N);
  const auto* v = reinterpret_cast<const double*>(a.bytes.data());  // parse_npy: little-endian
  for (Eigen::Index i = 0; i < N; ++i)
    for (Eigen::Index k = 0; k < N; ++k)
      m(i, k) = a.fortran ? v[k * N + i] : v[i * N + k];
  return m;
}

// Inline couplings: N lists of N numbers.
Eigen::MatrixXd read_couplings_lists(const nlohmann::json& c, Eigen::Index N, const std::string& source) {
  if (!c.is_array() || Eigen::Index(c.size()) != N)
    throw InputError(key(source, "couplings") + "expected " + std::to_string(N) +
                     " lists (one per field), got " +
                     (c.is_array() ? std::to_string(c.size()) + " entries" : type_name(c)));
  Eigen::MatrixXd m(N, N);
  for (Eigen::Index i = 0; i < N; ++i) {
    const nlohmann::json& row = c[std::size_t(i)];
    if (!row.is_array() || Eigen::Index(row.size()) != N)
      throw InputError(key(source, "couplings") + "row " + std::to_string(i + 1) + ": expected " +
                       std::to_string(N) + " numbers, got " +
                       (row.is_array() ? std::to_string(row.size()) : type_name(row)));
    for (Eigen::Index k = 0; k < N; ++k)
      m(i, k) = read_number(row[std::size_t(k)], key(source, "couplings") + "row " +
                            std::to_string(i + 1) + ", column " + std::to_string(k + 1) + ": ");
  }
  return m;
}

}  // namespace

IsingModel model_from_json(const nlohmann::json& j, const std::string& source,
                           const std::optional<std::string>& folder) {
  if (!j.is_object())
    throw InputError(source + ": expected a JSON object (a spinfer model), got " + type_name(j));
  static const std::vector<std::string> required = {"format", "format_version", "convention",
                                                    "energy", "names", "fields", "couplings",
                                                    "provenance"};
  for (const auto& k : required)
    if (!j.contains(k)) throw InputError(key(source, k) + "missing");
  for (auto it = j.begin(); it != j.end(); ++it)
    if (std::find(required.begin(), required.end(), it.key()) == required.end())
      throw InputError(key(source, it.key()) + "unknown key");
  if (!j["format"].is_string() || j["format"].get<std::string>() != kFormat)
    throw InputError(key(source, "format") + "expected \"" + kFormat + "\", got " +
                     j["format"].dump() + " (not a spinfer model file)");
  if (!j["format_version"].is_number_integer())
    throw InputError(key(source, "format_version") + "expected an integer, got " +
                     j["format_version"].dump());
  const auto fv = j["format_version"].get<std::int64_t>();
  if (fv != kFormatVersion && fv != kSiblingFormatVersion)
    throw InputError(key(source, "format_version") + "version " + std::to_string(fv) +
                     " is not supported (this library reads versions " +
                     std::to_string(kFormatVersion) + " and " + std::to_string(kSiblingFormatVersion) +
                     (fv > kSiblingFormatVersion ? "; upgrade spinfer)" : ")"));
  if (!j["convention"].is_string())
    throw InputError(key(source, "convention") + "expected \"binary\" or \"spin\", got " +
                     j["convention"].dump());
  IsingModel model;
  const std::string conv = j["convention"].get<std::string>();
  if (conv != "binary" && conv != "spin")
    throw InputError(key(source, "convention") + "expected \"binary\" or \"spin\", got \"" + conv + "\"");
  model.convention = conv == "binary" ? Convention::binary : Convention::spin;
  const std::string expected = energy_text(model.convention);
  if (!j["energy"].is_string() || without_spaces(j["energy"].get<std::string>()) != without_spaces(expected))
    throw InputError(key(source, "energy") + "expected \"" + expected + "\" for the " + conv +
                     " convention, got " + j["energy"].dump() +
                     " (a different energy convention would be misread)");
  model.fields = read_vector(j["fields"], source, "fields");
  const Eigen::Index N = model.fields.size();
  if (N == 0) throw InputError(key(source, "fields") + "the model has no units");
  // The couplings file's path, when there is one, for the checks' messages below.
  std::string couplings_file;
  model.couplings = j["couplings"].is_object()
                        ? read_couplings_file(j["couplings"], N, source, folder, couplings_file)
                        : read_couplings_lists(j["couplings"], N, source);
  const nlohmann::json& names = j["names"];
  if (!names.is_null()) {
    if (!names.is_array() || Eigen::Index(names.size()) != N)
      throw InputError(key(source, "names") + "expected null or " + std::to_string(N) +
                       " strings, got " + (names.is_array() ? std::to_string(names.size()) + " entries" : type_name(names)));
    std::set<std::string> seen;
    for (std::size_t i = 0; i < names.size(); ++i) {
      if (!names[i].is_string() || names[i].get<std::string>().empty())
        throw InputError(key(source, "names") + "entry " + std::to_string(i + 1) +
                         ": expected a non-empty string, got " + names[i].dump());
      if (!seen.insert(names[i].get<std::string>()).second)
        throw InputError(key(source, "names") + "entry " + std::to_string(i + 1) +
                         ": duplicate name " + names[i].dump());
      model.names.push_back(names[i].get<std::string>());
    }
  }
  const std::string from = couplings_file.empty() ? "" : "in " + couplings_file + ": ";
  for (Eigen::Index i = 0; i < N; ++i) {
    const std::string at = key(source, "couplings") + from + "row " + std::to_string(i + 1) + ", column ";
    if (!std::isfinite(model.fields(i)))
      throw InputError(key(source, "fields") + "entry " + std::to_string(i + 1) + ": not finite");
    if (model.couplings(i, i) != 0.0)
      throw InputError(at + std::to_string(i + 1) + ": the diagonal must be zero");
    for (Eigen::Index k = 0; k < N; ++k) {
      const double a = model.couplings(i, k), b = model.couplings(k, i);
      if (!std::isfinite(a)) throw InputError(at + std::to_string(k + 1) + ": not finite");
      if (std::abs(a - b) > 1e-12 * std::max({1.0, std::abs(a), std::abs(b)}))
        throw InputError(at + std::to_string(k + 1) + ": not symmetric (" + nlohmann::json(a).dump() +
                         " here, " + nlohmann::json(b).dump() + " at row " + std::to_string(k + 1) +
                         ", column " + std::to_string(i + 1) + ")");
    }
  }
  model.provenance = provenance_from_json(j["provenance"], source);
  validate_model(model, source);  // the library's own rules (same as above; kept as the authority)
  return model;
}

namespace {

// The provenance object indented to sit inside the top-level object.
std::string indented_provenance(const nlohmann::json& provenance) {
  std::string indented;
  for (char ch : provenance.dump(2)) {
    indented += ch;
    if (ch == '\n') indented += "  ";
  }
  return indented;
}

// Our own layout: one key per line, inline couplings one row per line (dump(2) would put every
// number on its own line); a sibling-file reference (an object) on one line.
void write_model_json(std::ostream& out, const nlohmann::json& j) {
  out << "{\n";
  for (const char* k : {"format", "format_version", "convention", "energy", "names", "fields"})
    out << "  \"" << k << "\": " << j[k].dump() << ",\n";
  const nlohmann::json& c = j["couplings"];
  out << "  \"couplings\": ";
  if (c.is_array()) {
    out << "[\n";
    for (std::size_t i = 0; i < c.size(); ++i) out << "    " << c[i].dump() << (i + 1 < c.size() ? ",\n" : "\n");
    out << "  ]";
  } else {
    out << c.dump();
  }
  out << ",\n  \"provenance\": " << indented_provenance(j["provenance"]) << "\n}\n";
}

}  // namespace

void save_model(const std::string& path, const IsingModel& model, CouplingsStorage storage) {
  const Eigen::Index N = model.size();
  if (!couplings_in_sibling(N, storage)) {
    const nlohmann::json j = model_to_json(model);  // validates the model
    write_file_atomically(path, [&](std::ostream& out) { write_model_json(out, j); });
    return;
  }
  validate_model(model, "model");
  // Eigen stores columns contiguously: the .npy is Fortran-ordered (numpy reads the same matrix)
  // and written straight from the model's memory.
  const std::string npy_path = couplings_sibling_path(path);
  const std::string preamble = npy_preamble(kCouplingsDescr, true, {N, N});
  const char* data = reinterpret_cast<const char*>(model.couplings.data());
  const std::size_t data_bytes = std::size_t(N) * std::size_t(N) * sizeof(double);
  const std::uint64_t hash = fnv1a64(data, data_bytes, fnv1a64(preamble.data(), preamble.size()));
  nlohmann::json j = header_json(model, kSiblingFormatVersion);
  j["couplings"] = {{"npy", std::filesystem::path(npy_path).filename().string()},
                    {"shape", {N, N}},
                    {"dtype", "float64"},
                    {"fnv1a64", fnv1a64_hex(hash)}};
  write_files_atomically(
      {{npy_path,
        [&](std::ostream& out) {
          out.write(preamble.data(), std::streamsize(preamble.size()));
          out.write(data, std::streamsize(data_bytes));
        }},
       {path, [&](std::ostream& out) { write_model_json(out, j); }}});
}

IsingModel load_model(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw FileError(path + ": cannot open model file (" + std::strerror(errno) + ")");
  std::stringstream buffer;
  buffer << in.rdbuf();
  if (in.bad()) throw FileError(path + ": read failed");
  nlohmann::json j;
  try {
    j = nlohmann::json::parse(buffer.str());
  } catch (const nlohmann::json::parse_error& e) {
    throw InputError(path + ": not valid JSON (" + e.what() + ")");
  }
  return model_from_json(j, path, std::filesystem::path(path).parent_path().string());
}

}  // namespace spinfer
