// Internal: pieces shared by the log-partition estimators (partition*.cpp).
#pragma once

#include <string>
#include <vector>

#include "spinfer/partition.hpp"

namespace spinfer::detail {

/// Reference fields g of the independent model E_0 = -g.v (partition.hpp); warnings when the
/// mean-field iteration fails (the model's fields are used then).
Eigen::VectorXd reference_fields(const IsingModel& model, const std::string& base,
                                 std::vector<std::string>* warnings);

/// ln Z_0 = sum_i ln(e^{g_i lo} + e^{g_i hi}).
double independent_log_partition(const Eigen::VectorXd& g, Convention convention);

/// Fills the AIS fields of `out` (value, error, weights, ...); base fields already set.
void run_ais(const IsingModel& model, const PartitionOptions& options, LogPartitionEstimate& out);

/// Fills the thermodynamic-integration fields of `out`; base fields already set.
void run_thermodynamic(const IsingModel& model, const PartitionOptions& options,
                       LogPartitionEstimate& out);

}  // namespace spinfer::detail
