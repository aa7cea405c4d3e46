#include "workflows/stop.hpp"

#include <atomic>
#include <iterator>

namespace gridlu::workflows {
namespace {

std::atomic<int> requested{0};
static_assert(std::atomic<int>::is_always_lock_free, "set from a signal handler");
extern "C" void request_stop(int) { requested.store(1, std::memory_order_relaxed); }

}  // namespace

stop_requests::stop_requests() {
  requested = 0;
  struct sigaction sa {};
  sa.sa_handler = request_stop;
  sigemptyset(&sa.sa_mask);
  for (std::size_t k = 0; k < std::size(signals_); ++k) sigaction(signals_[k], &sa, &saved_[k]);
}

stop_requests::~stop_requests() {
  for (std::size_t k = 0; k < std::size(signals_); ++k) sigaction(signals_[k], &saved_[k], nullptr);
}

bool stop_requests::pending() { return requested.load(std::memory_order_relaxed) != 0; }

}  // namespace gridlu::workflows
