// IsingModel <-> dict, convention conversion, exact enumeration, closed-form fits, model files.
// A model crosses the boundary as a dict: {"convention": str, "fields": (N,) float64,
// "couplings": (N, N) float64, "names": list[str] | None, "provenance": dict}; the Python class
// spinfer.IsingModel wraps it. Moments cross as the dict spinfer.moments() returns.
#include <cmath>

#include "bind.hpp"
#include "spinfer/closed_form.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/exact.hpp"
#include "spinfer/model_io.hpp"

namespace spinfer::py_bind {
namespace {

// nlohmann::json <-> Python objects (provenance "extra" holds arbitrary JSON).
}  // namespace

py::object json_to_py(const nlohmann::json& j) {
  switch (j.type()) {
    case nlohmann::json::value_t::null: return py::none();
    case nlohmann::json::value_t::boolean: return py::bool_(j.get<bool>());
    case nlohmann::json::value_t::number_integer: return py::int_(j.get<std::int64_t>());
    case nlohmann::json::value_t::number_unsigned: return py::int_(j.get<std::uint64_t>());
    case nlohmann::json::value_t::number_float: return py::float_(j.get<double>());
    case nlohmann::json::value_t::string: return py::str(j.get<std::string>());
    case nlohmann::json::value_t::array: {
      py::list l;
      for (const auto& v : j) l.append(json_to_py(v));
      return std::move(l);
    }
    case nlohmann::json::value_t::object: {
      py::dict d;
      for (auto it = j.begin(); it != j.end(); ++it) d[py::str(it.key())] = json_to_py(it.value());
      return std::move(d);
    }
    default: return py::none();
  }
}

namespace {

nlohmann::json py_to_json(const py::handle& o, const std::string& where_text) {
  if (o.is_none()) return nullptr;
  if (py::isinstance<py::bool_>(o)) return o.cast<bool>();
  if (py::isinstance<py::int_>(o)) {
    try {
      return o.cast<std::int64_t>();
    } catch (const py::cast_error&) {
      return o.cast<std::uint64_t>();
    }
  }
  if (py::isinstance<py::float_>(o)) return o.cast<double>();
  if (py::isinstance<py::str>(o)) return o.cast<std::string>();
  if (py::isinstance<py::dict>(o)) {
    nlohmann::json j = nlohmann::json::object();
    for (auto item : o.cast<py::dict>()) {
      if (!py::isinstance<py::str>(item.first))
        throw InputError(where_text + ": dictionary keys must be strings");
      const std::string k = item.first.cast<std::string>();
      j[k] = py_to_json(item.second, where_text + "." + k);
    }
    return j;
  }
  if (py::isinstance<py::list>(o) || py::isinstance<py::tuple>(o)) {
    nlohmann::json j = nlohmann::json::array();
    for (auto v : o) j.push_back(py_to_json(v, where_text));
    return j;
  }
  // numpy scalars and other numbers
  if (py::hasattr(o, "item")) return py_to_json(o.attr("item")(), where_text);
  throw InputError(where_text + ": cannot store a value of type " +
                   std::string(py::str(py::type::handle_of(o).attr("__name__"))) + " (JSON types only)");
}

Eigen::VectorXd vector_arg(const py::handle& o, const std::string& name) {
  auto a = py::array_t<double, py::array::c_style | py::array::forcecast>::ensure(o);
  if (!a || a.ndim() != 1) throw InputError(name + ": expected a 1-D array of numbers");
  return Eigen::Map<const Eigen::VectorXd>(a.data(), a.shape(0));
}

Eigen::MatrixXd matrix_arg(const py::handle& o, const std::string& name) {
  auto a = py::array_t<double, py::array::c_style | py::array::forcecast>::ensure(o);
  if (!a || a.ndim() != 2) throw InputError(name + ": expected a 2-D array of numbers");
  using RowMajor = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
  return Eigen::Map<const RowMajor>(a.data(), a.shape(0), a.shape(1));
}

Moments moments_from_dict(const py::dict& d) {
  for (const char* k : {"convention", "mean", "connected"})
    if (!d.contains(k)) throw InputError(std::string("moments: missing '") + k + "'");
  Moments m;
  m.convention = parse_convention(d["convention"].cast<std::string>());
  m.mean = vector_arg(d["mean"], "moments mean");
  m.connected = matrix_arg(d["connected"], "moments connected");
  if (d.contains("second") && !d["second"].is_none()) m.second = matrix_arg(d["second"], "moments second");
  if (d.contains("samples")) m.samples = d["samples"].cast<std::int64_t>();
  if (d.contains("total_weight")) m.total_weight = d["total_weight"].cast<double>();
  return m;
}

}  // namespace

py::dict model_to_dict(const IsingModel& m) {
  py::dict d;
  d["convention"] = to_string(m.convention);
  d["fields"] = m.fields;
  d["couplings"] = m.couplings;
  d["names"] = m.names.empty() ? py::object(py::none()) : py::object(py::cast(m.names));
  d["provenance"] = json_to_py(provenance_to_json(m.provenance));
  return d;
}

IsingModel model_from_dict(const py::dict& d) {
  for (const char* k : {"convention", "fields", "couplings"})
    if (!d.contains(k)) throw InputError(std::string("model: missing '") + k + "'");
  IsingModel m;
  m.convention = parse_convention(d["convention"].cast<std::string>());
  m.fields = vector_arg(d["fields"], "model fields");
  m.couplings = matrix_arg(d["couplings"], "model couplings");
  if (d.contains("names") && !d["names"].is_none())
    m.names = d["names"].cast<std::vector<std::string>>();
  if (d.contains("provenance") && !d["provenance"].is_none())
    m.provenance = provenance_from_json(py_to_json(d["provenance"], "provenance"), "model");
  validate_model(m, "model");
  return m;
}

void bind_model(py::module_& m) {
  m.def("validate_model", [](const py::dict& d) { return model_to_dict(model_from_dict(d)); },
        py::arg("model"), "Checks a model dict and returns it normalised (float64 arrays).");

  m.def("convert_model", [](const py::dict& d, const std::string& to) {
        return model_to_dict(convert_model(model_from_dict(d), parse_convention(to)));
      }, py::arg("model"), py::arg("convention"));

  m.def("log_partition_shift", [](const py::dict& d, const std::string& to) {
        return log_partition_shift(model_from_dict(d), parse_convention(to));
      }, py::arg("model"), py::arg("convention"));

  m.def("exact_statistics", [](const py::dict& d, double temperature, const std::string& conv,
                               int threads) {
        const IsingModel model = model_from_dict(d);
        ExactOptions o;
        o.temperature = temperature;
        o.convention = parse_convention(conv);
        o.threads = threads;
        ExactStatistics s;
        {
          py::gil_scoped_release release;
          s = exact_statistics(model, o);
        }
        py::dict out;
        out["temperature"] = s.temperature;
        out["model_convention"] = to_string(s.model_convention);
        out["convention"] = to_string(s.moments.convention);
        out["log_partition"] = s.log_partition;
        out["mean"] = s.moments.mean;
        out["second"] = s.moments.second;
        out["connected"] = s.moments.connected;
        out["active_count"] = s.active_count;
        out["entropy"] = s.entropy;
        out["mean_energy"] = s.mean_energy;
        out["specific_heat"] = s.specific_heat;
        return out;
      }, py::arg("model"), py::arg("temperature") = 1.0, py::arg("convention") = "binary",
      py::arg("threads") = 1);

  m.def("exact_log_partition", [](const py::dict& d, double temperature, int threads) {
        const IsingModel model = model_from_dict(d);
        py::gil_scoped_release release;
        return exact_log_partition(model, temperature, threads);
      }, py::arg("model"), py::arg("temperature") = 1.0, py::arg("threads") = 1);

  m.def("exact_state_probabilities", [](const py::dict& d, double temperature, int threads) {
        const IsingModel model = model_from_dict(d);
        py::gil_scoped_release release;
        return exact_state_probabilities(model, temperature, threads);
      }, py::arg("model"), py::arg("temperature") = 1.0, py::arg("threads") = 1);

  m.def("exact_log_likelihood", [](const py::dict& d, const SpinMatrix& data, int threads) {
        const IsingModel model = model_from_dict(d);
        py::gil_scoped_release release;
        return exact_log_likelihood(model, data, threads);
      }, py::arg("model"), py::arg("data"), py::arg("threads") = 1);

  m.def("closed_form_methods", &closed_form_methods);

  m.def("fit_closed_form", [](const py::dict& moments, const std::string& method,
                              double shrinkage, double max_condition, bool fallback) {
        const Moments mo = moments_from_dict(moments);
        ClosedFormOptions o;
        o.shrinkage = shrinkage;
        o.max_condition = max_condition;
        o.mean_field_fallback = fallback;
        IsingModel model;
        {
          py::gil_scoped_release release;
          model = fit_closed_form(mo, method, o);
        }
        return model_to_dict(model);
      }, py::arg("moments"), py::arg("method"), py::arg("shrinkage") = 0.0,
      py::arg("max_condition") = 1e12, py::arg("mean_field_fallback") = false);

  m.def("save_model", [](const std::string& path, const py::dict& d, const std::string& couplings_file) {
        const IsingModel model = model_from_dict(d);
        const CouplingsStorage storage = parse_couplings_storage(couplings_file, "couplings_file");
        py::gil_scoped_release release;
        save_model(path, model, storage);
      }, py::arg("path"), py::arg("model"), py::arg("couplings_file") = "auto");

  m.def("couplings_sibling_path", &couplings_sibling_path, py::arg("model_path"));
  m.attr("inline_couplings_max_units") = py::int_(kInlineCouplingsMaxUnits);

  m.def("load_model", [](const std::string& path) {
        IsingModel model;
        {
          py::gil_scoped_release release;
          model = load_model(path);
        }
        return model_to_dict(model);
      }, py::arg("path"));
}

}  // namespace spinfer::py_bind
