// The factorization facade against LAPACK's getrf/getrs (OpenBLAS) on a gathered copy:
// solutions in every precision and system, its trust figures, its refusals, and its
// checkpoints taken up on another grid and block size.
#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <limits>

#include "accuracy/reference.hpp"
#include "gridlu/checkpoint.hpp"
#include "gridlu/factorization.hpp"
#include "gridlu/generate.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;

template <class T>
class Facade : public ::testing::Test {};
TYPED_TEST_SUITE(Facade, scalar_types);

template <class T>
class MixedFacade : public ::testing::Test {};
using double_types = ::testing::Types<double, std::complex<double>>;
TYPED_TEST_SUITE(MixedFacade, double_types);

// Options with a checkpoint directory.
factor_options checkpointed(const std::string& dir, double every, double stop = 0) {
  factor_options o;
  o.checkpoint_dir = dir;
  o.checkpoint_seconds = every;
  o.stop_after_seconds = stop;
  return o;
}
factor_options in(precision arithmetic) {
  factor_options o;
  o.arithmetic = arithmetic;
  return o;
}

// Random entries with a heavy diagonal: far from singular in every precision.
template <class T>
T system_entry(index_t n, index_t i, index_t j) {
  return random_entry<T>(31, i, j) + T(i == j ? static_cast<double>(n) / 4 : 0);
}

blas::op lapack_op(solve_with with) {
  return with == solve_with::a           ? blas::op::none
         : with == solve_with::transpose ? blas::op::transpose
                                         : blas::op::adjoint;
}

// The error f throws, the same on every rank, with its kind and a part of its message.
void expect_error(error_kind kind, const std::string& part, const std::function<void()>& f) {
  try {
    f();
    ADD_FAILURE() << "no error";
  } catch (const error& e) {
    EXPECT_EQ(e.kind(), kind) << e.what();
    EXPECT_NE(std::string(e.what()).find(part), std::string::npos) << e.what();
  }
}

// ||op(A)||_inf ||inv(op(A))||_inf from LAPACK on the root's gathered A.
template <class T>
double lapack_condition_inf(const std::vector<T>& a0, index_t n, solve_with with) {
  std::vector<T> identity(static_cast<std::size_t>(n * n), T(0));
  for (index_t i = 0; i < n; ++i) identity[i + i * n] = T(1);
  const auto inverse = lapack_solve(a0, identity, n, n, lapack_op(with));
  // The inf-norm of op(A) is the 1-norm of A when op transposes.
  return gathered_norm(a0, n, with != solve_with::a) * gathered_norm(inverse, n, false);
}

// Every system, on every grid shape, with a block size that does not divide n: X as
// LAPACK's, A untouched, and trust figures that say so (the condition estimate within
// a factor 3 of the exact one: Higham 1988, recalled from memory).
TYPED_TEST(Facade, SolvesEverySystemAsLapackDoes) {
  using T = TypeParam;
  const index_t n = 61, k = 3, nb = 8;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    dist_matrix<T> a(grid, n, n, nb), b(grid, n, k, nb);
    a.fill([&](index_t i, index_t j) { return system_entry<T>(n, i, j); });
    b.fill([](index_t i, index_t j) { return random_entry<T>(32, i, j); });
    const auto a0 = a.gather(), b0 = b.gather();
    factor_options deeper;
    deeper.lookahead = 2;
    const factorization<T> f(a, deeper);
    EXPECT_EQ(f.result().columns_done, n);
    EXPECT_FALSE(f.resumed());
    for (const solve_with with : {solve_with::a, solve_with::transpose, solve_with::adjoint}) {
      dist_matrix<T> x = b;
      f.solve(x, with);
      const auto t = f.check(x, b, with);
      const auto ours = x.gather();
      EXPECT_LE(t.worst_normwise(), 10 * n * unit_roundoff<T>());
      EXPECT_TRUE(t.flags.empty()) << (t.reasons.empty() ? "" : t.reasons[0]);
      EXPECT_EQ(t.unit_roundoff, unit_roundoff<T>());
      if (!is_root()) continue;
      const auto ref = lapack_solve(a0, b0, n, k, lapack_op(with));
      EXPECT_LE(relative_difference(ours, ref), 1e3 * n * epsilon<T>())
          << shape.p << "x" << shape.q << " op " << static_cast<int>(with);
      const double exact = lapack_condition_inf(a0, n, with);
      EXPECT_LE(t.condition_inf, exact * (1 + 1e3 * n * epsilon<T>()));
      EXPECT_GE(t.condition_inf, exact / 3);
    }
    EXPECT_EQ(a.gather(), a0);
  }
}

