// Reductions over a distributed n x 1 vector, the same answer on every rank: the steps of
// the norm estimator. Entries are judged in double; a NaN propagates.
#pragma once

#include <cmath>
#include <cstdint>
#include <limits>

#include "gridlu/matrix.hpp"

namespace gridlu::detail {

// Calls f(global row, value) for each local entry of column 0.
template <scalar T, class F>
void for_each_entry(const dist_matrix<T>& v, F&& f) {
  if (v.local_cols() == 0) return;
  for (index_t li = 0; li < v.local_rows(); ++li)
    f(v.layout().rows.global(v.grid().myrow(), li), *v.at(li, 0));
}

template <scalar T>
double sum_abs(const dist_matrix<T>& v) {
  double s = 0;
  for_each_entry(v, [&](index_t, T x) { s += std::abs(static_cast<wide_t<T>>(x)); });
  comm::sum(v.grid().all(), &s, 1);
  return s;
}

// x / |x| entrywise, 1 where x is zero: the subgradient of the 1-norm.
template <scalar T>
dist_matrix<T> sign_vector(const dist_matrix<T>& v) {
  dist_matrix<T> s = v;
  for (index_t li = 0; li < s.local_rows() * s.local_cols(); ++li) {
    T& x = *s.at(li, 0);
    const auto m = std::abs(x);
    x = m == 0 ? T(1) : x / m;
  }
  return s;
}

template <scalar T>
bool same_entries(const dist_matrix<T>& a, const dist_matrix<T>& b) {
  std::int64_t differ = 0;
  for (index_t li = 0; li < a.local_rows() * a.local_cols(); ++li)
    differ |= *a.at(li, 0) != *b.at(li, 0);
  comm::max(a.grid().all(), &differ, 1);
  return differ == 0;
}

// The first global row of the largest |v_i| (0 if the largest is NaN).
template <scalar T>
index_t largest_entry(const dist_matrix<T>& v) {
  double best = -1;
  std::int64_t row = std::numeric_limits<std::int64_t>::max();
  for_each_entry(v, [&](index_t i, T x) {
    const double m = std::abs(static_cast<wide_t<T>>(x));
    if (m > best) best = m, row = i;
  });
  double top = best;
  comm::max(v.grid().all(), &top, 1);
  if (best != top) row = std::numeric_limits<std::int64_t>::max();
  comm::min(v.grid().all(), &row, 1);
  return row == std::numeric_limits<std::int64_t>::max() ? 0 : row;
}

// Entry i, in the wide type, on every rank.
template <scalar T>
wide_t<T> entry_at(const dist_matrix<T>& v, index_t i) {
  wide_t<T> x = 0;
  if (const T* p = v.find(i, 0)) x = *p;
  comm::sum(v.grid().all(), &x, 1);
  return x;
}

}  // namespace gridlu::detail
