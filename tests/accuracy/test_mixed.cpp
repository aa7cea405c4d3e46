// Mixed-precision solves against LAPACK in double on a gathered copy: classical and
// GMRES refinement on well- and ill-conditioned systems, the fallbacks, the copy to single
// precision, and the solve with single factors in double arithmetic.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <limits>
#include <string>
#include <tuple>
#include <vector>

#include "accuracy/reference.hpp"
#include "gridlu/accuracy.hpp"
#include "gridlu/error.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/mixed.hpp"
#include "kernels/blas.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;

template <class T>
class Mixed : public ::testing::Test {};
using double_types = ::testing::Types<double, std::complex<double>>;
TYPED_TEST_SUITE(Mixed, double_types);

constexpr refinement_method both_methods[] = {refinement_method::classical,
                                              refinement_method::krylov};

// What a refinement did, for failure messages.
template <class T>
std::string summary(const mixed_outcome& out) {
  int steps = 0;
  for (const int i : out.inner_iterations) steps += i;
  return "converged " + std::to_string(out.converged) + ", corrections " +
         std::to_string(out.iterations) + ", GMRES steps " + std::to_string(steps) +
         ", backward error " +
         std::to_string(out.normwise_backward_errors.back() / unit_roundoff<T>()) + " u; " +
         out.why;
}

// solve_mixed with `method` on a copy of b; x receives the solution.
template <class T>
mixed_outcome run_mixed(const dist_matrix<T>& a, const dist_matrix<T>& b, dist_matrix<T>& x,
                        refinement_method method) {
  x = b;
  dist_matrix<narrow_t<T>> single(a.grid(), a.rows(), a.cols(), a.block());
  return solve_mixed(a, single, x, method).refinement;
}

// X's relative difference from LAPACK's double solve on the gathered copy, on the root
// (0 elsewhere).
template <class T>
double difference_from_lapack(const dist_matrix<T>& a, const dist_matrix<T>& b,
                              const dist_matrix<T>& x) {
  const auto a0 = a.gather(), b0 = b.gather(), ours = x.gather();
  return is_root() ? relative_difference(ours, lapack_solve(a0, b0, a.rows(), b.cols())) : 0.0;
}

// A well-conditioned system (random entries plus n on the diagonal, kappa of order 1).
// Classical refinement converges at a rate of about kappa u_single per correction
// (Higham, Accuracy and Stability of Numerical Algorithms, 2002, ch. 12, recalled from
// memory), GMRES refinement at least as fast (Carson & Higham 2017): a few corrections
// take X from a single-precision backward error to a few u, that of a double LU solve.
// k > nb moves right-hand sides between process columns in the Krylov corrections.
TYPED_TEST(Mixed, ReachesDoubleAccuracyOnAWellConditionedSystem) {
  using T = TypeParam;
  const double u = unit_roundoff<T>();
  for (const auto shape : shapes_for_world())
    for (const auto& [n, nb, k] : {std::tuple<index_t, index_t, index_t>{150, 8, 3}, {101, 3, 4}})
      for (const auto method : both_methods) {
        const process_grid grid(MPI_COMM_WORLD, shape);
        dist_matrix<T> a(grid, n, n, nb), b(grid, n, k, nb);
        a.fill([&](index_t i, index_t j) { return random_entry<T>(21, i, j) + T(i == j ? n : 0); });
        b.fill([](index_t i, index_t j) { return random_entry<T>(22, i, j); });
        dist_matrix<T> x(grid, n, k, nb);
        const auto out = run_mixed(a, b, x, method);
        const double diff = difference_from_lapack(a, b, x);
        const auto what = summary<T>(out) + " n " + std::to_string(n) + " nb " + std::to_string(nb);
        EXPECT_TRUE(out.converged) << what;
        EXPECT_TRUE(out.why.empty()) << what;
        EXPECT_LE(out.iterations, 5) << what;
        ASSERT_EQ(out.normwise_backward_errors.size(), out.iterations + 1u);
        ASSERT_EQ(out.residual_ratios.size(), out.iterations + 1u);
        EXPECT_EQ(out.inner_iterations.size(),
                  method == refinement_method::krylov ? out.iterations + 0u : 0u);
        // Langou et al.'s rule holds for the X returned.
        EXPECT_LE(out.residual_ratios.back(), 1) << what;
        // The first X, a single-precision solve, is far from double's class; the last is in it.
        EXPECT_GT(out.normwise_backward_errors.front(), 10 * u) << what;
        EXPECT_LE(out.normwise_backward_errors.back(), 10 * u) << what;
        // Forward error of both at most about kappa times the backward error, kappa ~ 1 here
        // (Higham 2002, Theorem 7.2, recalled from memory).
        if (is_root()) {
          EXPECT_LE(diff, 20 * u) << what;
        }
      }
}

