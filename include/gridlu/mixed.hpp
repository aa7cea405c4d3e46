// Double-precision answers for the price of a single-precision factorization: factor a
// single-precision copy of A, then refine X with residuals in double against A itself.
// Classical refinement follows Langou, Luszczek, Kurzak, Buttari, Dongarra, "Exploiting
// the performance of 32 bit floating point arithmetic in obtaining 64 bit accuracy"
// (SC 2006); the Krylov variant solves each correction equation by GMRES preconditioned
// with the single-precision factors (Carson & Higham, SIAM J. Sci. Comput. 2017, 2018).
#pragma once

#include <span>
#include <string>
#include <vector>

#include "gridlu/lu.hpp"
#include "gridlu/trust.hpp"

namespace gridlu {

// How each correction is found: one solve with the single-precision factors, or GMRES
// on A d = r preconditioned by them, for systems too ill-conditioned for the first.
enum class refinement_method { classical, krylov };

struct mixed_outcome {
  // Corrections applied. Once the stopping rule is met, one more correction that does
  // not halve the normwise backward error is tried and undone: not counted or recorded.
  int iterations = 0;
  // X met the stopping rule; otherwise the caller falls back to a double factorization.
  bool converged = false;
  std::string why;  // what went wrong, when not converged
  // The worst over the right-hand sides, for the first X (a solve with the single
  // factors) and after each correction: the normwise backward error
  // ||r||_inf / (||A||_inf ||x||_inf + ||b||_inf), and ||r||_2 / (||x||_2 ||A||_F sqrt(n) u),
  // at most 1 once converged.
  std::vector<double> normwise_backward_errors, residual_ratios;
  // GMRES iterations of each correction, summed over the right-hand sides (Krylov only).
  std::vector<int> inner_iterations;
  // A's norms, from the one pass the stopping rules make over A: what measure_matrix
  // gives (up to rounding), so that judging X needs no other pass.
  matrix_figures matrix;
};

// Langou et al.'s limit on refinement steps before falling back.
inline constexpr int mixed_most_iterations = 30;

// Finds x with a x = b, T = double or complex<double>, from `lu` and `pivots`: the
// factors of a single-precision copy of a (same grid and block size). x (n x k like b)
// is overwritten, with the last iterate when not converged; a, lu and b are not
// changed. Collective.
template <scalar T>
mixed_outcome refine_mixed(const dist_matrix<T>& a, const dist_matrix<narrow_t<T>>& lu,
                           std::span<const index_t> pivots, const dist_matrix<T>& b,
                           dist_matrix<T>& x,
                           refinement_method method = refinement_method::classical);

// Why mixed precision cannot start, beside the refinement's own reasons.
inline constexpr const char* mixed_out_of_range = "A has entries beyond single precision's range";
inline std::string mixed_zero_pivot(index_t column) {
  return "the single-precision copy of A has an exactly zero pivot in column " +
         std::to_string(column + 1);
}

// Copies a into `to` (single precision, same order, grid and block size). Returns false,
// on every rank, when an entry lies beyond single precision's range. Collective.
template <scalar T>
bool narrow_copy(const dist_matrix<T>& a, dist_matrix<narrow_t<T>>& to);

struct mixed_solution {
  lu_result factors;  // of the single-precision copy, held in `single`
  mixed_outcome refinement;
};

// The whole of it in one call: `single` (a's order, grid and block size) receives a
// single-precision copy of a and then its factors; x holds b on entry and the refined
// solution on return. An a beyond single precision's range or an exactly zero pivot in
// single precision is a failed outcome with x unchanged.
template <scalar T>
mixed_solution solve_mixed(const dist_matrix<T>& a, dist_matrix<narrow_t<T>>& single,
                           dist_matrix<T>& x,
                           refinement_method method = refinement_method::classical,
                           const lu_options& options = {});

}  // namespace gridlu
