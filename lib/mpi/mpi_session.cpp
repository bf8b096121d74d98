#include "mpi_session.hpp"

#include <mpi.h>

#include <algorithm>
#include <cstdlib>
#include <cstring>
#include <stdexcept>
#include <vector>

namespace spinfer::cli {
namespace {

// MPI counts are ints: large buffers travel in pieces of at most this many elements.
constexpr std::size_t kPieceBytes = std::size_t(1) << 30;
constexpr std::size_t kPieceDoubles = kPieceBytes / sizeof(double);
constexpr int kGatherTag = 7;

bool launched_by_mpi() {
  if (const char* force = std::getenv("SPINFER_USE_MPI"); force && *force)
    return std::strcmp(force, "0") != 0;
  for (const char* name :
       {"OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMI_RANK", "PMIX_RANK", "MV2_COMM_WORLD_SIZE"})
    if (std::getenv(name)) return true;
  return false;
}

void check(int rc, const char* what) {
  // MPI_COMM_WORLD's default handler (MPI_ERRORS_ARE_FATAL) already ends the job on failure;
  // this covers implementations configured to return errors instead.
  if (rc != MPI_SUCCESS) throw std::runtime_error(std::string("MPI: ") + what + " failed");
}

/// The ranks of MPI_COMM_WORLD. Sums are reduced on rank 0 and then broadcast, so every rank
/// holds the same bits (team.hpp); gathers are point-to-point into rank 0, in rank order.
class MpiTeam final : public Team {
 public:
  MpiTeam() {
    check(MPI_Comm_rank(MPI_COMM_WORLD, &rank_), "MPI_Comm_rank");
    check(MPI_Comm_size(MPI_COMM_WORLD, &size_), "MPI_Comm_size");
  }
  int rank() const override { return rank_; }
  int size() const override { return size_; }

  void sum(double* values, std::size_t count) const override {
    for (std::size_t at = 0; at < count; at += kPieceDoubles) {
      const int n = int(std::min(kPieceDoubles, count - at));
      double* x = values + at;
      check(MPI_Reduce(rank_ == 0 ? MPI_IN_PLACE : x, x, n, MPI_DOUBLE, MPI_SUM, 0, MPI_COMM_WORLD),
            "MPI_Reduce");
      check(MPI_Bcast(x, n, MPI_DOUBLE, 0, MPI_COMM_WORLD), "MPI_Bcast");
    }
  }

  std::vector<std::uint8_t> gather_bytes(const std::uint8_t* data, std::size_t bytes,
                                         bool all) const override {
    std::uint64_t mine = bytes;
    std::vector<std::uint64_t> lengths(std::size_t(size_), 0);
    check(MPI_Gather(&mine, 1, MPI_UINT64_T, lengths.data(), 1, MPI_UINT64_T, 0, MPI_COMM_WORLD),
          "MPI_Gather");
    std::vector<std::uint8_t> out;
    if (rank_ == 0) {
      std::uint64_t total = 0;
      for (auto n : lengths) total += n;
      out.resize(std::size_t(total));
      if (bytes) std::memcpy(out.data(), data, bytes);
      std::size_t at = bytes;
      for (int r = 1; r < size_; ++r) {
        transfer(out.data() + at, std::size_t(lengths[std::size_t(r)]), r, false);
        at += std::size_t(lengths[std::size_t(r)]);
      }
    } else {
      transfer(const_cast<std::uint8_t*>(data), bytes, 0, true);
    }
    if (all) broadcast_bytes(out);
    return out;
  }

  void broadcast_bytes(std::vector<std::uint8_t>& bytes) const override {
    std::uint64_t n = bytes.size();
    check(MPI_Bcast(&n, 1, MPI_UINT64_T, 0, MPI_COMM_WORLD), "MPI_Bcast");
    bytes.resize(std::size_t(n));
    for (std::size_t at = 0; at < bytes.size(); at += kPieceBytes) {
      const int k = int(std::min(kPieceBytes, bytes.size() - at));
      check(MPI_Bcast(bytes.data() + at, k, MPI_BYTE, 0, MPI_COMM_WORLD), "MPI_Bcast");
    }
  }

 private:
  // Sends to or receives from `peer` in pieces (messages between two ranks never overtake each
  // other, so the pieces arrive in order).
  static void transfer(std::uint8_t* p, std::size_t bytes, int peer, bool send) {
    for (std::size_t at = 0; at < bytes; at += kPieceBytes) {
      const int k = int(std::min(kPieceBytes, bytes - at));
      if (send)
        check(MPI_Send(p + at, k, MPI_BYTE, peer, kGatherTag, MPI_COMM_WORLD), "MPI_Send");
      else
        check(MPI_Recv(p + at, k, MPI_BYTE, peer, kGatherTag, MPI_COMM_WORLD, MPI_STATUS_IGNORE),
              "MPI_Recv");
    }
  }

  int rank_ = 0, size_ = 1;
};

}  // namespace

MpiSession::MpiSession(int* argc, char*** argv) {
  if (launched_by_mpi()) {
    int provided = 0;
    check(MPI_Init_thread(argc, argv, MPI_THREAD_FUNNELED, &provided), "MPI_Init_thread");
    started_ = true;
    int size = 1;
    check(MPI_Comm_size(MPI_COMM_WORLD, &size), "MPI_Comm_size");
    if (size > 1) team_ = std::make_unique<MpiTeam>();
  }
  if (!team_) team_ = std::make_unique<SoloTeam>();
}

MpiSession::~MpiSession() {
  if (started_) MPI_Finalize();
}

int MpiSession::abort(int code) const {
  if (started_ && team_->size() > 1) MPI_Abort(MPI_COMM_WORLD, code);
  return code;
}

int MpiSession::await_root_abort() const {
  if (started_ && team_->size() > 1) MPI_Barrier(MPI_COMM_WORLD);
  return abort(1);
}

std::string MpiSession::library_version() {
  char text[MPI_MAX_LIBRARY_VERSION_STRING] = {};
  int length = 0;
  MPI_Get_library_version(text, &length);
  std::string s(text, std::size_t(std::max(0, length)));
  const auto eol = s.find_first_of(",\n");
  return eol == std::string::npos ? s : s.substr(0, eol);
}

}  // namespace spinfer::cli
