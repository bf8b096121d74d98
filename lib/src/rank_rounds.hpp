// Private: per-variable fits whose units are spread over the ranks of a team (MPI).
//
// Each rank fits its own contiguous share of the units (Team::share) on all samples with its own
// lock-step minimiser, so no numbers cross ranks during the fit and every unit follows exactly
// the iterates of a one-process fit. The ranks still meet once per round (two tiny collectives)
// so that rank 0, the only rank that logs, receives stop signals and writes checkpoints, can
//   - report the objective summed over all units,
//   - stop every rank at the same round boundary, and
//   - gather the optimiser states of all units into one checkpoint.
// A rank whose units have all converged keeps meeting the others (with nothing to compute) until
// every rank is done, so every rank makes the same collective calls in the same order (team.hpp).
//
// The gathered state has the layout of a one-process fit of all units (LockstepMinimiser::to_json
// with the problems in unit order; rounds = the most rounds of any rank, evaluations summed), so a
// checkpoint written by a job of K ranks resumes with any number of ranks or in one process.
#pragma once

#include <cstdint>
#include <functional>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "spinfer/team.hpp"

namespace spinfer::detail {

/// What the ranks decided together after a round.
struct RankTurn {
  bool anyone_running = false;  ///< some rank still has running units
  double objective = 0;         ///< sum over all ranks of their units' objective
  bool stop = false;            ///< rank 0 asked every rank to stop (gather states, then stop)
  bool save = false;            ///< rank 0 asked for a checkpoint (gather states)
};

/// Rank 0's decision after a round, given the all-units objective: {stop, save}.
using RootDecision = std::function<std::pair<bool, bool>(double objective)>;

/// One meeting of all ranks: `running` says whether this rank still has running units,
/// `objective` is the sum over its units. `decide` is called on rank 0 only.
RankTurn meet_after_round(const Team& team, bool running, double objective, const RootDecision& decide);

/// Every rank's JSON value in rank order: on every rank when `all`, else on rank 0 only (the
/// other ranks receive an empty vector). Values travel as one line of JSON text each.
std::vector<nlohmann::json> gather_json(const Team& team, const nlohmann::json& mine, bool all);

/// The optimiser states of all ranks (each a LockstepMinimiser::to_json of its share, in rank
/// order) as one state of all units, on rank 0; the other ranks receive null.
nlohmann::json gather_unit_states(const Team& team, const nlohmann::json& mine);

/// The part of an all-units state that belongs to units [begin, end) (as given to
/// LockstepMinimiser::from_json). InputError unless the state holds `total` problems.
nlohmann::json slice_unit_states(const nlohmann::json& all, std::int64_t begin, std::int64_t end,
                                 std::int64_t total);

}  // namespace spinfer::detail
