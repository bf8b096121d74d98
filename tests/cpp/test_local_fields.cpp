// The pseudo-likelihood engine's data passes (lib/src/local_fields.hpp) against their definitions
// computed directly with Eigen in this test: the weighted second moments E_w[z z^T] with
// z = (2x - 1, 1) (the whitening's M), for every data representation; the sparse kernel builds
// them from each row's active pairs and must agree with the dense product.
#include <doctest/doctest.h>

#include <random>
#include <vector>

#include "../../lib/src/local_fields.hpp"
#include "spinfer/spin_matrix.hpp"

using namespace spinfer;

TEST_CASE("local fields: second moments equal the direct weighted product for every representation") {
  const std::int64_t T = 20000, N = 37;
  std::mt19937_64 rng(8);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::vector<std::uint8_t> x(std::size_t(T * N));
  for (std::int64_t t = 0; t < T; ++t) {
    const bool burst = u(rng) < 0.1;  // shared drive: correlated units, repeated patterns
    for (std::int64_t i = 0; i < N; ++i) x[std::size_t(t * N + i)] = u(rng) < (burst ? 0.3 : 0.02);
  }
  for (bool weighted : {false, true}) {
    SpinMatrix data(x, T, N, Convention::binary);
    std::vector<double> w(std::size_t(T), 1.0);
    if (weighted) {
      for (auto& v : w) v = 0.25 + u(rng);
      data.set_weights(w);
    }
    Eigen::MatrixXd Z(T, N + 1);
    for (std::int64_t t = 0; t < T; ++t) {
      for (std::int64_t i = 0; i < N; ++i) Z(t, i) = 2.0 * x[std::size_t(t * N + i)] - 1.0;
      Z(t, N) = 1.0;
    }
    const Eigen::VectorXd wv = Eigen::Map<const Eigen::VectorXd>(w.data(), T);
    const Eigen::MatrixXd expected = Z.transpose() * wv.asDiagonal() * Z / wv.sum();
    for (const char* rep : {"dense", "sparse", "patterns-dense", "patterns-sparse"}) {
      INFO(rep << (weighted ? " weighted" : ""));
      const detail::PreparedData prepared(data, rep, 1);
      const detail::LocalFields all(prepared, 2);
      const Eigen::MatrixXd M = all.second_moments();
      CHECK((M - expected).cwiseAbs().maxCoeff() < 1e-13);
      CHECK(M == M.transpose());
    }
  }
}
