// Stop signals: SIGTERM (schedulers, `kill`), SIGINT (Ctrl-C) and SIGUSR1 (what some cluster
// schedulers send ahead of a time limit) end a long computation at its next consistent point
// instead of killing the process mid-write.
//
// The handlers only record the signal number in a lock-free atomic (nothing else is safe in a
// handler); the progress callbacks the subcommands pass to the library (progress_logger,
// stop_when_signalled) return false once a signal is pending, the library throws Interrupted
// (saving a checkpoint where it has hooks), and main() exits with 128 + the signal number. Each
// handler is installed with SA_RESETHAND: a second signal of the same kind gets the default
// action and terminates at once. Signals that were ignored when the command started (nohup,
// background jobs of a non-interactive shell) stay ignored.
//
// The handlers are installed when a subcommand creates its first polling callback, so commands
// that never poll (stats, bin, convert) keep the default actions and stop at once.
#pragma once

#include <string>

#include "spinfer/progress.hpp"

namespace spinfer::cli {

/// Installs the handlers for SIGTERM, SIGINT and SIGUSR1 (once; later calls do nothing).
void catch_stop_signals();

/// The first stop signal received since the handlers were installed; 0 if none.
int stop_signal();

/// "SIGTERM", "SIGINT", "SIGUSR1", else "signal N".
std::string signal_name(int signal);

/// A progress callback that only stops the computation once a stop signal is pending (for inner
/// computations whose progress is not logged, e.g. every refit of `significance`). Installs the
/// handlers.
spinfer::ProgressCallback stop_when_signalled();

}  // namespace spinfer::cli
