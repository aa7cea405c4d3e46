// The performance model and the plan, alone: no MPI, no files. The model's times are
// checked against measured runs in tests/model; here, its arithmetic.
#include <gtest/gtest.h>

#include <cmath>

#include "gridlu/error.hpp"
#include "workflows/calibrate.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::workflows;

// Every kernel at the same rate (GFLOP/s), free messages and interchanges: the model's
// time is then its flop count over the rate.
calibration uniform(double gflops) {
  const rate_table flat(
      {{128, 32, gflops}, {4096, 32, gflops}, {128, 384, gflops}, {4096, 384, gflops}});
  calibration c;
  c.source = "uniform";
  const kernel_rates same{flat, flat, flat, 0.0, 1.0, {}};
  c.types = {{"float64", same}, {"complex128", same}};
  c.point_to_point = c.row_broadcast = c.column_broadcast = {0.0, 1e300};
  c.write_bandwidth = 1e9;
  return c;
}

// The step costs add up to the LU's flops, 2/3 n^3 (real; four times that complex), up
// to the lower-order terms of the blocked algorithm (common practice).
TEST(Model, StepFlopsAddUpToTheFactorization) {
  const calibration c = uniform(1);
  for (const index_t n : {1000, 4096, 5003})
    for (const index_t nb : {64, 224}) {
      const double lu = 2.0 / 3.0 * n * n * n * 1e-9;  // seconds at 1 GFLOP/s
      EXPECT_NEAR(predict(c, {n, "float64", {1, 1}, nb, 0}).seconds / lu, 1.0, 0.02)
          << n << " " << nb;
      EXPECT_NEAR(predict(c, {n, "complex128", {1, 1}, nb, 0}).seconds / (4 * lu), 1.0, 0.02);
    }
}

TEST(Model, MoreRanksLessTimeAndEfficiencyBelowOne) {
  const calibration c = builtin_calibration();
  const double one = predict(c, {20000, "float64", {1, 1}, 224, 1}).seconds;
  const auto four = predict(c, {20000, "float64", {2, 2}, 224, 1});
  EXPECT_LT(four.seconds, one / 2);
  EXPECT_GT(four.seconds, one / 4);  // no superlinear speed-up from the model
  EXPECT_GT(four.efficiency, 0.0);
  EXPECT_LE(four.efficiency, 1.0);
  const auto& p = four.phases;
  EXPECT_NEAR(p.panel + p.interchange + p.broadcast + p.trsm + p.gemm + p.wait, four.seconds,
              1e-9 * four.seconds);
}

// Efficiency is against every rank at its best GEMM rate alone, which the update inside a
// factorization cannot beat, whatever share of it a noisy calibration measured.
TEST(Model, EfficiencyStaysBelowOneWithANoisyShare) {
  calibration c = builtin_calibration();
  for (auto& [type, r] : c.types) r.gemm_in_factorization = 1.2;
  for (const grid_shape g : {grid_shape{1, 1}, grid_shape{8, 1}, grid_shape{2, 4}})
    EXPECT_LE(predict(c, {1000000, "float64", g, 320, 1}).efficiency, 1.0);
}

TEST(Model, RefusesOrdersBeyondItsLimit) {
  const calibration c = builtin_calibration();
  EXPECT_THROW(predict(c, {model_order_limit + 1, "float32", {4, 4}, 384, 1}), gridlu::error);
  EXPECT_THROW(predict(c, {0, "float32", {4, 4}, 384, 1}), gridlu::error);
}

TEST(Model, LookaheadHidesPanelsOnlyWithSeveralProcessColumns) {
  const calibration c = builtin_calibration();
  const auto time = [&](grid_shape g, int depth) {
    return predict(c, {8000, "float64", g, 224, depth}).seconds;
  };
  EXPECT_LT(time({1, 4}, 1), time({1, 4}, 0));
  EXPECT_DOUBLE_EQ(time({4, 1}, 1), time({4, 1}, 0));
}

