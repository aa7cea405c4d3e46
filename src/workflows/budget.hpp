// The time-budget rule of a checkpointed run (--stop-after): after each block step, go
// on only if the next steps and a checkpoint still fit. Pure arithmetic, tested alone.
#pragma once

namespace gridlu::workflows::budget {

// Until a checkpoint write has been timed, the disk is assumed to write (and read back)
// this fast: a slow network file system, so the first estimate errs on the safe side.
inline constexpr double assumed_bytes_per_second = 100e6;
// A checkpoint write may take this much longer than the last one timed.
inline constexpr double save_margin = 1.25;
// Seconds kept free whatever the estimates say: process exit, the launcher's own.
inline constexpr double fixed_margin_seconds = 0.5;
// After the last column the solve, the check (which reads A again) and the write of X
// remain; they take about this many times the time it took to read A and B.
inline constexpr double tail_per_read = 1.5;

// First estimate of a checkpoint's write: the working matrix written and read back.
constexpr double first_save_estimate(double matrix_bytes) {
  return 2.0 * matrix_bytes / assumed_bytes_per_second + fixed_margin_seconds;
}

struct step_view {
  double elapsed = 0;       // seconds since the run started (start-up and reading included)
  double budget = 0;        // seconds allowed in all; 0: no budget
  double next_flops = 0;    // flops of the steps that settle the look-ahead and one more
  double rate = 0;          // flops per second of this run's factorization so far
  double save_seconds = 0;  // the last checkpoint write (or first_save_estimate)
  bool finished = false;    // every column is eliminated
  double read_seconds = 0;  // reading A and B in this run
};

// True when going on would leave no time to write a checkpoint inside the budget.
constexpr bool must_stop(const step_view& v) {
  if (v.budget <= 0) return false;
  const double steps = v.rate > 0 ? v.next_flops / v.rate : 0.0;
  const double tail = v.finished ? tail_per_read * v.read_seconds + fixed_margin_seconds : 0.0;
  return v.elapsed + steps + tail + save_margin * v.save_seconds + fixed_margin_seconds > v.budget;
}

}  // namespace gridlu::workflows::budget
