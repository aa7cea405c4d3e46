// The triangular solve of the factorization's U block rows, shared with `gridlu
// calibrate`, which times it as the factorization runs it.
#pragma once

#include "kernels/blas.hpp"

namespace gridlu::detail {

// Below this many rows a unit lower triangle goes to the library's TRSM.
constexpr index_t solve_base = 32;

// B = inv(L) B for a unit lower m x m triangle L: halves joined by a GEMM, down to
// solve_base rows for the library's TRSM, so that most of its flops are GEMM's (a base
// of 32 rows beat 16, and TRSM alone, by 3-15 %; figures in DEVELOPERS.md).
template <scalar T>
void solve_unit_lower(index_t m, index_t n, const T* l, index_t ldl, T* b, index_t ldb) {
  if (m <= solve_base) {
    blas::trsm_left(blas::triangle::lower, blas::diagonal::unit, blas::op::none, m, n, T(1), l, ldl,
                    b, ldb);
    return;
  }
  const index_t h = m / 2;
  solve_unit_lower(h, n, l, ldl, b, ldb);
  blas::gemm(blas::op::none, blas::op::none, m - h, n, h, T(-1), l + h, ldl, b, ldb, T(1), b + h,
             ldb);
  solve_unit_lower(m - h, n, l + h + h * ldl, ldl, b + h, ldb);
}

}  // namespace gridlu::detail