// The process column's factors scale the costs several process rows add, and nothing on
// a single process row.
TEST(Model, ColumnFactorsScaleOnlyWhatSeveralProcessRowsAdd) {
  const calibration plain = builtin_calibration();
  calibration scaled = plain;
  for (auto& [type, r] : scaled.types) r.column = {2, 3, 4, 5};
  const model_case flat{4000, "float64", {1, 2}, 192, 1}, tall{4000, "float64", {2, 1}, 192, 1};
  EXPECT_DOUBLE_EQ(predict(scaled, flat).seconds, predict(plain, flat).seconds);
  const lu_phases before = predict(plain, tall).phases, after = predict(scaled, tall).phases;
  const column_factors& f = plain.rates("float64").column;
  EXPECT_NEAR(after.panel / before.panel, 2 / f.panel, 1e-12);
  EXPECT_NEAR(after.pivot_search / before.pivot_search, 3 / f.pivot_search, 1e-12);
  EXPECT_NEAR(after.interchange / before.interchange, 4 / f.interchange, 1e-12);
  EXPECT_NEAR(after.broadcast / before.broadcast, 5 / f.broadcast, 1e-12);
  EXPECT_DOUBLE_EQ(after.gemm, before.gemm);
}

TEST(Model, RemainingFallsStepByStepToZero) {
  const auto p = predict(builtin_calibration(), {3000, "float64", {1, 2}, 224, 1});
  EXPECT_DOUBLE_EQ(p.remaining(0), p.seconds);
  EXPECT_EQ(p.remaining(3000), 0.0);
  double before = p.seconds;
  for (index_t done = 224; done < 3000; done += 224) {
    EXPECT_LT(p.remaining(done), before);
    before = p.remaining(done);
  }
}

TEST(RateTable, ExactAtSamplesInterpolatedBetweenClampedBeyond) {
  const rate_table t({{100, 10, 1}, {10000, 10, 3}, {100, 1000, 5}, {10000, 1000, 7}});
  EXPECT_DOUBLE_EQ(t.gflops_at(100, 10), 1);
  EXPECT_DOUBLE_EQ(t.gflops_at(10000, 1000), 7);
  EXPECT_NEAR(t.gflops_at(1000, 10), 2, 1e-12);  // halfway in log(rows)
  EXPECT_NEAR(t.gflops_at(1000, 100), 4, 1e-12);
  EXPECT_DOUBLE_EQ(t.gflops_at(1, 1), 1);
  EXPECT_DOUBLE_EQ(t.gflops_at(1e9, 1e9), 7);
  EXPECT_DOUBLE_EQ(t.best(), 7);
}

TEST(Calibration, JsonRoundTripAndRefusals) {
  const calibration c = builtin_calibration();
  const calibration back = calibration::from_json(c.json());
  EXPECT_EQ(back.json(), c.json());
  calibration changed = c;  // figures the built-in rates do not have survive too
  changed.types.front().second.gemm_in_factorization = 0.75;
  changed.types.front().second.column = {1.5, 2.5, 3.5, 4.5};
  const calibration reread = calibration::from_json(changed.json());
  const kernel_rates& read = reread.types.front().second;
  EXPECT_EQ(read.gemm_in_factorization, 0.75);
  EXPECT_EQ(read.column.panel, 1.5);
  EXPECT_EQ(read.column.broadcast, 4.5);
  auto broken = c.json();
  broken["types"]["float64"]["process_column"]["broadcast"] = 0;
  EXPECT_THROW(calibration::from_json(broken), gridlu::error);
  broken = c.json();
  broken["format"] = "gridlu calibration 1";
  EXPECT_THROW(calibration::from_json(broken), gridlu::error);
  broken = c.json();
  broken["format"] = "something else";
  EXPECT_THROW(calibration::from_json(broken), gridlu::error);
  broken = c.json();
  broken.erase("row_broadcast");
  EXPECT_THROW(calibration::from_json(broken), gridlu::error);
  EXPECT_THROW(c.rates("float16"), gridlu::error);
}

