// Test helper: random models with fields and couplings drawn uniformly from
// [-h_scale, h_scale] and [-j_scale, j_scale] by Rng(seed, 0) (fields first, then the upper
// triangle row by row), shared by the sampler tests.
#pragma once

#include <cstdint>

#include <Eigen/Dense>

#include "spinfer/model.hpp"
#include "spinfer/rng.hpp"

namespace spinfer::testing {

inline IsingModel uniform_random_model(int N, Convention c, std::uint64_t seed, double h_scale, double j_scale) {
  Rng rng(seed, 0);
  IsingModel m;
  m.convention = c;
  m.fields = Eigen::VectorXd(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) m.fields(i) = h_scale * (2 * rng.uniform() - 1);
  for (int i = 0; i < N; ++i)
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = j_scale * (2 * rng.uniform() - 1);
  return m;
}

}  // namespace spinfer::testing