// Hilbert's matrix of order 12 has a condition number near 1e16 (recalled from memory):
// far beyond what single-precision factors can refine (classical refinement needs
// kappa u_single < 1; Higham 2002, ch. 12, recalled from memory). Our stall rule ends
// it long before Langou et al.'s limit of 30 corrections. GMRES refinement is at the
// edge of its reach here (Carson & Higham 2018 analyse it up to kappa ~ 1e16): on most
// grids it converged, on one it stalled; either way it keeps its contract.
TYPED_TEST(Mixed, ClassicalFallsBackQuicklyOnHilbertTwelve) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world())
    for (const index_t nb : {3, 4}) {
      const process_grid grid(MPI_COMM_WORLD, shape);
      const index_t n = 12;
      dist_matrix<T> a(grid, n, n, nb), b(grid, n, 1, nb);
      a.fill([](index_t i, index_t j) { return hilbert_entry<T>(i, j); });
      b.fill([](index_t, index_t) { return T(1); });
      dist_matrix<T> x(grid, n, 1, nb);
      const auto out = run_mixed(a, b, x, refinement_method::classical);
      EXPECT_FALSE(out.converged) << summary<T>(out);
      EXPECT_FALSE(out.why.empty());
      EXPECT_LE(out.iterations, mixed_most_iterations / 3) << summary<T>(out);
      const auto krylov = run_mixed(a, b, x, refinement_method::krylov);
      if (krylov.converged) {
        EXPECT_LE(krylov.normwise_backward_errors.back(), 10 * unit_roundoff<T>());
        EXPECT_LE(krylov.residual_ratios.back(), 1);
      } else {
        EXPECT_FALSE(krylov.why.empty());
      }
      EXPECT_LE(krylov.iterations, 10) << summary<T>(krylov);
    }
}

// A = Q1 diag(sigma) Q2 with sigma geometric from 1 to 1/kappa and Q1, Q2 random
// orthogonal (unitary) factors of LAPACK's QR: kappa_2(A) = kappa by construction.
// Built on the root and scattered.
template <class T>
void fill_with_condition(dist_matrix<T>& a, double kappa, std::uint64_t seed) {
  const index_t n = a.rows();
  std::vector<T> whole;
  if (is_root()) {
    std::vector<T> q1(static_cast<std::size_t>(n * n)), q2(q1.size());
    for (index_t e = 0; e < n * n; ++e) {
      q1[e] = random_entry<T>(seed, e % n, e / n);
      q2[e] = random_entry<T>(seed + 1, e % n, e / n);
    }
    EXPECT_EQ(blas::lapack_qr_factor_q<T>(n, q1.data(), n), 0);
    EXPECT_EQ(blas::lapack_qr_factor_q<T>(n, q2.data(), n), 0);
    for (index_t j = 0; j < n; ++j)  // q1 diag(sigma)
      blas::scale<T>(n, T(std::pow(kappa, -static_cast<double>(j) / (n - 1))), q1.data() + j * n);
    whole.resize(q1.size());
    blas::gemm<T>(blas::op::none, blas::op::none, n, n, n, T(1), q1.data(), n, q2.data(), n, T(0),
                  whole.data(), n);
  }
  a.scatter(whole);
}

