// Files: matrices (.npy/.npz/.csv/.tsv/.txt) and spike tables, and spike binning.
#include <optional>

#include "bind.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/io.hpp"
#include "spinfer/spikes.hpp"

namespace spinfer::py_bind {
namespace {

py::array_t<std::uint8_t> bits_to_numpy(const SpinMatrix& s) {
  py::array_t<std::uint8_t> out({s.rows(), s.cols()});
  std::copy(s.data(), s.data() + s.rows() * s.cols(), out.mutable_data());
  return out;
}

py::tuple matrix_tuple(const SpinMatrix& s) {
  return py::make_tuple(bits_to_numpy(s), s.names(), to_string(s.convention()));
}

std::optional<double> optional_double(const py::object& v) {
  if (v.is_none()) return std::nullopt;
  return v.cast<double>();
}

}  // namespace

void bind_io(py::module_& m) {
  m.def("read_matrix", [](const std::string& path, const py::object& convention,
                          const std::string& member) {
        ReadOptions o;
        if (!convention.is_none()) o.convention = parse_convention(convention.cast<std::string>());
        o.member = member;
        SpinMatrix s;
        {
          py::gil_scoped_release release;
          s = read_matrix(path, o);
        }
        return matrix_tuple(s);
      }, py::arg("path"), py::arg("convention") = py::none(), py::arg("member") = "",
      "(uint8 active bits, names, convention) of a matrix file.");

  m.def("write_matrix", [](const std::string& path, const py::array& array,
                           const py::object& names, const py::object& convention) {
        SpinMatrix s = matrix_from_numpy(array, py::none(), true, "X");
        if (!names.is_none()) s.set_names(names.cast<std::vector<std::string>>());
        if (!convention.is_none()) s.set_convention(parse_convention(convention.cast<std::string>()));
        py::gil_scoped_release release;
        write_matrix(path, s);
      }, py::arg("path"), py::arg("array"), py::arg("names") = py::none(),
      py::arg("convention") = py::none());

  m.def("read_spike_table", [](const std::string& path) {
        SpikeTable t;
        {
          py::gil_scoped_release release;
          t = read_spike_table(path);
        }
        py::array_t<std::int32_t> unit(py::ssize_t(t.unit.size()));
        py::array_t<double> time(py::ssize_t(t.time.size()));
        std::copy(t.unit.begin(), t.unit.end(), unit.mutable_data());
        std::copy(t.time.begin(), t.time.end(), time.mutable_data());
        return py::make_tuple(t.unit_ids, unit, time);
      }, py::arg("path"), "(distinct unit ids, per-spike unit index, per-spike time in s).");

  m.def("bin_spikes", [](std::vector<std::string> ids,
                         const py::array_t<std::int32_t, py::array::c_style | py::array::forcecast>& unit_a,
                         const py::array_t<double, py::array::c_style | py::array::forcecast>& time_a,
                         double bin_width, const py::object& start,
                         const py::object& stop, std::vector<std::pair<double, double>> gaps,
                         double min_rate_hz, const std::string& source) {
        if (unit_a.ndim() != 1 || time_a.ndim() != 1)
          throw InputError("spikes: unit indices and times must be 1-D arrays");
        std::vector<std::int32_t> unit(unit_a.data(), unit_a.data() + unit_a.size());
        std::vector<double> time(time_a.data(), time_a.data() + time_a.size());
        BinningOptions o;
        o.bin_width = bin_width;
        o.start = optional_double(start);
        o.stop = optional_double(stop);
        o.gaps = std::move(gaps);
        o.min_rate_hz = min_rate_hz;
        BinnedSpikes b;
        {
          py::gil_scoped_release release;
          b = bin_spikes(make_spike_table(std::move(ids), std::move(unit), std::move(time), source), o);
        }
        return py::make_tuple(bits_to_numpy(b.matrix), b.matrix.names(), b.report.to_json().dump());
      }, py::arg("unit_ids"), py::arg("unit"), py::arg("time"), py::arg("bin_width"),
      py::arg("start") = py::none(), py::arg("stop") = py::none(),
      py::arg("gaps") = std::vector<std::pair<double, double>>{}, py::arg("min_rate_hz") = 0.0,
      py::arg("source") = "spikes");
}

}  // namespace spinfer::py_bind
