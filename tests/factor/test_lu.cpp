// The distributed LU and solve against LAPACK's ?getrf (OpenBLAS) on a gathered copy,
// and against published properties of Wilkinson's growth matrix.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <numeric>

#include "gridlu/generate.hpp"
#include "gridlu/lu.hpp"
#include "kernels/blas.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;

template <class T>
class Lu : public ::testing::Test {};
TYPED_TEST_SUITE(Lu, scalar_types);

// What LAPACK's ?getrf (OpenBLAS) makes of a column-major n x n matrix.
template <class T>
struct reference_lu {
  std::vector<T> factors;
  std::vector<std::int32_t> ipiv;
  int info;
};
template <class T>
reference_lu<T> lapack_lu(std::vector<T> a, index_t n) {
  std::vector<std::int32_t> ipiv(static_cast<std::size_t>(n));
  const int info = blas::lapack_getrf<T>(n, n, a.data(), n, ipiv.data());
  return {std::move(a), std::move(ipiv), info};
}

template <class T>
double max_row_sum(const std::vector<T>& a, index_t m, index_t n) {
  double best = 0;
  for (index_t i = 0; i < m; ++i) {
    double s = 0;
    for (index_t j = 0; j < n; ++j) s += std::abs(a[i + j * m]);
    best = std::max(best, s);
  }
  return best;
}

// Worst normwise backward error over the columns of x, computed on one rank in long
// double straight from the definition, independent of gridlu's accuracy code.
template <class T>
double worst_backward_error(const std::vector<T>& a, const std::vector<T>& x,
                            const std::vector<T>& b, index_t n, index_t k) {
  using wide =
      std::conditional_t<scalar_traits<T>::is_complex, std::complex<long double>, long double>;
  const double anorm = max_row_sum(a, n, n);
  double worst = 0;
  for (index_t c = 0; c < k; ++c) {
    double r = 0, xn = 0, bn = 0;
    for (index_t i = 0; i < n; ++i) {
      wide s = static_cast<wide>(b[i + c * n]);
      for (index_t j = 0; j < n; ++j)
        s -= static_cast<wide>(a[i + j * n]) * static_cast<wide>(x[j + c * n]);
      r = std::max(r, static_cast<double>(std::abs(s)));
      xn = std::max(xn, static_cast<double>(std::abs(x[i + c * n])));
      bn = std::max(bn, static_cast<double>(std::abs(b[i + c * n])));
    }
    worst = std::max(worst, r / (anorm * xn + bn));
  }
  return worst;
}

// On the root: the pivots, zero-pivot column and factors of a factorization must be
// LAPACK's (?getrf on the gathered original), the factors within n eps ||A||.
template <class T>
void expect_lapack_result(const std::vector<T>& original, const std::vector<T>& ours,
                          const lu_result& lu, index_t n) {
  const auto ref = lapack_lu(original, n);
  EXPECT_EQ(lu.first_zero_pivot + 1, ref.info);
  EXPECT_EQ(lu.columns_done, n);
  EXPECT_TRUE(lu.settled);
  std::vector<index_t> lapack_pivots(ref.ipiv.begin(), ref.ipiv.end());
  for (auto& p : lapack_pivots) --p;  // LAPACK counts from 1
  EXPECT_EQ(lu.pivots, lapack_pivots);
  double diff = 0;
  for (std::size_t e = 0; e < ours.size(); ++e)
    diff = std::max(diff, static_cast<double>(std::abs(ours[e] - ref.factors[e])));
  EXPECT_LE(diff, n * epsilon<T>() * max_row_sum(original, n, n));
}

// Factors a random n x n matrix on the grid and checks the result against LAPACK's.
template <class T>
void expect_random_lu_matches_lapack(const process_grid& grid, index_t n, index_t nb,
                                     std::uint64_t seed, const lu_options& options) {
  dist_matrix<T> a(grid, n, n, nb);
  a.fill([&](index_t i, index_t j) { return random_entry<T>(seed, i, j); });
  const auto original = a.gather();
  const auto lu = factor(a, options);
  const auto ours = a.gather();
  if (is_root()) expect_lapack_result(original, ours, lu, n);
}

// Depth 1 also cuts the trailing update into GEMM calls of 7 columns, so that the
// small test matrices take the chunked path too.
lu_options with_lookahead(int depth) {
  lu_options o;
  o.lookahead = depth;
  if (depth == 1) o.update_columns = 7;
  return o;
}

