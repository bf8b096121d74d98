#include "spinfer/threads.hpp"

#include <sched.h>

#include <cstdlib>
#include <string>

#include <omp.h>

extern "C" void openblas_set_num_threads(int);

namespace spinfer {
namespace {

int positive_env(const char* name) {
  const char* v = std::getenv(name);
  if (!v || !*v) return 0;
  char* end = nullptr;
  long n = std::strtol(v, &end, 10);
  return (end && *end == '\0' && n > 0 && n < 1 << 16) ? int(n) : 0;
}

}  // namespace

int resolve_threads(int requested) {
  if (requested > 0) return requested;
  if (int n = positive_env("SLURM_CPUS_PER_TASK")) return n;
  if (int n = positive_env("OMP_NUM_THREADS")) return n;
  cpu_set_t set;
  if (sched_getaffinity(0, sizeof(set), &set) == 0) {
    int n = CPU_COUNT(&set);
    if (n > 0) return n;
  }
  return 1;
}

void set_blas_threads(int n) { openblas_set_num_threads(n > 0 ? n : 1); }

void parallel_chunks(std::int64_t n, int threads,
                     const std::function<void(std::int64_t, std::int64_t, int)>& fn) {
  threads = resolve_threads(threads);
  if (n <= 0) return;
  if (threads > n) threads = int(n);
  if (threads <= 1) {
    fn(0, n, 0);
    return;
  }
  std::exception_ptr error;
  std::mutex error_mutex;
#pragma omp parallel num_threads(threads)
  {
    const int t = omp_get_thread_num();
    const int nt = omp_get_num_threads();
    const std::int64_t begin = n * t / nt;
    const std::int64_t end = n * (t + 1) / nt;
    try {
      fn(begin, end, t);
    } catch (...) {
      std::lock_guard<std::mutex> lock(error_mutex);
      if (!error) error = std::current_exception();
    }
  }
  if (error) std::rethrow_exception(error);
}

void parallel_for(std::int64_t n, int threads, const std::function<void(std::int64_t)>& fn) {
  threads = resolve_threads(threads);
  if (n <= 0) return;
  if (threads > n) threads = int(n);
  if (threads <= 1) {
    for (std::int64_t i = 0; i < n; ++i) fn(i);
    return;
  }
  std::exception_ptr error;
  std::mutex error_mutex;
#pragma omp parallel for num_threads(threads) schedule(dynamic, 1)
  for (std::int64_t i = 0; i < n; ++i) {
    {
      std::lock_guard<std::mutex> lock(error_mutex);
      if (error) continue;
    }
    try {
      fn(i);
    } catch (...) {
      std::lock_guard<std::mutex> lock(error_mutex);
      if (!error) error = std::current_exception();
    }
  }
  if (error) std::rethrow_exception(error);
}

}  // namespace spinfer
