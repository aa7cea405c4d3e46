// LAPACK on a gathered copy: the reference the accuracy tests compare against.
#pragma once

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <vector>

#include "kernels/blas.hpp"

namespace gridlu::testing_support {

// LAPACK's getrf and getrs on a column-major n x n a and n x k b.
template <class T>
std::vector<T> lapack_solve(std::vector<T> a, std::vector<T> b, index_t n, index_t k,
                            blas::op how = blas::op::none) {
  std::vector<std::int32_t> ipiv(static_cast<std::size_t>(n));
  EXPECT_EQ(blas::lapack_getrf<T>(n, n, a.data(), n, ipiv.data()), 0);
  EXPECT_EQ(blas::lapack_getrs<T>(how, n, k, a.data(), n, ipiv.data(), b.data(), n), 0);
  return b;
}

// max |ours - ref| / max |ref| over all entries.
// Largest column sum (p = 1) or row sum (p = inf) of a gathered column-major n x n matrix.
template <class T>
double gathered_norm(const std::vector<T>& a, index_t n, bool columns) {
  double best = 0;
  for (index_t k = 0; k < n; ++k) {
    double s = 0;
    for (index_t l = 0; l < n; ++l) s += std::abs(columns ? a[l + k * n] : a[k + l * n]);
    best = std::max(best, s);
  }
  return best;
}

template <class T>
double relative_difference(const std::vector<T>& ours, const std::vector<T>& ref) {
  double diff = 0, size = 0;
  for (std::size_t i = 0; i < ref.size(); ++i) {
    diff = std::max(diff, static_cast<double>(std::abs(ours[i] - ref[i])));
    size = std::max(size, static_cast<double>(std::abs(ref[i])));
  }
  return diff / size;
}

}  // namespace gridlu::testing_support