// kappa ~ 1e9: Hilbert's matrix of order 7 (kappa_inf ~ 9.85e8, recalled from memory) and
// a random matrix of kappa_2 = 1e9. kappa u_single ~ 60 > 1: nothing guarantees classical
// refinement converges (Higham 2002, ch. 12, recalled from memory); GMRES refinement
// with the same factors converges in a few corrections (Carson & Higham 2017, 2018), and
// its X is then as accurate as a double LU solve: both within about kappa u of the exact
// solution (Higham 2002, Theorem 7.2, recalled from memory). On the random matrix
// classical refinement stalls at once. On Hilbert's it is at the edge: with some grids
// and block sizes each correction still gains a little, and it converged after 15 to 26
// corrections, with others it reached the limit of 30; so only its slowness is checked.
TYPED_TEST(Mixed, KrylovConvergesWhereClassicalFallsBackAtKappaOneBillion) {
  using T = TypeParam;
  const double u = unit_roundoff<T>(), kappa = 1e9;
  for (const auto shape : shapes_for_world())
    for (const bool hilbert : {true, false})
      for (const index_t nb : {3, 8}) {
        const process_grid grid(MPI_COMM_WORLD, shape);
        const index_t n = hilbert ? 7 : 120;
        dist_matrix<T> a(grid, n, n, nb), b(grid, n, 2, nb);
        if (hilbert)
          a.fill([](index_t i, index_t j) { return hilbert_entry<T>(i, j); });
        else
          fill_with_condition(a, kappa, 31);
        b.fill([](index_t i, index_t j) { return random_entry<T>(32, i, j); });
        const char* name = hilbert ? "Hilbert 7" : "random, kappa 1e9";
        dist_matrix<T> x(grid, n, 2, nb);
        const auto classical = run_mixed(a, b, x, refinement_method::classical);
        if (hilbert) {
          EXPECT_TRUE(!classical.converged || classical.iterations >= 10)
              << name << ": " << summary<T>(classical);
        } else {
          EXPECT_FALSE(classical.converged) << name << ": " << summary<T>(classical);
          EXPECT_FALSE(classical.why.empty()) << name;
          EXPECT_LE(classical.iterations, mixed_most_iterations / 3)
              << name << ": " << summary<T>(classical);
        }
        const auto krylov = run_mixed(a, b, x, refinement_method::krylov);
        const double diff = difference_from_lapack(a, b, x);
        const auto what = std::string(name) + ": " + summary<T>(krylov);
        EXPECT_TRUE(krylov.converged) << what;
        EXPECT_LE(krylov.iterations, 3) << what;
        EXPECT_LE(krylov.normwise_backward_errors.back(), 10 * u) << what;
        if (is_root()) {
          EXPECT_LE(diff, 2 * kappa * u) << what;
        }
      }
}

// Single precision's largest finite value is about 3.4e38 (IEEE 754 binary32): 1e39 in
// any one entry, real or imaginary part, is refused on every rank; the largest float
// itself and infinities already in A are copied, entry by entry.
TYPED_TEST(Mixed, NarrowCopyRefusesEntriesBeyondSinglePrecision) {
  using T = TypeParam;
  using S = narrow_t<T>;
  const double big = std::numeric_limits<real_t<S>>::max();
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const index_t n = 10, nb = 3;
    dist_matrix<T> a(grid, n, n, nb);
    dist_matrix<S> single(grid, n, n, nb);
    for (index_t at = 0; at < n * n; at += 13) {
      a.fill([&](index_t i, index_t j) { return T(i + j * n == at ? 1e39 : 1.0); });
      EXPECT_FALSE(narrow_copy(a, single)) << "entry " << at;
      if constexpr (scalar_traits<T>::is_complex) {
        a.fill([&](index_t i, index_t j) { return T(1, i + j * n == at ? -1e39 : 1); });
        EXPECT_FALSE(narrow_copy(a, single)) << "entry " << at;
      }
    }
    const double inf = std::numeric_limits<double>::infinity();
    a.fill([&](index_t i, index_t j) { return T(i == j ? big : j == 0 ? inf : i - 2.0 * j); });
    EXPECT_TRUE(narrow_copy(a, single));
    for (index_t e = 0; e < single.ld() * single.local_cols(); ++e)
      EXPECT_EQ(single.data()[e], static_cast<S>(a.data()[e]));
  }
}

