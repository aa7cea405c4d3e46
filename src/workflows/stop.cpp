#include "workflows/stop.hpp"

#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdlib>
#include <cstring>
#include <mutex>

namespace gridlu::workflows {
namespace {

std::atomic<int> signalled{0};  // the signal that asked to stop, 0 if none
std::atomic<bool> launcher_gone{false};
static_assert(std::atomic<int>::is_always_lock_free, "set from a signal handler");
extern "C" void request_stop(int sig) { signalled.store(sig, std::memory_order_relaxed); }

// Set by the launchers for the processes they start: Open MPI's mpiexec, PMI-1/2
// launchers (MPICH's, srun --mpi=pmi2) and every Slurm step. Not PMIX_RANK: Open MPI's
// MPI_Init sets it in a process started without a launcher.
constexpr const char* launcher_variables[] = {"OMPI_COMM_WORLD_SIZE", "PMI_RANK", "SLURM_STEP_ID"};

// A lost launcher is noticed within the period; the grace then lets a checkpointed run
// reach its next step and save (a few steps and one write at the sizes a workstation
// runs; a larger save cut short leaves the previous checkpoint, which stays valid).
constexpr auto period = std::chrono::milliseconds(200);
constexpr auto grace = std::chrono::seconds(3);

void watch(std::stop_token stop, pid_t launcher, int exit_code) {
  std::mutex m;
  std::condition_variable_any wake;
  std::unique_lock lock(m);
  // False once the watch is asked to end: the run ended by itself.
  const auto sleep = [&](auto duration) {
    wake.wait_for(lock, stop, duration, [] { return false; });
    return !stop.stop_requested();
  };
  while (getppid() == launcher)
    if (!sleep(period)) return;
  // Nobody reads the rank's output any more; a write to it must fail, not end the rank
  // before its checkpoint is safe.
  std::signal(SIGPIPE, SIG_IGN);
  launcher_gone.store(true, std::memory_order_relaxed);
  if (sleep(grace)) std::_Exit(exit_code);
}

}  // namespace

stop_requests::stop_requests() {
  signalled = 0;
  struct sigaction sa {};
  sa.sa_handler = request_stop;
  sigemptyset(&sa.sa_mask);
  for (std::size_t k = 0; k < std::size(signals_); ++k) sigaction(signals_[k], &sa, &saved_[k]);
}

stop_requests::~stop_requests() {
  for (std::size_t k = 0; k < std::size(signals_); ++k) sigaction(signals_[k], &saved_[k], nullptr);
}

bool stop_requests::pending() {
  return signalled.load(std::memory_order_relaxed) != 0 ||
         launcher_gone.load(std::memory_order_relaxed);
}

std::string stop_requests::reason() {
  if (launcher_gone.load(std::memory_order_relaxed)) return "launcher gone";
  const int sig = signalled.load(std::memory_order_relaxed);
  return sig == 0 ? std::string() : std::string("SIG") + sigabbrev_np(sig);
}

launcher_watch::launcher_watch(int exit_code) {
  if (std::ranges::any_of(launcher_variables, [](const char* v) { return std::getenv(v); }))
    thread_ = std::jthread(watch, getppid(), exit_code);
}

}  // namespace gridlu::workflows
