// Requests to stop a checkpointed run early: SIGTERM, SIGINT and SIGUSR1 while a
// stop_requests object is alive. The handler only sets a flag; the ranks look at it
// between block steps and agree to stop together.
#pragma once

#include <csignal>
#include <iterator>

namespace gridlu::workflows {

class stop_requests {
public:
  stop_requests();   // installs the handlers; a signal from now on is a request
  ~stop_requests();  // restores the previous handlers
  stop_requests(const stop_requests&) = delete;
  stop_requests& operator=(const stop_requests&) = delete;

  // True once a stop was asked for on this rank.
  static bool pending();

private:
  static constexpr int signals_[] = {SIGTERM, SIGUSR1, SIGINT};
  struct sigaction saved_[std::size(signals_)]{};
};

}  // namespace gridlu::workflows
