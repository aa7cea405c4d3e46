// How well a computed solution solves the system: norms and backward errors.
#pragma once

#include <vector>

#include "gridlu/matrix.hpp"

namespace gridlu {

// ||a||_inf, the largest row sum of |a_ij|. Same value on every rank.
template <scalar T>
real_t<T> norm_inf(const dist_matrix<T>& a);

// ||column j||_inf for every column j. Same values on every rank.
template <scalar T>
std::vector<real_t<T>> column_norms_inf(const dist_matrix<T>& a);

// r -= a x, with a n x n and x, r n x k on one grid and block size.
template <scalar T>
void subtract_product(const dist_matrix<T>& a, const dist_matrix<T>& x, dist_matrix<T>& r);

// Normwise backward error of each column x of `x` as a solution of a x = b
// (Rigal and Gaches, 1967): ||b - a x||_inf / (||a||_inf ||x||_inf + ||b||_inf).
template <scalar T>
std::vector<double> backward_errors(const dist_matrix<T>& a, const dist_matrix<T>& x,
                                    const dist_matrix<T>& b);

}  // namespace gridlu
