// Test helper: a Team whose ranks are threads of this process, so the code that divides work over
// MPI ranks is exercised by the plain build. Collectives meet at a barrier; sums are added in rank
// order by every rank (hence bit-identical on all ranks, as Team::sum promises).
#pragma once

#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <functional>
#include <mutex>
#include <thread>
#include <vector>

#include "../../lib/src/local_fields.hpp"  // SingleThreadedBlas
#include "spinfer/team.hpp"

namespace spinfer::testing {

class ThreadTeamHub {
 public:
  explicit ThreadTeamHub(int size) : size_(size), slots_(std::size_t(size)) {}
  int size() const { return size_; }

  /// Every rank deposits bytes, then every rank may read all deposits until the next call.
  const std::vector<std::vector<std::uint8_t>>& exchange(int rank, std::vector<std::uint8_t> mine) {
    barrier();  // the previous exchange's readers are done
    slots_[std::size_t(rank)] = std::move(mine);
    barrier();
    return slots_;
  }

 private:
  void barrier() {
    std::unique_lock<std::mutex> lock(m_);
    const std::uint64_t gen = generation_;
    if (++arrived_ == size_) {
      arrived_ = 0;
      ++generation_;
      cv_.notify_all();
    } else if (!cv_.wait_for(lock, std::chrono::seconds(60), [&] { return generation_ != gen; })) {
      // Ranks that stopped making the same collective calls would wait forever (under MPI the
      // job would hang the same way): fail loudly instead.
      std::fprintf(stderr, "thread team: ranks stopped meeting at collectives (60 s)\n");
      std::abort();
    }
  }

  int size_;
  std::vector<std::vector<std::uint8_t>> slots_;
  std::mutex m_;
  std::condition_variable cv_;
  int arrived_ = 0;
  std::uint64_t generation_ = 0;
};

class ThreadTeam final : public Team {
 public:
  ThreadTeam(ThreadTeamHub& hub, int rank) : hub_(hub), rank_(rank) {}
  int rank() const override { return rank_; }
  int size() const override { return hub_.size(); }

  void sum(double* values, std::size_t count) const override {
    std::vector<std::uint8_t> mine(count * sizeof(double));
    if (count) std::memcpy(mine.data(), values, mine.size());
    const auto& all = hub_.exchange(rank_, std::move(mine));
    for (std::size_t k = 0; k < count; ++k) {
      double s = 0;
      for (const auto& slot : all) {
        double x;
        std::memcpy(&x, slot.data() + k * sizeof(double), sizeof x);
        s += x;
      }
      values[k] = s;
    }
  }

  std::vector<std::uint8_t> gather_bytes(const std::uint8_t* data, std::size_t bytes,
                                         bool all) const override {
    const auto& slots = hub_.exchange(rank_, std::vector<std::uint8_t>(data, data + bytes));
    std::vector<std::uint8_t> out;
    if (all || rank_ == 0)
      for (const auto& s : slots) out.insert(out.end(), s.begin(), s.end());
    return out;
  }

  void broadcast_bytes(std::vector<std::uint8_t>& bytes) const override {
    const auto& slots = hub_.exchange(rank_, rank_ == 0 ? bytes : std::vector<std::uint8_t>());
    bytes = slots[0];
  }

 private:
  ThreadTeamHub& hub_;
  int rank_;
};

/// Runs body(team) on `size` threads, one rank each, and returns each rank's result.
template <typename Result>
std::vector<Result> run_on_threads(int size, const std::function<Result(const Team&)>& body) {
  // OpenBLAS at one thread for the whole run: each rank's own set-and-restore of the BLAS thread
  // count would otherwise race with the others' and let concurrent GEMMs run threaded (unsafe).
  detail::SingleThreadedBlas single;
  ThreadTeamHub hub(size);
  std::vector<Result> results(static_cast<std::size_t>(size));
  std::vector<std::thread> threads;
  for (int r = 0; r < size; ++r)
    threads.emplace_back([&, r] {
      ThreadTeam team(hub, r);
      results[std::size_t(r)] = body(team);
    });
  for (auto& t : threads) t.join();
  return results;
}

}  // namespace spinfer::testing
