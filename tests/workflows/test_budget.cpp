// The time-budget rule of checkpointed runs, alone. The rule, as budget.hpp states it:
//
//   with a budget B > 0, stop when
//     elapsed + next_flops / rate            (0 when the rate is not known: rate <= 0)
//             + [finished] (tail_per_read * read_seconds + fixed_margin_seconds)
//             + save_margin * save_seconds + fixed_margin_seconds   >  B
//   and never without a budget (B <= 0).
//
// Expected values are built from the named constants, never typed in, so a change of a
// constant moves the expectations with it. The inputs are small dyadic numbers, so that
// every sum and product below is exact in binary whatever the order of evaluation, and
// "exactly at the boundary" is the same number here as in the rule.
#include <gtest/gtest.h>

#include <cmath>
#include <limits>

#include "workflows/budget.hpp"

namespace {

namespace budget = gridlu::workflows::budget;
using budget::step_view;

// The exactness argument above needs constants with few binary digits: multiples of
// 1/64 (1.25, 0.5, 1.5 are). A constant like 1.1 would make the boundary tests depend
// on rounding; they would then need a tolerance instead.
constexpr bool is_multiple_of_1_64(double x) {
  return static_cast<double>(static_cast<long long>(x * 64)) == x * 64;
}
static_assert(is_multiple_of_1_64(budget::save_margin));
static_assert(is_multiple_of_1_64(budget::fixed_margin_seconds));
static_assert(is_multiple_of_1_64(budget::tail_per_read));

// Both functions are usable in constant expressions.
static_assert(budget::first_save_estimate(0) == budget::fixed_margin_seconds);
static_assert(!budget::must_stop(step_view{}));
static_assert(budget::must_stop(step_view{.elapsed = 2, .budget = 1}));

// A run in progress, not finished: 8 s used, 2^33 flops to go at 2^31 flops/s (4 s), a
// last checkpoint write of 2 s, 3 s spent reading (which matters only once finished).
constexpr step_view running{.elapsed = 8,
                            .budget = 0,
                            .next_flops = 0x1p33,
                            .rate = 0x1p31,
                            .save_seconds = 2,
                            .finished = false,
                            .read_seconds = 3};

// The least budget with which v goes on, by the rule stated at the top.
double least_budget(const step_view& v) {
  const double steps = v.rate > 0 ? v.next_flops / v.rate : 0.0;
  const double tail =
      v.finished ? budget::tail_per_read * v.read_seconds + budget::fixed_margin_seconds : 0.0;
  return v.elapsed + steps + tail + budget::save_margin * v.save_seconds +
         budget::fixed_margin_seconds;
}

step_view with_budget(step_view v, double b) {
  v.budget = b;
  return v;
}

TEST(Budget, NoBudgetNeverStops) {
  for (const double b : {0.0, -1.0, -std::numeric_limits<double>::infinity()}) {
    step_view v = running;
    v.budget = b;
    v.elapsed = 1e9;  // far past any budget
    v.finished = true;
    v.read_seconds = 1e9;
    EXPECT_FALSE(budget::must_stop(v)) << "budget " << b;
  }
}

TEST(Budget, GoesOnExactlyAtTheBoundaryAndStopsJustPastIt) {
  // 8 + 4 + 1.25 * 2 + 0.5 with today's constants: each part of the rule is nonzero here.
  const double need = least_budget(running);
  EXPECT_FALSE(budget::must_stop(with_budget(running, need)));
  EXPECT_TRUE(budget::must_stop(with_budget(running, std::nextafter(need, 0.0))));
  EXPECT_FALSE(budget::must_stop(with_budget(running, need + 1)));
  EXPECT_TRUE(budget::must_stop(with_budget(running, need - 1)));
}

// Solving, checking and writing X come only after the last column: until then the read
// time plays no part; once finished it adds tail_per_read times itself plus the fixed
// margin once more.
TEST(Budget, TheTailCountsOnlyWhenFinished) {
  step_view unfinished = running;
  unfinished.read_seconds = 64;
  step_view no_read = running;
  no_read.read_seconds = 0;
  const double before = least_budget(no_read);
  EXPECT_FALSE(budget::must_stop(with_budget(unfinished, before)));
  EXPECT_TRUE(budget::must_stop(with_budget(unfinished, std::nextafter(before, 0.0))));

  step_view finished = unfinished;
  finished.finished = true;
  const double after =
      before + budget::tail_per_read * finished.read_seconds + budget::fixed_margin_seconds;
  // The budget that was enough before the last column is not enough after it.
  EXPECT_TRUE(budget::must_stop(with_budget(finished, before)));
  EXPECT_FALSE(budget::must_stop(with_budget(finished, after)));
  EXPECT_TRUE(budget::must_stop(with_budget(finished, std::nextafter(after, 0.0))));
}

// Before a rate has been measured (rate 0, or nonsense below it) the next steps are
// counted as taking no time: however many flops remain, the boundary is that of none.
TEST(Budget, AnUnknownRateCountsTheNextStepsAsFree) {
  step_view none_left = running;
  none_left.next_flops = 0;
  const double need = least_budget(none_left);
  for (const double rate : {0.0, -1.0}) {
    step_view v = running;
    v.rate = rate;
    v.next_flops = 0x1p60;
    EXPECT_FALSE(budget::must_stop(with_budget(v, need))) << "rate " << rate;
    EXPECT_TRUE(budget::must_stop(with_budget(v, std::nextafter(need, 0.0)))) << "rate " << rate;
  }
  // With a rate the same flops are not free.
  EXPECT_TRUE(budget::must_stop(with_budget(running, need)));
}

// The margins: a checkpoint write is allowed save_margin times the last one timed, and
// fixed_margin_seconds stay free even when nothing else is left to do.
TEST(Budget, TheMarginsAreApplied) {
  step_view nothing{};
  EXPECT_FALSE(budget::must_stop(with_budget(nothing, budget::fixed_margin_seconds)));
  EXPECT_TRUE(
      budget::must_stop(with_budget(nothing, std::nextafter(budget::fixed_margin_seconds, 0.0))));

  step_view saving = nothing;
  saving.save_seconds = 8;
  const double need = budget::save_margin * 8 + budget::fixed_margin_seconds;
  EXPECT_FALSE(budget::must_stop(with_budget(saving, need)));
  EXPECT_TRUE(budget::must_stop(with_budget(saving, std::nextafter(need, 0.0))));
  // The margin is more than the save itself: the save's bare time is not enough.
  static_assert(budget::save_margin > 1);
  EXPECT_TRUE(budget::must_stop(with_budget(saving, 8 + budget::fixed_margin_seconds)));
}

// More time used, more work or a slower save never turn a stop into going on; a larger
// budget or a faster rate never turn going on into a stop.
TEST(Budget, TheRuleIsMonotone) {
  for (const double elapsed : {0.0, 3.0, 9.5})
    for (const double flops : {0.0, 0x1p32, 0x1p34})
      for (const double save : {0.0, 1.0, 4.0})
        for (const bool finished : {false, true})
          for (const double b : {1.0, 10.0, 14.0, 20.0}) {
            const step_view v{.elapsed = elapsed,
                              .budget = b,
                              .next_flops = flops,
                              .rate = 0x1p31,
                              .save_seconds = save,
                              .finished = finished,
                              .read_seconds = 2};
            const bool stop = budget::must_stop(v);
            EXPECT_EQ(stop, least_budget(v) > b);
            step_view more = v;
            more.elapsed += 1;
            if (stop) {
              EXPECT_TRUE(budget::must_stop(more));
            }
            more = v;
            more.next_flops += 0x1p31;
            if (stop) {
              EXPECT_TRUE(budget::must_stop(more));
            }
            more = v;
            more.save_seconds += 1;
            if (stop) {
              EXPECT_TRUE(budget::must_stop(more));
            }
            more = v;
            more.budget += 1;
            if (!stop) {
              EXPECT_FALSE(budget::must_stop(more));
            }
            more = v;
            more.rate *= 2;
            if (!stop) {
              EXPECT_FALSE(budget::must_stop(more));
            }
          }
}

// The first estimate of a checkpoint write: the working matrix written once and read
// back once at assumed_bytes_per_second, plus the fixed margin.
TEST(Budget, FirstSaveEstimateWritesAndReadsBackAtTheAssumedRate) {
  EXPECT_EQ(budget::first_save_estimate(0), budget::fixed_margin_seconds);
  const double second = budget::assumed_bytes_per_second;  // one second's worth of bytes
  EXPECT_DOUBLE_EQ(budget::first_save_estimate(second), 2 + budget::fixed_margin_seconds);
  EXPECT_DOUBLE_EQ(budget::first_save_estimate(5 * second), 10 + budget::fixed_margin_seconds);
  // Linear in the size: twice the bytes, twice the time above the margin.
  const double bytes = 8.0 * 20000 * 20000;
  EXPECT_DOUBLE_EQ(budget::first_save_estimate(2 * bytes) - budget::fixed_margin_seconds,
                   2 * (budget::first_save_estimate(bytes) - budget::fixed_margin_seconds));
}

}  // namespace