TYPED_TEST(Lu, PivotsAndFactorsMatchLapackAndSolvesAreBackwardStable) {
  using T = TypeParam;
  const double eps = epsilon<T>();
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const index_t n : {1, 2, 7, 64, 100, 257})
      for (const index_t nb : {1, 3, 16, 64})
        for (const int depth : {0, 1, 2}) {
          SCOPED_TRACE(::testing::Message() << "grid " << shape.p << "x" << shape.q << " n=" << n
                                            << " nb=" << nb << " look-ahead " << depth);
          const std::uint64_t seed = 1000 + 7 * n + nb;
          const auto entry = [&](index_t i, index_t j) { return random_entry<T>(seed, i, j); };
          dist_matrix<T> a(grid, n, n, nb);
          a.fill(entry);
          const auto original = a.gather();
          const auto lu = factor(a, with_lookahead(depth));
          const auto ours = a.gather();
          if (is_root()) expect_lapack_result(original, ours, lu, n);
          for (const index_t k : {1, 5}) {
            dist_matrix<T> b(grid, n, k, nb), x(grid, n, k, nb);
            const auto rhs = [&](index_t i, index_t j) { return random_entry<T>(seed + 1, i, j); };
            b.fill(rhs);
            x.fill(rhs);
            solve(a, lu.pivots, x);
            const auto xs = x.gather(), bs = b.gather();
            if (is_root()) {
              EXPECT_LE(worst_backward_error(original, xs, bs, n, k), 10 * n * eps) << "k=" << k;
            }
          }
        }
  }
}

// Sizes where some process rows or columns own no block of the last steps, or none at
// all (fewer blocks than ranks along a grid dimension), and a short last block: the
// look-ahead must skip those ranks' empty work without a collective going astray.
TYPED_TEST(Lu, LookaheadOnGridsWhereRanksOwnNoBlockOfTheLastSteps) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const index_t nb = 8, most = std::max(shape.p, shape.q);
    for (index_t blocks = 1; blocks <= most + 1; ++blocks)
      for (const index_t tail : {index_t{0}, index_t{3}})
        for (const int depth : {0, 1, 2, 5}) {
          const index_t n = (blocks - 1) * nb + (tail == 0 ? nb : tail);
          SCOPED_TRACE(::testing::Message() << "grid " << shape.p << "x" << shape.q << " n=" << n
                                            << " look-ahead " << depth);
          expect_random_lu_matches_lapack<T>(grid, n, nb, 31 + n, with_lookahead(depth));
        }
  }
}

// Between process rows the row exchanges go in groups of columns sized to stay in
// cache (about 2^17 cache lines over the rows that move). Blocks of 300 rows move some
// 400 of them, so groups hold a few hundred columns and the first steps' trailing
// columns (up to 700) span several groups, with a short last one.
TYPED_TEST(Lu, RowExchangesInSeveralColumnGroupsMatchLapack) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    SCOPED_TRACE(::testing::Message() << "grid " << shape.p << "x" << shape.q);
    expect_random_lu_matches_lapack<T>(grid, 1000, 300, 4242, with_lookahead(1));
  }
}

// A factorization stopped part-way, moved in its global layout to another grid shape and
// block size (as a checkpoint is), and continued there, must end with LAPACK's pivots and
// factors: the state after k columns does not depend on how it was computed. With
// look-ahead the stop waits until no panel is factored ahead.
TYPED_TEST(Lu, StoppedAndContinuedOnAnotherGridAndBlockSizeMatchesLapack) {
  using T = TypeParam;
  const auto shapes = shapes_for_world();
  for (std::size_t s = 0; s < shapes.size(); ++s) {
    const process_grid first(MPI_COMM_WORLD, shapes[s]);
    const process_grid second(MPI_COMM_WORLD, shapes[(s + 1) % shapes.size()]);
    for (const index_t n : {100, 257})
      for (const auto& [nb1, nb2] : {std::pair<index_t, index_t>{16, 5}, {3, 64}, {64, 16}})
        for (const int depth : {0, 1, 2}) {
          SCOPED_TRACE(::testing::Message()
                       << "n=" << n << " nb " << nb1 << " -> " << nb2 << " look-ahead " << depth);
          const auto entry = [&](index_t i, index_t j) { return random_entry<T>(77 + n, i, j); };
          dist_matrix<T> a(first, n, n, nb1);
          a.fill(entry);
          const auto original = a.gather();
          auto stop_early = with_lookahead(depth);
          index_t asked_at = -1;
          stop_early.after_step = [&](const lu_result& st) {
            if (asked_at < 0 && st.columns_done >= n / 3) asked_at = st.columns_done;
            return asked_at < 0 ? step_request::go_on : step_request::stop;
          };
          auto state = factor(a, stop_early);
          EXPECT_TRUE(state.settled);
          EXPECT_GE(state.columns_done, asked_at);
          // Draining the panels factored ahead takes at most `depth` more steps.
          EXPECT_LE(state.columns_done, std::min(n, asked_at + depth * nb1));
          dist_matrix<T> b(second, n, n, nb2);
          b.scatter(a.gather());
          const auto lu = factor(b, std::move(state), with_lookahead(2 - depth));
          const auto ours = b.gather();
          if (is_root()) expect_lapack_result(original, ours, lu, n);
        }
  }
}

