// LU factorization with partial pivoting of a distributed square matrix, and the
// solve with its factors.
#pragma once

#include <functional>
#include <span>
#include <vector>

#include "gridlu/matrix.hpp"

namespace gridlu {

// Seconds one rank spent in each part of the factorization; the broadcasts and the pivot
// search include the time spent waiting for the other ranks.
struct lu_phases {
  double panel = 0;         // panel factorization, pivot search included
  double pivot_search = 0;  // the reductions that find the pivots
  double interchange = 0;   // row interchanges outside the panel
  double broadcast = 0;     // panel along the rows, U block row down the columns
  double trsm = 0;          // U block row
  double gemm = 0;          // trailing update
};

struct lu_result {
  // Row i was interchanged with row pivots[i] (0-based, i <= pivots[i]), applied in
  // order i = 0..n-1: LAPACK's ipiv less one. The same on every rank.
  std::vector<index_t> pivots;
  // First column (0-based) whose pivot was exactly zero, or -1. The factorization goes
  // on past it, as LAPACK's does; its info is this plus one.
  index_t first_zero_pivot = -1;
  // Columns eliminated so far: n when complete; pivots beyond it are not yet chosen.
  index_t columns_done = 0;
  lu_phases phases;  // of this call, on this rank
};

struct lu_options {
  // Called on every rank after each block step with the state so far (a holds the
  // matching working matrix); returning true stops the factorization there. Every rank
  // must return the same.
  std::function<bool(const lu_result&)> after_step;
};

// Overwrites a with L (unit lower, below the diagonal) and U, in LAPACK's convention:
// P A = L U. Collective over a's grid.
template <scalar T>
lu_result factor(dist_matrix<T>& a, const lu_options& options = {});

// Continues a factorization stopped after state.columns_done columns (a holding the
// working matrix then, on any grid and block size): the state of a checkpoint.
template <scalar T>
lu_result factor(dist_matrix<T>& a, lu_result state, const lu_options& options = {});

// Overwrites b (n x k, same grid and block size as lu) with inv(A) b.
template <scalar T>
void solve(const dist_matrix<T>& lu, std::span<const index_t> pivots, dist_matrix<T>& b);

}  // namespace gridlu
