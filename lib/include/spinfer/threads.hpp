// Thread budget and an exception-safe parallel loop. Every parallel region in spinfer goes
// through parallel_for so an exception thrown by a worker is re-thrown on the calling thread.
#pragma once

#include <cstdint>
#include <exception>
#include <functional>
#include <mutex>

namespace spinfer {

/// Resolve a user's thread request: n > 0 is taken as is; n <= 0 means automatic:
/// SLURM_CPUS_PER_TASK, else OMP_NUM_THREADS, else the size of the CPU affinity mask.
int resolve_threads(int requested);

/// Sets OpenBLAS's own thread count (used by BLAS calls made outside our parallel regions).
void set_blas_threads(int n);

/// Calls fn(begin, end, thread_index) on contiguous, statically assigned chunks of [0, n).
/// The chunking depends only on n and threads, so per-thread partial results are reproducible.
void parallel_chunks(std::int64_t n, int threads,
                     const std::function<void(std::int64_t, std::int64_t, int)>& fn);

/// Calls fn(i) for i in [0, n) with dynamic scheduling (for uneven independent work such as the
/// per-unit problems of pseudo-likelihood).
void parallel_for(std::int64_t n, int threads, const std::function<void(std::int64_t)>& fn);

}  // namespace spinfer
