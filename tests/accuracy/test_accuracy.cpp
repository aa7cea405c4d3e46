// Norms and backward errors on the grid against closed forms and a gathered copy.
#include <gtest/gtest.h>

#include <cmath>

#include "gridlu/accuracy.hpp"
#include "gridlu/generate.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;

template <class T>
class Accuracy : public ::testing::Test {};
TYPED_TEST_SUITE(Accuracy, scalar_types);

TYPED_TEST(Accuracy, InfinityNormIsTheLargestRowSum) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const index_t n : {1, 9, 40})
      for (const index_t nb : {1, 4, 16}) {
        dist_matrix<T> a(grid, n, n, nb);
        a.fill([](index_t i, index_t j) { return random_entry<T>(11, i, j); });
        const double ours = norm_inf(a);
        const auto whole = a.gather();
        if (!is_root()) continue;
        double expected = 0;
        for (index_t i = 0; i < n; ++i) {
          double s = 0;
          for (index_t j = 0; j < n; ++j) s += std::abs(whole[i + j * n]);
          expected = std::max(expected, s);
        }
        EXPECT_NEAR(ours, expected, 4 * n * epsilon<T>() * expected);
      }
  }
}

// A = 2 I, b = 1, x = 1/2 + d j 2^-10 in column j: r = -2 d, ||A|| = 2, so the backward
// error of column j is 2 d / (2 (1/2 + d) + 1) with d = j 2^-10 -- exact in binary.
TYPED_TEST(Accuracy, BackwardErrorOfAPerturbedSolutionHasItsClosedForm) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const index_t n = 13, k = 4, nb = 3;
    dist_matrix<T> a(grid, n, n, nb), x(grid, n, k, nb), b(grid, n, k, nb);
    a.fill([](index_t i, index_t j) { return T(i == j ? 2 : 0); });
    b.fill([](index_t, index_t) { return T(1); });
    x.fill([](index_t, index_t j) { return T(0.5 + std::ldexp(1.0, -10) * j); });
    const auto errors = backward_errors(a, x, b);
    EXPECT_EQ(errors.size(), std::size_t{k});
    for (index_t j = 0; j < std::min<index_t>(k, static_cast<index_t>(errors.size())); ++j) {
      const double d = std::ldexp(1.0, -10) * j;
      EXPECT_NEAR(errors[j], 2 * d / (2 * (0.5 + d) + 1), 1e-6 * (1 + errors[j])) << "column " << j;
    }
  }
}

}  // namespace
