// Internal: the chain engine shared by sample(), model_statistics() and temperature_scan().
#pragma once

#include <vector>

#include "spinfer/chain_diagnostics.hpp"
#include "spinfer/sampler.hpp"

namespace spinfer::detail {

struct EngineRequest {
  std::vector<double> ladder;       ///< ascending temperatures; one entry without tempering
  std::size_t target_slot = 0;      ///< ladder index whose states and diagnostics are reported
  bool keep_states = true;          ///< fill SampleSet::samples (else an empty matrix)
  bool all_slot_energies = false;   ///< fill slot_energies and tune on the slowest slot
  ChainStates* persistent = nullptr;  ///< start from these states (if not empty); store the final
                                      ///< states of the target slot (single-temperature runs)
  const Team* team = nullptr;       ///< ranks sharing the chains (SamplerOptions::team); not
                                    ///< with persistent or all_slot_energies
  bool lock_step = true;            ///< run chains in lock-step groups where the scan allows
                                    ///< (false: every chain alone; the samples are the same)
  std::int64_t smallest_group = 0;  ///< tests: form groups from this many chains (0: the
                                    ///< engine's choice, Engine::min_group)
};

struct EngineResult {
  SampleSet set;                          ///< target slot
  std::vector<ChainSeries> slot_energies; ///< [slot][chain][kept sample] when requested
};

/// Validates the options (but not the ladder fields, which come through the request).
void check_sampler_options(const SamplerOptions& options);

/// Sorted, de-duplicated ladder with `target` inserted when absent; sets `target_slot`.
std::vector<double> normalise_ladder(std::vector<double> ladder, double target,
                                     std::size_t* target_slot);

EngineResult run_engine(const IsingModel& model, const SamplerOptions& options,
                        const EngineRequest& request);

}  // namespace spinfer::detail
