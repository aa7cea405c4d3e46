// How well a computed solution solves the system: the distributed measurements behind
// the trust figures (gridlu/trust.hpp). Sums are formed in double precision, so that
// single-precision entries cannot overflow them, and a NaN anywhere makes a figure NaN.
#pragma once

#include <span>
#include <vector>

#include "gridlu/lu.hpp"
#include "gridlu/matrix.hpp"
#include "gridlu/trust.hpp"

namespace gridlu {

// ||m||_1, ||m||_inf and max |m_ij|. Same values on every rank.
template <scalar T>
matrix_figures measure_matrix(const dist_matrix<T>& m);

// max |U_ij| and min |U_ii| of LU factors, and estimates of ||inv(M)||_1 and
// ||inv(M)||_inf for the system matrix M that `with` names.
template <scalar T>
factor_figures measure_factors(const dist_matrix<T>& lu, std::span<const index_t> pivots,
                               solve_with with);

struct inverse_norms {
  double norm_1 = 0, norm_inf = 0;
};
// Hager's estimator with Higham's refinements: lower bounds, in practice within a small
// factor of the exact norms. About a dozen solves with one right-hand side.
template <scalar T>
inverse_norms estimate_inverse_norms(const dist_matrix<T>& lu, std::span<const index_t> pivots,
                                     solve_with with);

// r = b - m x, formed in the wide type (double for single-precision data); m is n x n,
// x and b n x k, all on one grid and block size.
template <scalar T>
dist_matrix<wide_t<T>> residual(const dist_matrix<T>& m, const dist_matrix<T>& x,
                                const dist_matrix<T>& b);

// m x in T, m n x n and x n x k on one grid and block size.
template <scalar T>
dist_matrix<T> product(const dist_matrix<T>& m, const dist_matrix<T>& x);

// Normwise and componentwise backward errors of each column of x as a solution of
// m x = b, from its residual r and m's figures.
template <scalar T>
solution_figures backward_errors(const dist_matrix<T>& m, const matrix_figures& mf,
                                 const dist_matrix<T>& x, const dist_matrix<T>& b,
                                 const dist_matrix<wide_t<T>>& r);

struct refinement {
  int iterations = 0;
  // The worst over the right-hand sides, before refinement and after each iteration.
  std::vector<double> normwise, componentwise;
  solution_figures final;  // of the X returned
};

// Classical iterative refinement in the working precision: r = b - m x (formed in the
// wide type), d = inv(m) r with the factors of A (m = op(A) as `with` says), x += d, for
// as long as the componentwise backward error is above u and at least halves, at most
// five times (the stopping rule of LAPACK's xGERFS).
template <scalar T>
refinement refine(const dist_matrix<T>& m, const matrix_figures& mf, const dist_matrix<T>& lu,
                  std::span<const index_t> pivots, solve_with with, dist_matrix<T>& x,
                  const dist_matrix<T>& b);

}  // namespace gridlu
