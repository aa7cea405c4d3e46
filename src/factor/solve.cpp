// Solves with the distributed LU factors of A, for many right-hand sides: with A, its
// transpose or its conjugate transpose.
#include <algorithm>
#include <string>
#include <type_traits>
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

// Few right-hand sides (b in one process column): moving the factors' block columns to
// b, as the sweeps above do, would cost a pass of the whole matrix over the network per
// solve. Here the factors stay in place and only pieces of b travel: each process row
// keeps its rows of b on every rank of the row (w), partial products are formed where
// the factors are and summed onto the block being solved. Factors of type F are applied
// in T's arithmetic (solve_widened); with F = T their memory is used as it is.
template <scalar F, scalar T>
class few_columns {
public:
  few_columns(const dist_matrix<F>& lu, const dist_matrix<T>& b)
      : lu_(lu), nrhs_(b.cols()), ld_(std::max<index_t>(1, lu.local_rows())) {
    w_.assign(static_cast<std::size_t>(ld_ * nrhs_), T(0));
    if (lu.grid().mycol() == home(b))
      copy_block(lu.local_rows(), nrhs_, b.data(), b.ld(), w_.data(), ld_);
    comm::broadcast(lu.grid().row(), w_.data(), ld_ * nrhs_, home(b));
  }

  void store(dist_matrix<T>& b) const {
    if (lu_.grid().mycol() == home(b))
      copy_block(lu_.local_rows(), nrhs_, w_.data(), ld_, b.data(), b.ld());
  }

  // Solves with L (forward) or U (backward). Rank (p, q) sums the products of its
  // own block columns in acc; the owner of a diagonal block collects its row's sums,
  // solves, and sends the result down its process column for the next products.
  void fan_in(triangle part) {
    const auto& grid = lu_.grid();
    const index_t blocks = lu_.layout().rows.block_count();
    std::vector<T> acc(w_.size(), T(0)), piece;
    for (index_t s = 0; s < blocks; ++s) {
      const block_column<F> at(lu_, part == triangle::lower ? s : blocks - 1 - s);
      const index_t jb = at.jb;
      piece.resize(static_cast<std::size_t>(jb * nrhs_));
      if (grid.myrow() == at.pr) {
        const bool own = grid.mycol() == at.pc;
        for (index_t c = 0; c < nrhs_; ++c)
          for (index_t i = 0; i < jb; ++i)
            piece[i + c * jb] = (own ? row(at.lrk + i, c) : T(0)) - acc[at.lrk + i + c * ld_];
        comm::sum(grid.row(), piece.data(), jb * nrhs_);
        if (own) solve_diagonal(at, part, op::none, piece);
      }
      if (grid.mycol() != at.pc) continue;
      comm::broadcast(grid.col(), piece.data(), jb * nrhs_, at.pr);
      const auto [first, count] = at.off_diagonal(part);
      const auto [l, ldl] = widened(first, at.lck, count, jb);
      blas::gemm_few(op::none, count, nrhs_, jb, T(1), l, ldl, piece.data(), jb, T(1),
                     acc.data() + first, ld_);
    }
    share_solved_blocks();
  }

  // Solves with op(U) (forward) or op(L) (backward), op a transpose: the owners of
  // block column k form their products with the rows already solved, sum them down the
  // column onto the diagonal block's owner, which solves and sends along its row.
  void fan_out(triangle part, op how) {
    const auto& grid = lu_.grid();
    const index_t blocks = lu_.layout().rows.block_count();
    std::vector<T> piece;
    for (index_t s = 0; s < blocks; ++s) {
      const block_column<F> at(lu_, part == triangle::upper ? s : blocks - 1 - s);
      const index_t jb = at.jb;
      piece.assign(static_cast<std::size_t>(jb * nrhs_), T(0));
      if (grid.mycol() == at.pc) {
        const auto [first, count] = at.off_diagonal(part);
        const auto [f, ldf] = widened(first, at.lck, count, jb);
        blas::gemm_few(how, jb, nrhs_, count, T(1), f, ldf, w_.data() + first, ld_, T(0),
                       piece.data(), jb);
        comm::sum(grid.col(), piece.data(), jb * nrhs_);
        if (grid.myrow() == at.pr) {
          for (index_t c = 0; c < nrhs_; ++c)
            for (index_t i = 0; i < jb; ++i)
              piece[i + c * jb] = row(at.lrk + i, c) - piece[i + c * jb];
          solve_diagonal(at, part, how, piece);
        }
      }
      if (grid.myrow() != at.pr) continue;
      comm::broadcast(grid.row(), piece.data(), jb * nrhs_, at.pc);
      copy_block(jb, nrhs_, piece.data(), jb, w_.data() + at.lrk, ld_);
    }
  }

private:
  static int home(const dist_matrix<T>& b) { return b.layout().cols.block_owner(0); }
  T& row(index_t li, index_t c) { return w_[li + c * ld_]; }