// solve_mixed refuses, with its reason, an A beyond single precision's range (IEEE 754
// binary32 ends near 3.4e38) and an A with a zero column, singular in any precision:
// its pivot in that column is exactly zero.
TYPED_TEST(Mixed, SolveMixedStatesWhyItRefuses) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const index_t n = 10, nb = 3, zero_column = 4;
    dist_matrix<T> a(grid, n, n, nb), x(grid, n, 1, nb);
    dist_matrix<narrow_t<T>> single(grid, n, n, nb);
    a.fill([&](index_t i, index_t j) { return T(i == j ? 1e39 : 0); });
    auto out = solve_mixed(a, single, x);
    EXPECT_FALSE(out.refinement.converged);
    EXPECT_EQ(out.refinement.why, "A has entries beyond single precision's range");
    a.fill([&](index_t i, index_t j) {
      return j == zero_column ? T(0) : random_entry<T>(51, i, j) + T(i == j ? n : 0);
    });
    out = solve_mixed(a, single, x);
    EXPECT_FALSE(out.refinement.converged);
    EXPECT_EQ(out.factors.first_zero_pivot, zero_column);
    EXPECT_NE(out.refinement.why.find("zero pivot"), std::string::npos) << out.refinement.why;
    EXPECT_EQ(out.refinement.iterations, 0);
  }
}

// solve_widened applies single factors in double: it matches LAPACK's double getrs with
// the same factors widened to double on the root to rounding in double (a triangular
// solve is backward stable; Higham 2002, ch. 8, recalled from memory), while the solve
// in single precision is a single-precision rounding away.
TYPED_TEST(Mixed, WidenedSolveMatchesLapackWithWidenedFactors) {
  using T = TypeParam;
  using S = narrow_t<T>;
  for (const auto shape : shapes_for_world())
    for (const index_t nb : {3, 8})
      for (const solve_with with : {solve_with::a, solve_with::adjoint}) {
        const process_grid grid(MPI_COMM_WORLD, shape);
        const index_t n = 90, k = 2;
        dist_matrix<S> lu(grid, n, n, nb);
        lu.fill([](index_t i, index_t j) { return random_entry<S>(41, i, j); });
        const auto pivots = factor(lu).pivots;
        dist_matrix<T> x(grid, n, k, nb);
        x.fill([](index_t i, index_t j) { return random_entry<T>(42, i, j); });
        dist_matrix<S> in_single(grid, n, k, nb);
        in_single.fill(
            [](index_t i, index_t j) { return static_cast<S>(random_entry<T>(42, i, j)); });
        const auto b0 = x.gather();
        solve_widened(lu, pivots, x, with);
        solve(lu, pivots, in_single, with);
        const auto ours = x.gather(), lu0 = lu.gather();
        const auto single0 = in_single.gather();
        if (!is_root()) continue;
        std::vector<T> factors(lu0.begin(), lu0.end()), ref = b0;
        std::vector<std::int32_t> ipiv(pivots.begin(), pivots.end());
        for (auto& p : ipiv) ++p;  // LAPACK counts from 1
        ASSERT_EQ(blas::lapack_getrs<T>(with == solve_with::a ? blas::op::none : blas::op::adjoint,
                                        n, k, factors.data(), n, ipiv.data(), ref.data(), n),
                  0);
        const double u = unit_roundoff<T>();
        const double diff = relative_difference(ours, ref);
        const double single_diff =
            relative_difference(std::vector<T>(single0.begin(), single0.end()), ref);
        EXPECT_LE(diff, 10 * n * u);
        EXPECT_GT(single_diff, 1e3 * n * u);
      }
  // More than a block of right-hand sides is refused.
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  dist_matrix<S> lu(grid, 9, 9, 3);
  lu.fill([](index_t i, index_t j) { return S(i == j ? 2 : 0); });
  const auto pivots = factor(lu).pivots;
  dist_matrix<T> x(grid, 9, 4, 3);
  EXPECT_THROW(solve_widened(lu, pivots, x), error);
}

}  // namespace
