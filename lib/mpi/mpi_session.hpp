// The `spinfer` command's MPI session (built only with -DSPINFER_MPI=ON; never part of the core
// library or the Python extension, so this header does not expose MPI itself).
//
// MPI is started only when an MPI launcher started the process: one of OMPI_COMM_WORLD_SIZE
// (Open MPI), PMI_SIZE / PMI_RANK (MPICH, Intel MPI, Slurm PMI-2), PMIX_RANK (PMIx, srun
// --mpi=pmix) or MV2_COMM_WORLD_SIZE (MVAPICH) is set. SPINFER_USE_MPI=1 forces MPI on (a launcher
// not in that list), SPINFER_USE_MPI=0 keeps it off. Without MPI, or with a single rank, team()
// is a SoloTeam and the command behaves exactly like the build without MPI.
#pragma once

#include <memory>
#include <string>

#include "spinfer/team.hpp"

namespace spinfer::cli {

class MpiSession {
 public:
  /// Calls MPI_Init_thread (MPI_THREAD_FUNNELED: only the main thread calls MPI) when a
  /// launcher is detected, as described above.
  MpiSession(int* argc, char*** argv);
  /// MPI_Finalize when MPI was started.
  ~MpiSession();
  MpiSession(const MpiSession&) = delete;
  MpiSession& operator=(const MpiSession&) = delete;

  /// All ranks of MPI_COMM_WORLD when there are more than one, else a SoloTeam.
  const Team& team() const { return *team_; }

  /// Ends every rank of the job with exit status `code` (MPI_Abort); returns `code` when MPI was
  /// not started (the caller then exits with it as usual).
  int abort(int code) const;

  /// For a rank that rank 0 has stopped: waits (in a barrier rank 0 never enters) until rank 0's
  /// MPI_Abort ends the job with rank 0's exit code; aborts with 1 should the barrier return.
  int await_root_abort() const;

  /// The MPI library's own version line (callable without starting MPI).
  static std::string library_version();

 private:
  bool started_ = false;
  std::unique_ptr<Team> team_;
};

}  // namespace spinfer::cli
