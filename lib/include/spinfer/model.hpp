// IsingModel: fields h (N) and couplings J (N x N, symmetric, zero diagonal) in a stated
// convention, with column names and provenance.
//
//   E(v) = - sum_i h_i v_i - sum_{i<j} J_ij v_i v_j,    P(v) = exp(-E(v)) / Z,
// with v in {0,1} (binary) or {-1,+1} (spin). Parameters are dimensionless (beta = 1 absorbed).
// Exact conversion (a change of variables s = 2x - 1):
//   spin from binary:  J_ij = W_ij / 4,  h_i = a_i / 2 + sum_{j!=i} W_ij / 4
//   binary from spin:  W_ij = 4 J_ij,    a_i = 2 h_i - 2 sum_{j!=i} J_ij
//   log Z_binary = log Z_spin + sum_i a_i / 2 + sum_{i<j} W_ij / 4
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "spinfer/convention.hpp"

namespace spinfer {

/// Where a model came from. Every estimator fills every field it knows.
struct Provenance {
  std::string method;           ///< e.g. "pseudo-likelihood", "tap"
  double l1 = 0;                ///< L1 penalty (per-sample scale, see the estimator)
  double l2 = 0;                ///< L2 penalty
  std::int64_t iterations = 0;
  bool converged = true;
  double objective = 0;         ///< final objective value (method-specific; documented there)
  std::int64_t samples = 0;     ///< rows of the data it was fitted to
  std::int64_t units = 0;
  std::uint64_t seed = 0;
  std::string version;          ///< library version that produced it
  nlohmann::json extra = nlohmann::json::object();  ///< method-specific details
};

struct IsingModel {
  Convention convention = Convention::spin;
  Eigen::VectorXd fields;      ///< N
  Eigen::MatrixXd couplings;   ///< N x N, symmetric, zero diagonal
  std::vector<std::string> names;
  Provenance provenance;

  std::int64_t size() const { return fields.size(); }
};

/// Checks shapes, symmetry (to 1e-12 relative), zero diagonal and finiteness; throws InputError.
void validate_model(const IsingModel& model, const std::string& source = "model");

/// The same distribution in the other convention (exact).
IsingModel convert_model(const IsingModel& model, Convention to);

/// Constant c with log Z(to) = log Z(from) + c for convert_model(model, to).
double log_partition_shift(const IsingModel& model, Convention to);

/// Energy of one state given as active bits (length N).
double energy(const IsingModel& model, const std::uint8_t* active);

}  // namespace spinfer
