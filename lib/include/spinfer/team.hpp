// A team: the processes of one job (MPI ranks) that share one task, and the few collective
// operations the estimators and the sampler need. The library only sees this interface; the MPI
// implementation lives outside the core library (lib/mpi/, built with -DSPINFER_MPI=ON and linked
// into the `spinfer` command only), so the Python extension never depends on MPI.
//
// Rules every user keeps (as MPI itself requires):
//   - every rank makes the same collective calls in the same order, with the same `count` for
//     sum(); gathered buffers may differ in length between ranks;
//   - rank 0 is the root: gathers without `all` deliver there, broadcasts start there, and only
//     it logs and writes outputs;
//   - a rank that fails does not return early from a collective sequence: the caller ends the
//     whole job (the CLI calls MPI_Abort with the documented exit code).
// Work is split with share(): contiguous blocks, so rank 0 holds the first part, rank 1 the next.
#pragma once

#include <cstddef>
#include <cstdint>
#include <utility>
#include <vector>

namespace spinfer {

class Team {
 public:
  virtual ~Team() = default;

  virtual int rank() const = 0;  ///< 0 .. size() - 1
  virtual int size() const = 0;  ///< >= 1
  bool root() const { return rank() == 0; }

  /// Elementwise sum over ranks of values[0 .. count), in place. Every rank receives the same
  /// bits: the sum is formed once on rank 0 and then broadcast (an all-reduce gives no such
  /// promise), so ranks feeding the sums to an optimiser take identical decisions. The order of
  /// the additions is the MPI library's: sums of arbitrary doubles agree with a single process up
  /// to rounding; callers that need the single-process bits add values whose sums are exact in
  /// any order (the level sums of order-free sums, as the pseudo-likelihood engine does).
  virtual void sum(double* values, std::size_t count) const = 0;

  /// Every rank's bytes concatenated in rank order: on every rank when `all`, else on rank 0
  /// only (the other ranks receive an empty vector). Lengths may differ between ranks.
  virtual std::vector<std::uint8_t> gather_bytes(const std::uint8_t* data, std::size_t bytes,
                                                 bool all) const = 0;

  /// Replaces `bytes` on every rank by rank 0's (resized to rank 0's length).
  virtual void broadcast_bytes(std::vector<std::uint8_t>& bytes) const = 0;

  // Typed conveniences over the three operations above.
  double sum_value(double value) const;  ///< sum of one number over ranks
  std::vector<double> all_gather(const std::vector<double>& local) const;
  std::vector<double> gather(const std::vector<double>& local) const;  ///< on rank 0
  std::vector<std::uint8_t> all_gather(const std::vector<std::uint8_t>& local) const;
  std::vector<std::uint8_t> gather(const std::vector<std::uint8_t>& local) const;  ///< on rank 0
  void broadcast(std::vector<double>& values) const;

  /// Rank r's contiguous share [begin, end) of n items: [floor(n r / K), floor(n (r + 1) / K))
  /// with K = size(); the shares cover [0, n) in rank order and differ in length by at most 1.
  static std::pair<std::int64_t, std::int64_t> share(std::int64_t n, int rank, int size);
  std::pair<std::int64_t, std::int64_t> my_share(std::int64_t n) const {
    return share(n, rank(), size());
  }
};

/// One process alone (rank 0 of 1): sums leave their input unchanged, gathers return it. Used
/// when the library is called without a team, and by the command when it is built without MPI
/// or not started by an MPI launcher with more than one rank.
class SoloTeam final : public Team {
 public:
  int rank() const override { return 0; }
  int size() const override { return 1; }
  void sum(double*, std::size_t) const override {}
  std::vector<std::uint8_t> gather_bytes(const std::uint8_t* data, std::size_t bytes,
                                         bool) const override {
    return std::vector<std::uint8_t>(data, data + bytes);
  }
  void broadcast_bytes(std::vector<std::uint8_t>&) const override {}
};

/// True when `team` is set and has more than one rank (the cases where work is divided).
inline bool shared_work(const Team* team) { return team && team->size() > 1; }

}  // namespace spinfer
