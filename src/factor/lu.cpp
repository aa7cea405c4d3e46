// Right-looking blocked LU with partial pivoting on the block-cyclic grid.
#include "gridlu/lu.hpp"

#include <limits>

#include "factor/interchange.hpp"
#include "gridlu/kernels.hpp"
#include "instantiate.hpp"

namespace gridlu {
namespace {

// Adds the lifetime of the scope to a phase's total.
class phase_clock {
public:
  explicit phase_clock(double& total) : total_(total), start_(comm::wtime()) {}
  ~phase_clock() { total_ += comm::wtime() - start_; }
  phase_clock(const phase_clock&) = delete;
  phase_clock& operator=(const phase_clock&) = delete;

private:
  double& total_;
  double start_;
};

using blas::diagonal;
using blas::op;
using blas::triangle;

// Factors the panel of global columns [j0, j0 + jb) in place on the process column that
// owns it: per column one reduction finds the pivot, one broadcast hands the pivot row
// to the column, then interchange, scaling and a rank-1 update of the panel's remaining
// columns. pivots[t] gets the pivot row of column j0 + t; a zero pivot sets zero_column.
template <scalar T>
void factor_panel(dist_matrix<T>& a, index_t j0, index_t jb, index_t lc0, std::span<index_t> pivots,
                  index_t& zero_column, double& search_seconds) {
  const auto& rows = a.layout().rows;
  const auto& col = a.grid().col();
  const int me = a.grid().myrow();
  const index_t mloc = a.local_rows(), ld = a.ld();
  std::vector<T> pivot_row(jb), own_row(jb);
  const auto copy_row = [&](index_t li, T* to) {
    for (index_t c = 0; c < jb; ++c) to[c] = *a.at(li, lc0 + c);
  };
  const auto store_row = [&](index_t li, const T* from) {
    for (index_t c = 0; c < jb; ++c) *a.at(li, lc0 + c) = from[c];
  };
  for (index_t t = 0; t < jb; ++t) {
    const index_t j = j0 + t;
    const T* column = a.at(0, lc0 + t);
    comm::candidate mine{-1.0, -1};
    for (index_t li = rows.local_begin(me, j); li < mloc; ++li) {
      const double m = static_cast<double>(abs1(column[li]));
      if (m > mine.magnitude) mine = {m, rows.global(me, li)};
    }
    const auto found = [&] {
      const phase_clock clock(search_seconds);
      return comm::best(col, mine);
    }();
    const index_t r = found.row < 0 ? j : found.row;  // a column of NaNs keeps its row
    pivots[t] = r;

    const int owner_j = rows.owner(j), owner_r = rows.owner(r);
    if (me == owner_r) copy_row(rows.local(r), pivot_row.data());
    comm::broadcast(col, pivot_row.data(), jb, owner_r);
    if (r != j) {
      if (me == owner_j) {
        copy_row(rows.local(j), own_row.data());
        store_row(rows.local(j), pivot_row.data());
      }
      if (owner_j != owner_r) {
        if (me == owner_j) comm::send(col, own_row.data(), jb, owner_r);
        if (me == owner_r) comm::receive(col, own_row.data(), jb, owner_j);
      }
      if (me == owner_r) store_row(rows.local(r), own_row.data());
    }

    const T pivot = pivot_row[t];
    const index_t below = rows.local_begin(me, j + 1), count = mloc - below;
    T* l = a.at(below, lc0 + t);
    if (pivot == T(0)) {
      if (zero_column < 0) zero_column = j;
    } else if (std::abs(pivot) >= std::numeric_limits<real_t<T>>::min()) {
      blas::scale(count, T(1) / pivot, l);
    } else {  // 1/pivot would overflow
      for (index_t i = 0; i < count; ++i) l[i] /= pivot;
    }
    blas::rank1(count, jb - t - 1, T(-1), l, pivot_row.data() + t + 1, a.at(below, lc0 + t + 1),
                ld);
  }
}

}  // namespace

template <scalar T>
lu_result factor(dist_matrix<T>& a, lu_result state, const lu_options& options) {
  if (a.rows() != a.cols()) throw error(exit_code::usage, "LU needs a square matrix");
  const auto& grid = a.grid();
  const auto& rows = a.layout().rows;
  const auto& cols = a.layout().cols;
  const int myrow = grid.myrow(), mycol = grid.mycol();
  const index_t n = a.rows(), mloc = a.local_rows(), nloc = a.local_cols(), ld = a.ld();
  if (state.columns_done < 0 || state.columns_done > n)
    throw error(exit_code::internal, "factor: columns_done out of range");

  lu_result result = std::move(state);
  result.phases = {};
  result.pivots.resize(static_cast<std::size_t>(n));
  std::vector<T> panel, urow;
  std::vector<index_t> step;  // the panel's pivots, then its first zero-pivot column
  // Panels follow the distribution's blocks; a resumed factorization may start inside
  // one (it was cut with another block size), whose rest is then the first panel.
  for (index_t j0 = result.columns_done; j0 < n; j0 = result.columns_done) {
    const index_t k = rows.block_of(j0);
    const index_t jb = rows.block_start(k) + rows.block_size(k) - j0;
    const int pr = rows.block_owner(k), pc = cols.block_owner(k);
    const index_t lr0 = rows.local_begin(myrow, j0), mp = mloc - lr0;
    const index_t lc0 = cols.local_begin(mycol, j0);

    // Panel: factored by its process column, then sent along every process row.
    panel.resize(static_cast<std::size_t>(mp * jb));
    step.assign(static_cast<std::size_t>(jb + 1), -1);
    if (mycol == pc) {
      const phase_clock clock(result.phases.panel);
      factor_panel(a, j0, jb, lc0, std::span(step).first(jb), step[jb], result.phases.pivot_search);
      for (index_t c = 0; c < jb; ++c) std::copy_n(a.at(lr0, lc0 + c), mp, panel.data() + c * mp);
    }
    {
      const phase_clock clock(result.phases.broadcast);
      comm::broadcast(grid.row(), panel.data(), mp * jb, pc);
      comm::broadcast(grid.row(), step.data(), jb + 1, pc);
    }
    std::copy_n(step.begin(), jb, result.pivots.begin() + j0);
    if (result.first_zero_pivot < 0) result.first_zero_pivot = step[jb];

    // The panel's interchanges on the columns left and right of it.
    const detail::column_range outside[] = {{0, mycol == pc ? lc0 : nloc},
                                            {mycol == pc ? lc0 + jb : nloc, nloc}};
    {
      const phase_clock clock(result.phases.interchange);
      detail::interchange_rows(a, j0, std::span(step).first(jb), outside);
    }

    // Block row of U: solved on its process row, then sent down every process column.
    const index_t lc1 = cols.local_begin(mycol, j0 + jb), nr = nloc - lc1;
    urow.resize(static_cast<std::size_t>(jb * nr));
    if (myrow == pr) {
      const phase_clock clock(result.phases.trsm);
      blas::trsm_left(triangle::lower, diagonal::unit, jb, nr, T(1), panel.data(), mp,
                      a.at(lr0, lc1), ld);
      for (index_t c = 0; c < nr; ++c) std::copy_n(a.at(lr0, lc1 + c), jb, urow.data() + c * jb);
    }
    {
      const phase_clock clock(result.phases.broadcast);
      comm::broadcast(grid.col(), urow.data(), jb * nr, pr);
    }

    // Trailing update: one GEMM per rank.
    const index_t lr1 = rows.local_begin(myrow, j0 + jb);
    {
      const phase_clock clock(result.phases.gemm);
      blas::gemm(op::none, op::none, mloc - lr1, nr, jb, T(-1), panel.data() + (lr1 - lr0), mp,
                 urow.data(), jb, T(1), a.at(lr1, lc1), ld);
    }
    result.columns_done = j0 + jb;
    if (options.after_step && options.after_step(result)) break;
  }
  return result;
}

template <scalar T>
lu_result factor(dist_matrix<T>& a, const lu_options& options) {
  return factor(a, lu_result{}, options);
}

#define INSTANTIATE(T)                                                         \
  template lu_result factor<T>(dist_matrix<T>&, lu_result, const lu_options&); \
  template lu_result factor<T>(dist_matrix<T>&, const lu_options&);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