// Asking to settle (once; the request holds) makes a settled state show up within
// `depth` steps, after which the factorization looks ahead again and still ends with
// LAPACK's result.
TYPED_TEST(Lu, SettlingPausesTheLookaheadAndResumesIt) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const index_t n = 150, nb = 7;
    for (const int depth : {1, 2}) {
      SCOPED_TRACE(::testing::Message()
                   << "grid " << shape.p << "x" << shape.q << " look-ahead " << depth);
      dist_matrix<T> a(grid, n, n, nb);
      a.fill([&](index_t i, index_t j) { return random_entry<T>(9, i, j); });
      const auto original = a.gather();
      auto o = with_lookahead(depth);
      int steps = 0, waited = -1, settled_steps = 0, pauses = 0;
      o.after_step = [&](const lu_result& st) {
        ++steps;
        settled_steps += st.settled ? 1 : 0;
        if (waited >= 0 && st.settled) {
          EXPECT_LE(waited, depth);
          waited = -1;
          ++pauses;
        } else if (waited >= 0) {
          ++waited;
        }
        if (steps % 5 == 0 && !st.settled) {
          waited = 1;
          return step_request::settle;
        }
        return step_request::go_on;
      };
      const auto lu = factor(a, o);
      const auto ours = a.gather();
      EXPECT_GT(pauses, 2);
      // Looking ahead again after each pause: most steps are not settled.
      EXPECT_LT(settled_steps, steps / 2);
      if (is_root()) expect_lapack_result(original, ours, lu, n);
    }
  }
}

// Root-only checks use EXPECT, never ASSERT: an ASSERT would leave the test on one rank
// while the others go on into the next collective and wait forever.

// Wilkinson's growth matrix: 1 on the diagonal, -1 below it, 1 in the last column.
// Partial pivoting makes no interchange and the last pivot is 2^(n-1) (Wilkinson 1961;
// Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., section 9.4). Every
// subdiagonal entry ties with the diagonal, so this also checks ties go to the top row.
TYPED_TEST(Lu, WilkinsonGrowthMatrixHasNoInterchangeAndLastPivotTwoToTheNMinusOne) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const index_t n : {2, 7, 64, 100})
      for (const index_t nb : {1, 3, 16}) {
        SCOPED_TRACE(::testing::Message()
                     << "grid " << shape.p << "x" << shape.q << " n=" << n << " nb=" << nb);
        dist_matrix<T> a(grid, n, n, nb);
        a.fill(
            [&](index_t i, index_t j) { return T(j == n - 1 || i == j ? 1 : (i > j ? -1 : 0)); });
        const auto lu = factor(a);
        const auto f = a.gather();
        if (!is_root()) continue;
        EXPECT_EQ(lu.first_zero_pivot, -1);
        std::vector<index_t> identity(static_cast<std::size_t>(n));
        std::iota(identity.begin(), identity.end(), 0);
        EXPECT_EQ(lu.pivots, identity);
        EXPECT_EQ(f[(n - 1) + (n - 1) * n], T(std::ldexp(real_t<T>(1), static_cast<int>(n - 1))));
      }
  }
}

// Exactly singular matrices: the factorization runs to the end and reports the first
// zero pivot's column, which must be the one LAPACK's ?getrf reports as info. The equal
// rows lead column 0 with a 2, so the first step's multiplier is exactly 1 and one of
// them becomes exactly zero in any correct arithmetic (with or without FMA).
TYPED_TEST(Lu, SingularMatricesReportTheColumnLapackReports) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const index_t n : {2, 7, 64, 100})
      for (const index_t nb : {1, 3, 16, 64})
        for (const bool zero_column : {true, false}) {
          SCOPED_TRACE(::testing::Message()
                       << "grid " << shape.p << "x" << shape.q << " n=" << n << " nb=" << nb
                       << (zero_column ? " zero column" : " equal rows"));
          const index_t special = (n - 1) / 2, twin = n - 1;
          dist_matrix<T> a(grid, n, n, nb);
          a.fill([&](index_t i, index_t j) {
            if (zero_column && j == special) return T(0);
            if (!zero_column && (i == twin || i == special))
              return j == 0 ? T(2) : random_entry<T>(5, special, j);
            return random_entry<T>(5, i, j);
          });
          const auto original = a.gather();
          const auto lu = factor(a);
          if (!is_root()) continue;
          const auto ref = lapack_lu(original, n);
          EXPECT_GT(ref.info, 0);
          EXPECT_EQ(lu.first_zero_pivot + 1, ref.info);
        }
  }
}

}  // namespace
