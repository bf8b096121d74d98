// Model versus data check (check.hpp). Returns the documented CHECK.json layout as Python objects.
#include "bind.hpp"
#include "spinfer/check.hpp"

namespace spinfer::py_bind {

void bind_check(py::module_& m) {
  m.def("check_model", [](const py::dict& model_dict, const SpinMatrix& data, std::int64_t triplets,
                          std::int64_t replicates, std::int64_t block_length, std::int64_t exact_limit,
                          std::int64_t model_samples, const std::string& method, std::int64_t chains,
                          std::uint64_t seed, int threads, const py::object& progress) {
        const IsingModel model = model_from_dict(model_dict);
        CheckOptions o;
        o.triplets = triplets;
        o.bootstrap_replicates = replicates;
        o.block_length = block_length;
        o.exact_limit = exact_limit;
        o.model_samples = model_samples;
        o.sampler.method = method;
        o.sampler.chains = chains;
        o.seed = seed;
        o.threads = threads;
        o.progress = progress_callback(progress);
        nlohmann::json j;
        {
          py::gil_scoped_release release;
          const CheckResult r = check_model(model, data, o);
          j = check_to_json(r, data.names());
        }
        return json_to_py(j);
      }, py::arg("model"), py::arg("data"), py::arg("triplets") = 200, py::arg("replicates") = 100,
      py::arg("block_length") = 0, py::arg("exact_limit") = 20, py::arg("model_samples") = 0,
      py::arg("method") = "gibbs", py::arg("chains") = 4, py::arg("seed") = 0, py::arg("threads") = 1,
      py::arg("progress") = py::none());

  m.def("poisson_binomial", &poisson_binomial, py::arg("p"),
        "P(K) of independent units active with probabilities p.");
}

}  // namespace spinfer::py_bind
