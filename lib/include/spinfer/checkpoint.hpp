// Checkpoint hooks: how a long computation (fits, refinement, bootstrap) saves its state and
// continues from a saved one. The library only produces and consumes the state (plain JSON);
// where it is stored, and when a saved state may be reused, is the caller's business (the CLI
// keeps it in a checkpoint file with a fingerprint of the inputs and settings; cli/checkpoint.hpp).
//
// Contract for every computation that takes these hooks:
//   * consistent points are the boundaries between iterations / replicates; a state describes
//     everything finished before that point and nothing after it;
//   * `save` is called at most every `every_seconds` (0: at every consistent point) and once more
//     just before Interrupted is thrown (also when the stop came from inside a step, e.g. from a
//     refit's own progress callback: the step in progress is dropped and redone on resume). An
//     exception thrown by `save` propagates in place of the computation's result;
//   * the state's layout is the computation's own, documented in its header (refine.hpp,
//     significance.hpp, pseudo_likelihood.hpp); numbers are stored so that a dump/parse round
//     trip is exact;
//   * `resume` must come from the same computation on the same inputs and settings (the caller's
//     responsibility). The computation checks what it can (kind, sizes, seed) and throws
//     InputError naming the mismatch.
// Thread counts never matter: states saved with one thread count resume with any other.
#pragma once

#include <functional>
#include <optional>

#include <nlohmann/json.hpp>

namespace spinfer {

/// Hooks through which a long computation saves its state and continues from a saved one.
struct CheckpointHooks {
  /// Receives the complete state at a consistent point (between iterations / replicates):
  /// at most every `every_seconds`, and once more just before Interrupted is thrown.
  /// Empty: no checkpoints.
  std::function<void(const nlohmann::json& state)> save;
  double every_seconds = 600;
  /// A state saved earlier by the same computation on the same inputs and settings; the
  /// computation continues from it to the same result as an uninterrupted run.
  std::optional<nlohmann::json> resume;
};

}  // namespace spinfer