// An exactly zero column 5: LAPACK's getrf reports info 6, the facade names column 5.
TYPED_TEST(Facade, RefusesAnExactlySingularMatrix) {
  using T = TypeParam;
  const index_t n = 23;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    dist_matrix<T> a(grid, n, n, 4);
    a.fill([&](index_t i, index_t j) { return j == 5 ? T(0) : system_entry<T>(n, i, j); });
    if (is_root()) {
      std::vector<std::int32_t> ipiv(n);
      auto a0 = a.gather();
      EXPECT_EQ(blas::lapack_getrf<T>(n, n, a0.data(), n, ipiv.data()), 6);
    } else {
      a.gather();
    }
    expect_error(error_kind::numerical, "column 5 ", [&] { factorization<T> f(a); });
  }
}

TYPED_TEST(Facade, RefusesWhatCannotWork) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    dist_matrix<T> rect(grid, 10, 9, 4), a(grid, 10, 10, 4), other_block(grid, 10, 1, 3);
    a.fill([](index_t i, index_t j) { return system_entry<T>(10, i, j); });
    expect_error(error_kind::usage, "square", [&] { factorization<T> f(rect); });
    expect_error(error_kind::usage, "needs a checkpoint_dir",
                 [&] { factorization<T> f(a, checkpointed("", 0, 1)); });
    if constexpr (std::is_same_v<narrow_t<T>, T>)
      expect_error(error_kind::usage, "mixed precision",
                   [&] { factorization<T> f(a, in(precision::mixed)); });
    const factorization<T> f(a);
    expect_error(error_kind::usage, "block size", [&] { f.solve(other_block); });
    if (T* corner = a.find(0, 0)) *corner = T(std::numeric_limits<real_t<T>>::infinity());
    expect_error(error_kind::input, "A(0, 0)", [&] { factorization<T> g(a); });
  }
}

// Mixed precision: X as LAPACK's double solve, within double's accuracy, from
// single-precision factors; the trust figures in double's unit roundoff.
TYPED_TEST(MixedFacade, RefinesToTheWorkingPrecision) {
  using T = TypeParam;
  const index_t n = 70, k = 2;
  for (const auto shape : shapes_for_world())
    for (const auto kind : {precision::mixed, precision::mixed_krylov}) {
      const process_grid grid(MPI_COMM_WORLD, shape);
      dist_matrix<T> a(grid, n, n, 9), b(grid, n, k, 9);
      a.fill([&](index_t i, index_t j) { return system_entry<T>(n, i, j); });
      b.fill([](index_t i, index_t j) { return random_entry<T>(33, i, j); });
      const auto a0 = a.gather(), b0 = b.gather();
      const factorization<T> f(a, in(kind));
      EXPECT_FALSE(f.refinement());
      dist_matrix<T> x = b;
      f.solve(x);
      ASSERT_TRUE(f.refinement());
      EXPECT_TRUE(f.refinement()->converged) << f.refinement()->why;
      EXPECT_TRUE(f.fallback().empty());
      const auto t = f.check(x, b);
      EXPECT_EQ(t.unit_roundoff, unit_roundoff<T>());
      EXPECT_LE(t.worst_normwise(), 10 * n * unit_roundoff<T>());
      EXPECT_TRUE(t.flags.empty());
      const auto ours = x.gather();
      expect_error(error_kind::usage, "A X = B only", [&] { f.solve(x, solve_with::transpose); });
      if (!is_root()) continue;
      EXPECT_LE(relative_difference(ours, lapack_solve(a0, b0, n, k)), 1e3 * n * epsilon<T>());
    }
}

