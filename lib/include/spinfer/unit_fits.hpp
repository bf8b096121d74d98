// Per-variable fits of a subset of units, and their assembly into one model.
//
// The per-variable objectives (pseudo-likelihood, interaction screening) are N independent
// problems, one per unit (Besag 1975; Vuffray et al. 2016). spinfer solves each with its own
// optimiser state (lockstep L-BFGS), so the coefficients of unit i come out bit-identical
// whether i is fitted alone, in a shard with others, or with all units. That makes the
// problems shardable across job-array tasks or MPI ranks: each part fits some units
// (fit_model_units), and assemble_unit_fits puts the columns together and averages the two
// estimates of each pair exactly as an unsharded fit does (J_ij = (Theta_ij + Theta_ji) / 2).
// Everything here is in the spin convention.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "spinfer/fit.hpp"
#include "spinfer/model.hpp"

namespace spinfer {

/// The fitted columns of some units (spin convention, before the pair averaging).
struct UnitFits {
  std::int64_t total_units = 0;             ///< N of the data
  std::vector<std::string> names;           ///< all N unit names
  std::vector<std::int64_t> units;          ///< fitted units, ascending (K of them)
  Eigen::MatrixXd coefficients;             ///< N x K: column k = couplings into units[k]
  Eigen::VectorXd fields;                   ///< K: h of units[k]
  std::vector<std::int64_t> iterations;     ///< K: accepted optimiser steps per unit
  std::vector<double> objective;            ///< K: final per-unit objective
  std::vector<std::int64_t> unconverged;    ///< fitted units that missed the tolerance
  Provenance provenance;                    ///< method, penalties used, samples, extra, ...
};

/// Units of shard `index` (0-based) of `count`: the contiguous range
/// [index * N / count, (index + 1) * N / count). Throws InputError for bad numbers.
std::vector<std::int64_t> shard_units(std::int64_t N, std::int64_t index, std::int64_t count);

/// Fits the per-variable problems of `units` (ascending, distinct) with the method in options
/// ("pseudo-likelihood" or "screening", per-variable). Automatic penalties are chosen exactly as
/// in fit_model (on all units, so every part chooses the same value). Throws InputError for
/// other methods, the symmetric objective, or bad unit lists.
UnitFits fit_model_units(const SpinMatrix& data, const FitOptions& options,
                         const std::vector<std::int64_t>& units);

/// Puts parts together: every unit must be fitted by exactly one part, and the parts must agree
/// on the data shape, names, method and penalties (InputError naming the difference). The model
/// is returned in `convention`; for a single part with all units it equals fit_model's model.
IsingModel assemble_unit_fits(const std::vector<UnitFits>& parts, Convention convention);

/// Exact JSON form (doubles as base64 of their bytes) and back (InputError naming `source`).
nlohmann::json unit_fits_to_json(const UnitFits& fits);
UnitFits unit_fits_from_json(const nlohmann::json& json, const std::string& source);

}  // namespace spinfer