// Young's interval sqrt(2 d M) (Young 1974) is the first-order optimum: Daly's refinement
// tends to it as the write time d becomes small against the MTBF M, and is M itself once
// d >= 2M (Daly 2006, recalled from memory).
TEST(CheckpointInterval, YoungsLimitAndDalysCap) {
  const double mtbf = 24 * 3600.0;
  for (const double write : {1.0, 10.0, 60.0}) {
    const double young = std::sqrt(2 * write * mtbf);
    EXPECT_NEAR(checkpoint_interval(write, mtbf) / young, 1.0, 2 * std::sqrt(write / mtbf));
  }
  EXPECT_DOUBLE_EQ(checkpoint_interval(3 * mtbf, mtbf), mtbf);
}

// Daly's interval is an approximation of the minimum of the expected wall time; a plain
// search over intervals finds no interval more than 0.5 % better.
TEST(CheckpointInterval, NearTheMinimumOfTheExpectedWallTime) {
  for (const double write : {30.0, 600.0, 3600.0}) {
    const double mtbf = 8 * 3600.0, work = 100 * 3600.0;
    const double daly =
        expected_wall_time(work, checkpoint_interval(write, mtbf), write, write, mtbf);
    double best = daly;
    for (double tau = 10; tau < 10 * mtbf; tau *= 1.01)
      best = std::min(best, expected_wall_time(work, tau, write, write, mtbf));
    EXPECT_LE(daly, 1.005 * best) << write;
    EXPECT_GT(daly, work);  // failures and checkpoints cost something
  }
}

plan_options allocation(index_t n, int nodes, double gib_per_node) {
  plan_options o;
  o.n = n;
  o.nodes = nodes;
  o.cores_per_node = 4;
  o.memory_per_node = gib_per_node * (1 << 30);
  return o;
}

TEST(Plan, MemoryFitsAndCandidates) {
  const calibration c = builtin_calibration();
  const auto roomy = plan(allocation(20000, 2, 64), c);
  const double share = 20000.0 * 20000.0 * 8 / 8;  // A over 8 ranks
  EXPECT_TRUE(roomy.fits);
  EXPECT_GE(roomy.memory_per_rank, share);
  EXPECT_LT(roomy.memory_per_rank, 2 * share);  // panels and I/O buffers are much smaller
  EXPECT_DOUBLE_EQ(roomy.checkpoint_bytes, 20000.0 * 20000.0 * 8);
  EXPECT_EQ(roomy.chosen().grid.p * roomy.chosen().grid.q, 8);
  for (std::size_t i = 1; i < roomy.candidates.size(); ++i)
    EXPECT_LE(roomy.candidates[i - 1].predicted.seconds, roomy.candidates[i].predicted.seconds);
  EXPECT_FALSE(plan(allocation(20000, 2, 1), c).fits);  // 400 MB per rank into 256 MiB
  const auto json = roomy.json();
  for (const char* key : {"memory_per_rank_bytes", "fits", "grid", "block", "predicted_seconds",
                          "checkpoint_bytes", "checkpoint_interval_seconds"})
    EXPECT_TRUE(json.contains(key)) << key;
  EXPECT_TRUE(json["checkpoint_interval_seconds"].is_null());  // no MTBF given
  auto failing = allocation(20000, 2, 64);
  failing.mtbf_hours = 12;
  const auto r = plan(failing, c);
  EXPECT_GT(r.checkpoint_interval, 0);
  EXPECT_GT(r.expected_seconds, r.chosen().predicted.seconds);
}

TEST(Plan, Refusals) {
  const calibration c = builtin_calibration();
  auto o = allocation(1000, 1, 8);
  o.grid = grid_shape{3, 3};
  EXPECT_THROW(plan(o, c), gridlu::error);
  o = allocation(1000, 1, 8);
  o.block = 2000;
  EXPECT_THROW(plan(o, c), gridlu::error);
  o = allocation(0, 1, 8);
  EXPECT_THROW(plan(o, c), gridlu::error);
}

}  // namespace
