// SpinMatrix from numpy, unique patterns, sufficient statistics.
#include <optional>

#include "bind.hpp"
#include "spinfer/bootstrap.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/patterns.hpp"
#include "spinfer/stats.hpp"
#include "spinfer/values.hpp"

namespace spinfer::py_bind {
namespace {

std::optional<Convention> optional_convention(const py::object& c) {
  if (c.is_none()) return std::nullopt;
  return parse_convention(c.cast<std::string>());
}

template <typename T>
SpinMatrix convert_typed(const py::array& a, std::optional<Convention> c, const std::string& src) {
  const auto rows = std::int64_t(a.shape(0)), cols = std::int64_t(a.shape(1));
  const auto rs = std::int64_t(a.strides(0)), cs = std::int64_t(a.strides(1));
  if (rs % std::int64_t(sizeof(T)) || cs % std::int64_t(sizeof(T)))
    throw InputError(src + ": unaligned strides; pass a contiguous array");
  const T* p = static_cast<const T*>(a.data());
  py::gil_scoped_release release;
  return values_to_matrix<T>(p, rows, cols, rs / std::int64_t(sizeof(T)),
                             cs / std::int64_t(sizeof(T)), c, src);
}

}  // namespace

SpinMatrix matrix_from_numpy(const py::array& a, const py::object& convention, bool copy,
                             const std::string& src) {
  if (a.ndim() != 2)
    throw InputError(src + ": expected a 2-D array (samples x units), got " +
                     std::to_string(a.ndim()) + " dimensions");
  const auto rows = std::int64_t(a.shape(0)), cols = std::int64_t(a.shape(1));
  if (rows == 0 || cols == 0)
    throw InputError(src + ": empty array (" + std::to_string(rows) + " x " +
                     std::to_string(cols) + ")");
  const std::optional<Convention> stated = optional_convention(convention);
  const char kind = a.dtype().kind();
  const auto itemsize = a.dtype().itemsize();
  const bool c_contiguous = (a.flags() & py::array::c_style) != 0;
  if ((kind == 'b' || (kind == 'u' && itemsize == 1)) && c_contiguous) {
    // Zero-copy view; the numpy array is kept alive by the SpinMatrix. Values are checked.
    auto owner = std::make_shared<py::object>(a);
    std::shared_ptr<const void> keep(owner.get(), [owner](const void*) mutable {
      py::gil_scoped_acquire gil;
      owner.reset();
    });
    const auto* p = static_cast<const std::uint8_t*>(a.data());
    SpinMatrix m;
    {
      py::gil_scoped_release release;
      m = SpinMatrix::view(p, rows, cols, stated.value_or(Convention::binary), keep, false);
    }
    if (stated == Convention::spin) {
      // uint8/bool cannot hold -1, so a spin matrix stored as bytes means 1 = +1, 0 = -1 only if
      // the caller says so explicitly; accept the statement.
    }
    return m;
  }
  if (!copy) {
    throw InputError(src + ": dtype " + std::string(py::str(a.dtype())) +
                     (c_contiguous ? "" : " (not C-contiguous)") +
                     " needs a conversion to the compact 0/1 byte layout; pass copy=True, or "
                     "give a C-contiguous uint8 or bool array to avoid the copy");
  }
  switch (kind) {
    case 'b': return convert_typed<bool>(a, stated, src);
    case 'i':
      switch (itemsize) {
        case 1: return convert_typed<std::int8_t>(a, stated, src);
        case 2: return convert_typed<std::int16_t>(a, stated, src);
        case 4: return convert_typed<std::int32_t>(a, stated, src);
        case 8: return convert_typed<std::int64_t>(a, stated, src);
      }
      break;
    case 'u':
      switch (itemsize) {
        case 1: return convert_typed<std::uint8_t>(a, stated, src);
        case 2: return convert_typed<std::uint16_t>(a, stated, src);
        case 4: return convert_typed<std::uint32_t>(a, stated, src);
        case 8: return convert_typed<std::uint64_t>(a, stated, src);
      }
      break;
    case 'f':
      if (itemsize == 4) return convert_typed<float>(a, stated, src);
      if (itemsize == 8) return convert_typed<double>(a, stated, src);
      break;
  }
  throw InputError(src + ": unsupported dtype " + std::string(py::str(a.dtype())) +
                   "; expected bool, integers or float32/float64 holding 0/1 or -1/+1");
}

namespace {

py::dict moments_to_dict(const Moments& m) {
  py::dict d;
  d["convention"] = to_string(m.convention);
  d["mean"] = m.mean;
  d["second"] = m.second;
  d["connected"] = m.connected;
  d["total_weight"] = m.total_weight;
  d["samples"] = m.samples;
  d["kernel"] = m.kernel_used;
  return d;
}

SpinMatrix with_weights(SpinMatrix m, const py::object& weights) {
  if (!weights.is_none()) {
    auto w = py::array_t<double, py::array::c_style | py::array::forcecast>::ensure(weights);
    if (!w || w.ndim() != 1) throw InputError("weights: expected a 1-D array of numbers");
    m.set_weights(std::vector<double>(w.data(), w.data() + w.size()));
  }
  return m;
}

}  // namespace

void bind_data(py::module_& m) {
  py::class_<SpinMatrix>(m, "SpinMatrix",
                         "T x N binary samples stored as 0/1 bytes (see spin_matrix.hpp).")
      .def_property_readonly("rows", &SpinMatrix::rows)
      .def_property_readonly("cols", &SpinMatrix::cols)
      .def_property_readonly("convention", [](const SpinMatrix& s) { return to_string(s.convention()); })
      .def_property_readonly("names", &SpinMatrix::names)
      .def_property_readonly("owns_data", &SpinMatrix::owns_data)
      .def_property_readonly("weights", &SpinMatrix::weights)
      .def("to_numpy", [](const SpinMatrix& s) {
        py::array_t<std::uint8_t> out({s.rows(), s.cols()});
        std::copy(s.data(), s.data() + s.rows() * s.cols(), out.mutable_data());
        return out;
      }, "A uint8 copy of the active bits.");

  m.def("matrix", [](const py::array& a, const py::object& convention, bool copy,
                     const py::object& weights, const py::object& names) {
        SpinMatrix s = with_weights(matrix_from_numpy(a, convention, copy), weights);
        if (!names.is_none()) s.set_names(names.cast<std::vector<std::string>>());
        return s;
      }, py::arg("array"), py::arg("convention") = py::none(), py::arg("copy") = false,
      py::arg("weights") = py::none(), py::arg("names") = py::none());

  m.def("moments", [](const SpinMatrix& s, const std::string& convention, int threads,
                      const std::string& kernel) {
        StatsOptions o;
        o.threads = threads;
        o.kernel = kernel == "sparse" ? PairKernel::sparse
                   : kernel == "dense" ? PairKernel::dense
                                       : PairKernel::automatic;
        Moments mo;
        {
          py::gil_scoped_release release;
          mo = compute_moments(s, parse_convention(convention), o);
        }
        return moments_to_dict(mo);
      }, py::arg("data"), py::arg("convention") = "binary", py::arg("threads") = 1,
      py::arg("kernel") = "auto");

  m.def("active_count_distribution", [](const SpinMatrix& s, int threads) {
        py::gil_scoped_release release;
        return active_count_distribution(s, threads);
      }, py::arg("data"), py::arg("threads") = 1);

  m.def("connected_triplets", [](const SpinMatrix& s,
                                 const std::vector<std::array<std::int64_t, 3>>& triples,
                                 const std::string& convention, int threads) {
        py::gil_scoped_release release;
        return connected_triplets(s, triples, parse_convention(convention), threads);
      }, py::arg("data"), py::arg("triples"), py::arg("convention") = "binary",
      py::arg("threads") = 1);

  m.def("bootstrap_noise", [](const SpinMatrix& s, const std::string& convention,
                              const std::vector<std::array<std::int64_t, 3>>& triples,
                              std::int64_t replicates, std::int64_t block_length,
                              std::uint64_t seed, int threads) {
        BlockBootstrapOptions o;
        o.replicates = replicates;
        o.block_length = block_length;
        o.seed = seed;
        o.threads = threads;
        DataNoise n;
        {
          py::gil_scoped_release release;
          n = bootstrap_noise(s, parse_convention(convention), triples, o);
        }
        py::dict d;
        d["mean_se"] = n.mean_se;
        d["connected_se"] = n.connected_se;
        d["second_se"] = n.second_se;
        d["count_se"] = n.count_se;
        d["triplet_se"] = n.triplet_se;
        d["block_length"] = n.block_length;
        d["replicates"] = n.replicates;
        return d;
      }, py::arg("data"), py::arg("convention") = "binary",
      py::arg("triples") = std::vector<std::array<std::int64_t, 3>>{}, py::arg("replicates") = 200,
      py::arg("block_length") = 0, py::arg("seed") = 0, py::arg("threads") = 1);

  m.def("default_block_length", &default_block_length, py::arg("data"));

  m.def("unique_patterns", [](const SpinMatrix& s) {
        PatternTable t;
        {
          py::gil_scoped_release release;
          t = unique_patterns(s, true);
        }
        py::array_t<std::uint8_t> pats({t.patterns.rows(), t.patterns.cols()});
        std::copy(t.patterns.data(), t.patterns.data() + t.patterns.rows() * t.patterns.cols(),
                  pats.mutable_data());
        const std::vector<double>& w = t.patterns.weights();
        return py::make_tuple(pats, py::array(py::cast(w)), py::array(py::cast(t.row_to_pattern)));
      }, py::arg("data"), "Distinct rows, their summed weights, and each row's pattern index.");
}

}  // namespace spinfer::py_bind
