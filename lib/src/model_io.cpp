#include "spinfer/model_io.hpp"

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <fstream>
#include <set>
#include <sstream>

#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"

namespace spinfer {
namespace {

constexpr const char* kFormat = "spinfer-model";
constexpr int kFormatVersion = 1;

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

nlohmann::json model_to_json(const IsingModel& model) {
  validate_model(model, "model");
  const Eigen::Index N = model.size();
  nlohmann::json j;
  j["format"] = kFormat;
  j["format_version"] = kFormatVersion;
  j["convention"] = to_string(model.convention);
  j["energy"] = energy_text(model.convention);
  j["names"] = model.names.empty() ? nlohmann::json() : nlohmann::json(model.names);
  nlohmann::json fields = nlohmann::json::array(), couplings = nlohmann::json::array();
  for (Eigen::Index i = 0; i < N; ++i) {
    fields.push_back(model.fields(i));
    nlohmann::json row = nlohmann::json::array();
    for (Eigen::Index k = 0; k < N; ++k) row.push_back(model.couplings(i, k));
    couplings.push_back(std::move(row));
  }
  j["fields"] = std::move(fields);
  j["couplings"] = std::move(couplings);
  j["provenance"] = provenance_to_json(model.provenance);
  return j;
}

IsingModel model_from_json(const nlohmann::json& j, const std::string& source) {
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
  if (fv != kFormatVersion)
    throw InputError(key(source, "format_version") + "version " + std::to_string(fv) +
                     " is not supported (this library reads version " +
                     std::to_string(kFormatVersion) + (fv > kFormatVersion ? "; upgrade spinfer)" : ")"));
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
  const nlohmann::json& c = j["couplings"];
  if (!c.is_array() || Eigen::Index(c.size()) != N)
    throw InputError(key(source, "couplings") + "expected " + std::to_string(N) +
                     " lists (one per field), got " +
                     (c.is_array() ? std::to_string(c.size()) + " entries" : type_name(c)));
  model.couplings.resize(N, N);
  for (Eigen::Index i = 0; i < N; ++i) {
    const nlohmann::json& row = c[std::size_t(i)];
    if (!row.is_array() || Eigen::Index(row.size()) != N)
      throw InputError(key(source, "couplings") + "row " + std::to_string(i + 1) + ": expected " +
                       std::to_string(N) + " numbers, got " +
                       (row.is_array() ? std::to_string(row.size()) : type_name(row)));
    for (Eigen::Index k = 0; k < N; ++k)
      model.couplings(i, k) = read_number(row[std::size_t(k)], key(source, "couplings") + "row " +
                                          std::to_string(i + 1) + ", column " +
                                          std::to_string(k + 1) + ": ");
  }
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
  for (Eigen::Index i = 0; i < N; ++i) {
    const std::string at = key(source, "couplings") + "row " + std::to_string(i + 1) + ", column ";
    if (!std::isfinite(model.fields(i)))
      throw InputError(key(source, "fields") + "entry " + std::to_string(i + 1) + ": not finite");
    if (model.couplings(i, i) != 0.0)
      throw InputError(at + std::to_string(i + 1) + ": the diagonal must be zero");
    for (Eigen::Index k = 0; k < N; ++k) {
      const double a = model.couplings(i, k), b = model.couplings(k, i);
      if (!std::isfinite(a)) throw InputError(at + std::to_string(k + 1) + ": not finite");
      if (std::abs(a - b) > 1e-12 * std::max({1.0, std::abs(a), std::abs(b)}))
        throw InputError(at + std::to_string(k + 1) + ": not symmetric (" + j["couplings"][i][k].dump() +
                         " here, " + j["couplings"][k][i].dump() + " at row " + std::to_string(k + 1) +
                         ", column " + std::to_string(i + 1) + ")");
    }
  }
  model.provenance = provenance_from_json(j["provenance"], source);
  validate_model(model, source);  // the library's own rules (same as above; kept as the authority)
  return model;
}

void save_model(const std::string& path, const IsingModel& model) {
  const nlohmann::json j = model_to_json(model);
  // Our own layout: one coupling row per line (dump(2) would put every number on its own line).
  write_file_atomically(path, [&](std::ostream& out) {
    out << "{\n";
    for (const char* k : {"format", "format_version", "convention", "energy", "names", "fields"})
      out << "  \"" << k << "\": " << j[k].dump() << ",\n";
    out << "  \"couplings\": [\n";
    const auto& c = j["couplings"];
    for (std::size_t i = 0; i < c.size(); ++i)
      out << "    " << c[i].dump() << (i + 1 < c.size() ? ",\n" : "\n");
    out << "  ],\n";
    std::string prov = j["provenance"].dump(2);
    std::string indented;
    for (char ch : prov) {
      indented += ch;
      if (ch == '\n') indented += "  ";
    }
    out << "  \"provenance\": " << indented << "\n}\n";
  });
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
  return model_from_json(j, path);
}

}  // namespace spinfer
