// LU factorization with partial pivoting of a distributed square matrix, and the
// solve with its factors.
#pragma once

#include <functional>
#include <span>
#include <vector>

#include "gridlu/matrix.hpp"

namespace gridlu {

// Seconds one rank spent in each part of the factorization.
struct lu_phases {
  double panel = 0;         // panel factorization, pivot search included
  double pivot_search = 0;  // the reductions that find the pivots, waits for peers included
  double interchange = 0;   // row interchanges outside the panel
  double broadcast = 0;     // U block rows shared along process columns, waits included
  double trsm = 0;          // U block rows
  double gemm = 0;          // trailing and look-ahead updates
  double wait = 0;          // waiting for a panel from along the process row
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
  // True when the matrix is exactly the working matrix after columns_done columns, a
  // state that can be saved or continued on another grid: no panel is factored ahead
  // and the interchanges held back from the finished columns are applied. Between
  // settled states neither holds. Always true when factor() returns.
  bool settled = true;
  lu_phases phases;  // of this call, on this rank
};

// What the factorization does after a block step.
enum class step_request {
  go_on,
  // Factor nothing more ahead and settle within `lookahead` steps; with no panel ahead
  // that is at once, and after_step is called again for the same step.
  settle,
  stop,  // settle, then return
};

struct lu_options {
  // Panels factored ahead of the trailing update (0: none). The owners of the next
  // panels update and factor them first and send them while the rest of the matrix is
  // updated, which takes the panel and its broadcast off the critical path.
  int lookahead = 1;
  // Columns per GEMM call of the trailing update; MPI moves the panels in flight between
  // calls (a non-blocking message progresses only inside MPI calls). Each call packs
  // the L panel again, about 1/w of its work for w columns: 2048 measured 3 % faster
  // than 512 at n = 8192 on 2 ranks.
  index_t update_columns = 2048;
  // Called on every rank after each block step with the state so far; every rank must
  // return the same.
  std::function<step_request(const lu_result&)> after_step;
};

// Overwrites a with L (unit lower, below the diagonal) and U, in LAPACK's convention:
// P A = L U. Collective over a's grid.
template <scalar T>
lu_result factor(dist_matrix<T>& a, const lu_options& options = {});

// Continues a factorization stopped after state.columns_done columns (a holding the
// working matrix then, on any grid and block size): the state of a checkpoint.
template <scalar T>
lu_result factor(dist_matrix<T>& a, lu_result state, const lu_options& options = {});

// The system a solve with A's factors answers: A x = b, A^T x = b or A^H x = b (the
// conjugate transpose; the same as A^T for real types).
enum class solve_with { a, transpose, adjoint };

// Overwrites b (n x k, same grid and block size as lu) with inv(op(A)) b, op as `with`
// says. Collective over lu's grid.
template <scalar T>
void solve(const dist_matrix<T>& lu, std::span<const index_t> pivots, dist_matrix<T>& b,
           solve_with with = solve_with::a);

// solve() with single-precision factors (narrow_t<T>) and T = double or complex<double>
// right-hand sides, in T's arithmetic: each piece of the factors is widened just before
// it is used, so they stay single in memory while the substitutions keep double's
// accuracy. For at most b.block() right-hand sides (one process column); more is a
// usage error. Collective over lu's grid.
template <scalar T>
void solve_widened(const dist_matrix<narrow_t<T>>& lu, std::span<const index_t> pivots,
                   dist_matrix<T>& b, solve_with with = solve_with::a);

}  // namespace gridlu
