// Solves with the distributed LU factors of A, for many right-hand sides: with A, its
// transpose or its conjugate transpose.
#include <algorithm>
#include <utility>

#include "factor/interchange.hpp"
#include "gridlu/lu.hpp"
#include "instantiate.hpp"
#include "kernels/blas.hpp"

namespace gridlu {
namespace {

using blas::diagonal;
using blas::op;
using blas::triangle;

// Block k of the factors as this rank sees it, and the pieces of its block column,
// which the owning process column sends along each process row.
template <scalar T>
struct block_column {
  block_column(const dist_matrix<T>& factors, index_t k)
      : lu(factors),
        j0(lu.layout().rows.block_start(k)),
        jb(lu.layout().rows.block_size(k)),
        pr(lu.layout().rows.block_owner(k)),
        pc(lu.layout().cols.block_owner(k)),
        lrk(lu.layout().rows.local_begin(lu.grid().myrow(), j0)),
        lck(lu.layout().cols.local_begin(lu.grid().mycol(), j0)) {}

  // This rank's rows of the triangle beside the diagonal block, as (first, count):
  // below it for L, above it for U.
  std::pair<index_t, index_t> off_diagonal(triangle part) const {
    if (part == triangle::upper) return {0, lrk};
    const index_t first = lu.layout().rows.local_begin(lu.grid().myrow(), j0 + jb);
    return {first, lu.local_rows() - first};
  }

  // Local rows [first, first + count) of the block column, on every rank of the row.
  void fetch(index_t first, index_t count, std::vector<T>& to) const {
    to.resize(static_cast<std::size_t>(count * jb));
    if (lu.grid().mycol() == pc)
      copy_block(count, jb, lu.at(first, lck), lu.ld(), to.data(), count);
    comm::broadcast(lu.grid().row(), to.data(), count * jb, pc);
  }

  const dist_matrix<T>& lu;
  index_t j0, jb;
  int pr, pc;
  index_t lrk, lck;
};

// Solves with the unit-lower (L) or upper (U) triangle of lu, block row by block row:
// the diagonal block goes along its process row, the solved block row of b down the
// process columns, and the triangle's column below (L) or above (U) along the rows for
// one GEMM per rank.
template <scalar T>
void sweep(const dist_matrix<T>& lu, dist_matrix<T>& b, triangle part) {
  const index_t nrhs = b.local_cols(), blocks = lu.layout().rows.block_count();
  const bool lower = part == triangle::lower;
  std::vector<T> diag, solved, column;
  for (index_t s = 0; s < blocks; ++s) {
    const block_column<T> at(lu, lower ? s : blocks - 1 - s);
    const index_t jb = at.jb;
    solved.resize(static_cast<std::size_t>(jb * nrhs));
    if (lu.grid().myrow() == at.pr) {
      at.fetch(at.lrk, jb, diag);
      blas::trsm_left(part, lower ? diagonal::unit : diagonal::non_unit, op::none, jb, nrhs, T(1),
                      diag.data(), jb, b.at(at.lrk, 0), b.ld());
      copy_block(jb, nrhs, b.at(at.lrk, 0), b.ld(), solved.data(), jb);
    }
    comm::broadcast(lu.grid().col(), solved.data(), jb * nrhs, at.pr);
    const auto [first, count] = at.off_diagonal(part);  // rows still to update
    at.fetch(first, count, column);
    blas::gemm(op::none, op::none, count, nrhs, jb, T(-1), column.data(), count, solved.data(), jb,
               T(1), b.at(first, 0), b.ld());
  }
}

// Solves with op(triangle) of lu, op a transpose: op(U) is lower and goes forward, op(L)
// upper and backward. Block row k of b needs the already solved rows times the
// triangle's column block k (above the diagonal for U, below for L), which lies on the
// same process rows as those rows of b: that column goes along its process row, each
// rank forms its share of the product and the shares are summed down the process column
// onto block row k. One message each way per block, as in the untransposed sweep.
template <scalar T>
void sweep_transposed(const dist_matrix<T>& lu, dist_matrix<T>& b, triangle part, op how) {
  const index_t nrhs = b.local_cols(), blocks = lu.layout().rows.block_count();
  const bool upper = part == triangle::upper;
  std::vector<T> diag, column, partial;
  for (index_t s = 0; s < blocks; ++s) {
    const block_column<T> at(lu, upper ? s : blocks - 1 - s);
    const index_t jb = at.jb;
    const auto [first, count] = at.off_diagonal(part);  // rows already solved
    at.fetch(first, count, column);
    partial.assign(static_cast<std::size_t>(jb * nrhs), T(0));
    blas::gemm(how, op::none, jb, nrhs, count, T(1), column.data(), count, b.at(first, 0), b.ld(),
               T(0), partial.data(), jb);
    comm::sum(lu.grid().col(), partial.data(), jb * nrhs);
    if (lu.grid().myrow() != at.pr) continue;
    for (index_t c = 0; c < nrhs; ++c)
      for (index_t i = 0; i < jb; ++i) *b.at(at.lrk + i, c) -= partial[i + c * jb];
    at.fetch(at.lrk, jb, diag);
    blas::trsm_left(part, upper ? diagonal::non_unit : diagonal::unit, how, jb, nrhs, T(1),
                    diag.data(), jb, b.at(at.lrk, 0), b.ld());
  }
}

}  // namespace

template <scalar T>
void solve(const dist_matrix<T>& lu, std::span<const index_t> pivots, dist_matrix<T>& b,
           solve_with with) {
  if (&b.grid() != &lu.grid() || b.rows() != lu.rows() || b.block() != lu.block() ||
      static_cast<index_t>(pivots.size()) != lu.rows())
    throw error(error_kind::usage,
                "solve: right-hand sides must match the factors' order, grid and block size");
  const detail::column_range all[] = {{0, b.local_cols()}};
  detail::interchange_buffers<T> buffers;
  const auto& rows = b.layout().rows;
  if (with == solve_with::a) {
    // P A = L U: x = inv(U) inv(L) P b.
    detail::interchange_rows(b, 0, pivots, all, buffers);
    sweep(lu, b, triangle::lower);
    sweep(lu, b, triangle::upper);
    return;
  }
  // A^T = U^T L^T P: x = P^T inv(L^T) inv(U^T) b, and alike with conjugates.
  const op how = with == solve_with::transpose ? op::transpose : op::adjoint;
  sweep_transposed(lu, b, triangle::upper, how);
  sweep_transposed(lu, b, triangle::lower, how);
  detail::interchange_rows(b, detail::plan_interchanges(rows, b.grid().myrow(), 0, pivots, true),
                           all, buffers);
}

#define INSTANTIATE(T)                                                                     \
  template void solve<T>(const dist_matrix<T>&, std::span<const index_t>, dist_matrix<T>&, \
                         solve_with);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
