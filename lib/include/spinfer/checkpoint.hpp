// Checkpoint hooks: how a long computation (fits, refinement, bootstrap) saves its state and
// continues from a saved one. The library only produces and consumes the state (plain JSON);
// where it is stored, and when a saved state may be reused, is the caller's business (the CLI
// keeps it in a checkpoint file with a fingerprint of the inputs and settings).
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
