// Ending a run early without losing it. Two sources: a signal while a stop_requests
// object is alive (SIGTERM, SIGINT, SIGUSR1; the handler only sets a flag, the ranks look
// at it between block steps and agree to stop together), and the loss of the launcher
// that started this rank, noticed by a launcher_watch.
#pragma once

#include <csignal>
#include <iterator>
#include <string>
#include <thread>

namespace gridlu::workflows {

class stop_requests {
public:
  stop_requests();   // installs the handlers; a signal from now on is a request
  ~stop_requests();  // restores the previous handlers
  stop_requests(const stop_requests&) = delete;
  stop_requests& operator=(const stop_requests&) = delete;

  // True once a stop was asked for on this rank, by a signal or by a launcher_watch.
  static bool pending();
  // What asked: "SIGTERM", "SIGINT", "SIGUSR1" or "launcher gone"; empty if nothing did.
  static std::string reason();

private:
  static constexpr int signals_[] = {SIGTERM, SIGUSR1, SIGINT};
  struct sigaction saved_[std::size(signals_)]{};
};

// A rank outlives its launcher when the launcher is killed outright (mpiexec leaves each
// rank in a process group of its own, and nothing ends the ranks then): it would run on,
// unseen, holding the checkpoint directory's lock against the user's next run. While this
// object is alive, a rank started by a launcher (Open MPI's mpiexec, a PMI launcher, a
// Slurm step) checks a few times a second that its parent is still the process that
// started it. Once it is not, a stop is pending (a checkpointed run stops at its next
// block step, with a checkpoint) and, if the process is still there a few seconds later
// (a solve without checkpoints, a rank waiting for one that has gone), it ends with
// `exit_code`. A process started without a launcher is never watched: its parent may
// leave on purpose (nohup).
class launcher_watch {
public:
  explicit launcher_watch(int exit_code);
  // std::jthread asks the watch to end and joins it.

private:
  std::jthread thread_;
};

}  // namespace gridlu::workflows