// An entry beyond single precision's range: mixed precision gives way to double at once.
TYPED_TEST(MixedFacade, GivesWayBeyondSinglePrecisionsRange) {
  using T = TypeParam;
  const index_t n = 30;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    dist_matrix<T> a(grid, n, n, 7), x(grid, n, 1, 7);
    a.fill([&](index_t i, index_t j) { return system_entry<T>(n, i, j) * (i == 3 ? 1e40 : 1.0); });
    x.fill([](index_t i, index_t) { return random_entry<T>(34, i, 0); });
    const auto a0 = a.gather(), b0 = x.gather();
    const factorization<T> f(a, in(precision::mixed));
    EXPECT_EQ(f.fallback(), mixed_out_of_range);
    f.solve(x);
    EXPECT_FALSE(f.refinement());
    const auto ours = x.gather();
    if (is_root()) {
      EXPECT_LE(relative_difference(ours, lapack_solve(a0, b0, n, 1)), 1e3 * n * epsilon<T>());
    }
  }
}

// The Hilbert matrix of order 12 has a condition number near 1.7e16 (recalled from
// memory; common practice as a test of ill-conditioning): u kappa is far above 0.01.
TEST(FacadeTrust, FlagsTheHilbertMatrixOfOrder12) {
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const index_t n = 12;
    dist_matrix<double> a(grid, n, n, 5), b(grid, n, 1, 5);
    a.fill([](index_t i, index_t j) { return 1.0 / static_cast<double>(i + j + 1); });
    b.fill([](index_t i, index_t) { return 1.0 + static_cast<double>(i); });
    const factorization<double> f(a);
    dist_matrix<double> x = b;
    f.solve(x);
    const auto t = f.check(x, b);
    EXPECT_GT(t.condition_inf, 1e15);
    EXPECT_NE(std::find(t.flags.begin(), t.flags.end(), "ill_conditioned"), t.flags.end());
    EXPECT_LE(t.worst_normwise(), 1000 * unit_roundoff<double>());  // the solve itself is fine
    EXPECT_LT(t.trusted_digits, 3);
  }
}

// The saved state in a directory, read on the world grid: columns done, job id (empty: none).
struct saved {
  index_t columns = -1;
  std::string job;
};
saved saved_in(const std::string& path) {
  const process_grid world(MPI_COMM_WORLD, {1, comm::world_size()});
  const checkpoint::directory dir(world, path, checkpoint::directory::opening::existing);
  if (!dir.has_state()) return {};
  const auto s = dir.summary();
  return {s.done.columns_done, s.job_id};
}

// Stopped after its first steps with a checkpoint, a factorization is taken up on
// another grid shape and block size and ends as LAPACK's; another A is refused without
// touching the state; a finished factorization leaves no state behind.
TYPED_TEST(Facade, TakesUpItsCheckpointOnAnotherGrid) {
  using T = TypeParam;
  const index_t n = 150, k = 2;
  const scratch_dir scratch;
  const std::string path = scratch.file("ck");
  const auto shapes = shapes_for_world();
  const process_grid first(MPI_COMM_WORLD, shapes.front()), second(MPI_COMM_WORLD, shapes.back());
  const auto entry = [&](index_t i, index_t j) { return system_entry<T>(n, i, j); };
  dist_matrix<T> a1(first, n, n, 16), a2(second, n, n, 24), x(second, n, k, 24);
  a1.fill(entry);
  a2.fill(entry);
  x.fill([](index_t i, index_t j) { return random_entry<T>(35, i, j); });
  const auto a0 = a2.gather(), b0 = x.gather();

  expect_error(error_kind::stopped, "checkpointed in",
               [&] { factorization<T> f(a1, checkpointed(path, 0, 1e-9)); });
  const saved before = saved_in(path);
  EXPECT_GT(before.columns, 0);
  EXPECT_LT(before.columns, n);

  dist_matrix<T> other = a2;
  *other.data() += T(1);
  expect_error(error_kind::usage, "another matrix",
               [&] { factorization<T> f(other, checkpointed(path, 600)); });
  const saved after = saved_in(path);
  EXPECT_EQ(after.columns, before.columns);
  EXPECT_EQ(after.job, before.job);

  const factorization<T> f(a2, checkpointed(path, 0));
  EXPECT_TRUE(f.resumed());
  EXPECT_EQ(saved_in(path).columns, -1);  // removed once complete
  f.solve(x);
  const auto ours = x.gather();
  if (is_root()) {
    EXPECT_LE(relative_difference(ours, lapack_solve(a0, b0, n, k)), 1e3 * n * epsilon<T>());
  }

  const factorization<T> again(a2, checkpointed(path, 0));
  EXPECT_FALSE(again.resumed());
  EXPECT_EQ(saved_in(path).columns, -1);
}

}  // namespace
