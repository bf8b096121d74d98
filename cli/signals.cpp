#include "signals.hpp"

#include <atomic>
#include <cerrno>
#include <csignal>
#include <cstring>
#include <stdexcept>

#include <signal.h>

namespace spinfer::cli {
namespace {

// Only lock-free atomics may be touched from a signal handler.
std::atomic<int> received{0};
static_assert(std::atomic<int>::is_always_lock_free, "a signal handler needs a lock-free atomic");

void record(int signal) {
  int none = 0;
  received.compare_exchange_strong(none, signal);  // keep the first one
}

}  // namespace

void catch_stop_signals() {
  static bool installed = false;
  if (installed) return;
  installed = true;
  for (int s : {SIGTERM, SIGINT, SIGUSR1}) {
    struct sigaction old {};
    if (::sigaction(s, nullptr, &old) == 0 && old.sa_handler == SIG_IGN) continue;
    struct sigaction sa {};
    sa.sa_handler = record;
    sigemptyset(&sa.sa_mask);
    // SA_RESETHAND: the second signal of a kind takes the default action (terminate).
    sa.sa_flags = SA_RESTART | SA_RESETHAND;
    if (::sigaction(s, &sa, nullptr) != 0)
      throw std::runtime_error("cannot install a handler for " + signal_name(s) + ": " + std::strerror(errno));
  }
}

int stop_signal() { return received.load(); }

std::string signal_name(int signal) {
  switch (signal) {
    case SIGTERM: return "SIGTERM";
    case SIGINT: return "SIGINT";
    case SIGUSR1: return "SIGUSR1";
    default: return "signal " + std::to_string(signal);
  }
}

spinfer::ProgressCallback stop_when_signalled() {
  catch_stop_signals();
  return [](const spinfer::Progress&) { return stop_signal() == 0; };
}

}  // namespace spinfer::cli