  // The local rows x cols block of the factors at (li, lj), as T with its leading
  // dimension: converted into scratch_ when F is narrower, so the factors stay narrow
  // in memory and the substitutions run in T's precision.
  std::pair<const T*, index_t> widened(index_t li, index_t lj, index_t rows, index_t cols) {
    if constexpr (std::is_same_v<F, T>) {
      return {lu_.at(li, lj), lu_.ld()};
    } else {
      scratch_.resize(static_cast<std::size_t>(rows * cols));
      for (index_t c = 0; c < cols; ++c)
        std::copy_n(lu_.at(li, lj + c), rows, scratch_.data() + c * rows);
      return {scratch_.data(), rows};
    }
  }

  void solve_diagonal(const block_column<F>& at, triangle part, op how, std::vector<T>& piece) {
    const bool unit = part == triangle::lower;
    const auto [d, ldd] = widened(at.lrk, at.lck, at.jb, at.jb);
    blas::trsm_left(part, unit ? diagonal::unit : diagonal::non_unit, how, at.jb, nrhs_, T(1), d,
                    ldd, piece.data(), at.jb);
    copy_block(at.jb, nrhs_, piece.data(), at.jb, w_.data() + at.lrk, ld_);
  }

  // After fan_in each block of w is right only on its diagonal owner: the others zero
  // theirs and the row sums them.
  void share_solved_blocks() {
    const auto& rows = lu_.layout().rows;
    const auto& grid = lu_.grid();
    for (index_t k = 0; k < rows.block_count(); ++k) {
      if (rows.block_owner(k) != grid.myrow() || lu_.layout().cols.block_owner(k) == grid.mycol())
        continue;
      const index_t lrk = rows.local_begin(grid.myrow(), rows.block_start(k));
      for (index_t c = 0; c < nrhs_; ++c)
        std::fill_n(w_.data() + lrk + c * ld_, rows.block_size(k), T(0));
    }
    comm::sum(grid.row(), w_.data(), ld_ * nrhs_);
  }

  const dist_matrix<F>& lu_;
  index_t nrhs_, ld_;
  std::vector<T> w_, scratch_;
};

// solve() and solve_widened(): factors of type F, right-hand sides and arithmetic of T.
template <scalar F, scalar T>
void solve_with_factors(const dist_matrix<F>& lu, std::span<const index_t> pivots,
                        dist_matrix<T>& b, solve_with with, const char* name) {
  if (&b.grid() != &lu.grid() || b.rows() != lu.rows() || b.block() != lu.block() ||
      static_cast<index_t>(pivots.size()) != lu.rows())
    throw error(error_kind::usage,
                std::string(name) +
                    ": right-hand sides must match the factors' order, grid and block size");
  const detail::column_range all[] = {{0, b.local_cols()}};
  detail::interchange_buffers<T> buffers;
  const auto& rows = b.layout().rows;
  // Up to a block of right-hand sides lie in one process column.
  const bool few = b.cols() <= b.block();
  constexpr bool same = std::is_same_v<F, T>;
  if (!same && !few)  // the sweeps move whole factor blocks and work in F's type
    throw error(error_kind::usage, std::string(name) + ": at most a block of right-hand sides");
  if (with == solve_with::a) {
    // P A = L U: x = inv(U) inv(L) P b.
    detail::interchange_rows(b, 0, pivots, all, buffers);
    if (few) {
      few_columns<F, T> w(lu, b);
      w.fan_in(triangle::lower);
      w.fan_in(triangle::upper);
      w.store(b);
    } else if constexpr (same) {
      sweep(lu, b, triangle::lower);
      sweep(lu, b, triangle::upper);
    }
    return;
  }
  // A^T = U^T L^T P: x = P^T inv(L^T) inv(U^T) b, and alike with conjugates.
  const op how = with == solve_with::transpose ? op::transpose : op::adjoint;
  if (few) {
    few_columns<F, T> w(lu, b);
    w.fan_out(triangle::upper, how);
    w.fan_out(triangle::lower, how);
    w.store(b);
  } else if constexpr (same) {
    sweep_transposed(lu, b, triangle::upper, how);
    sweep_transposed(lu, b, triangle::lower, how);
  }
  detail::interchange_rows(b, detail::plan_interchanges(rows, b.grid().myrow(), 0, pivots, true),
                           all, buffers);
}

}  // namespace

template <scalar T>
void solve(const dist_matrix<T>& lu, std::span<const index_t> pivots, dist_matrix<T>& b,
           solve_with with) {
  solve_with_factors(lu, pivots, b, with, "solve");
}

template <scalar T>
void solve_widened(const dist_matrix<narrow_t<T>>& lu, std::span<const index_t> pivots,
                   dist_matrix<T>& b, solve_with with) {
  solve_with_factors(lu, pivots, b, with, "solve_widened");
}

#define INSTANTIATE(T)                                                                     \
  template void solve<T>(const dist_matrix<T>&, std::span<const index_t>, dist_matrix<T>&, \
                         solve_with);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

template void solve_widened<double>(const dist_matrix<float>&, std::span<const index_t>,
                                    dist_matrix<double>&, solve_with);
template void solve_widened<std::complex<double>>(const dist_matrix<std::complex<float>>&,
                                                  std::span<const index_t>,
                                                  dist_matrix<std::complex<double>>&, solve_with);

}  // namespace gridlu
