// Private: what refine_moments carries from one iteration to the next, and its checkpoint state
// (layout documented in refine.hpp, "Checkpoints").
#pragma once

#include <cstdint>
#include <deque>
#include <limits>
#include <string>
#include <utility>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "spinfer/refine.hpp"

namespace spinfer::detail {

/// Parameters in the spin convention.
struct RefineParams {
  Eigen::VectorXd h;
  Eigen::MatrixXd J;
};

/// The loop state at the top of an iteration (before its evaluation).
struct RefineLoop {
  bool started = false;                 ///< false: nothing done yet (a fresh run)
  std::int64_t iteration = 1;           ///< the next iteration to evaluate (1-based)
  RefineParams p;
  // ---- sampled expectations only ----
  std::int64_t samples = 0;             ///< samples of the next iteration
  double rate = 1;                      ///< current learning rate
  Eigen::VectorXd vh;                   ///< heavy-ball velocity of the fields
  Eigen::MatrixXd vJ;                   ///< and of the couplings
  std::deque<std::pair<double, RefineParams>> window;  ///< recent (error^2, parameters)
  double best = std::numeric_limits<double>::infinity();
  std::int64_t since_best = 0;
  std::vector<std::uint8_t> chains;     ///< persistent chain states, chains x units
  // ---- both ----
  // ---- read from a saved state only ----
  std::vector<RefineIteration> trajectory;  ///< the iterations before `iteration`
  std::vector<std::string> warnings;
  double elapsed_seconds = 0;
};

/// The checkpoint state of `loop` after `elapsed_seconds` (trajectory and warnings taken from the
/// arguments: the first loop.iteration - 1 entries of `trajectory`).
nlohmann::json refine_state(const RefineLoop& loop, bool sampled, std::int64_t units, const RefineOptions& o,
                            double elapsed_seconds, const std::vector<RefineIteration>& trajectory,
                            const std::vector<std::string>& warnings);

/// Reads a saved state; InputError (naming the member) when it does not fit these settings.
RefineLoop read_refine_state(const nlohmann::json& state, bool sampled, std::int64_t units,
                             const RefineOptions& o);

}  // namespace spinfer::detail
