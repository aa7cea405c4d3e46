#include "gridlu/accuracy.hpp"

#include <cmath>
#include <functional>
#include <limits>

#include "accuracy/figures.hpp"
#include "instantiate.hpp"
#include "kernels/blas.hpp"

namespace gridlu {
namespace {

using detail::keep_max;
using detail::keep_min;
using detail::ratio;

template <scalar T>
double magnitude(T x) {
  return std::abs(static_cast<wide_t<T>>(x));
}

// f(li, lj) maximized over each column; same values on every rank.
template <scalar T, class F>
std::vector<double> column_maxima(const dist_matrix<T>& a, F&& f) {
  std::vector<double> m(static_cast<std::size_t>(a.cols()), 0.0);
  for (index_t lj = 0; lj < a.local_cols(); ++lj) {
    double& top = m[a.layout().cols.global(a.grid().mycol(), lj)];
    for (index_t li = 0; li < a.local_rows(); ++li) keep_max(top, f(li, lj));
  }
  comm::max(a.grid().all(), m.data(), a.cols());
  return m;
}

// Copies a rows x cols block into `to` (leading dimension rows), f applied to each entry.
template <class T, class W, class F>
void pack(index_t rows, index_t cols, const T* from, index_t ld, std::vector<W>& to, F&& f) {
  to.resize(static_cast<std::size_t>(rows * cols));
  for (index_t c = 0; c < cols; ++c)
    for (index_t r = 0; r < rows; ++r) to[r + c * rows] = f(from[r + c * ld]);
}

// out += alpha f(m) f(x) for many columns of x: one outer product per block k of m's
// columns, m's block column along the process rows, x's block row down the process
// columns, one GEMM per rank.
template <scalar T, scalar W, class F>
void add_product_spread(const dist_matrix<T>& m, const dist_matrix<T>& x, W alpha, F&& f,
                        dist_matrix<W>& out) {
  const auto& grid = m.grid();
  const auto& inner = m.layout().cols;
  std::vector<W> left, right;
  for (index_t k = 0; k < inner.block_count(); ++k) {
    const index_t j0 = inner.block_start(k), jb = inner.block_size(k);
    const int pc = inner.block_owner(k), pr = x.layout().rows.block_owner(k);
    left.resize(static_cast<std::size_t>(m.local_rows() * jb));
    right.resize(static_cast<std::size_t>(jb * x.local_cols()));
    if (grid.mycol() == pc) pack(m.local_rows(), jb, m.at(0, inner.local(j0)), m.ld(), left, f);
    if (grid.myrow() == pr)
      pack(jb, x.local_cols(), x.at(x.layout().rows.local(j0), 0), x.ld(), right, f);
    comm::broadcast(grid.row(), left.data(), static_cast<index_t>(left.size()), pc);
    comm::broadcast(grid.col(), right.data(), static_cast<index_t>(right.size()), pr);
    blas::gemm(blas::op::none, blas::op::none, out.local_rows(), out.local_cols(), jb, alpha,
               left.data(), m.local_rows(), right.data(), jb, W(1), out.data(), out.ld());
  }
}

// The same for x in one process column: m stays where it is and only x's block rows
// travel, to the process column that holds the matching block column of m; each rank
// sums its own products and the process rows add them up. With f the identity, m's
// blocks are used in place.
template <scalar T, scalar W, class F>
void add_product_few(const dist_matrix<T>& m, const dist_matrix<T>& x, W alpha, F&& f,
                     dist_matrix<W>& out) {
  const auto& grid = m.grid();
  const auto& inner = m.layout().cols;
  const index_t rows = m.local_rows(), nrhs = x.cols(), ld = std::max<index_t>(1, rows);
  const int home = x.layout().cols.block_owner(0);
  std::vector<W> xs(static_cast<std::size_t>(ld * nrhs)), sum(xs.size(), W(0)), left, piece;
  if (grid.mycol() == home) {
    pack(rows, nrhs, x.data(), x.ld(), piece, f);
    copy_block(rows, nrhs, piece.data(), rows, xs.data(), ld);
  }
  comm::broadcast(grid.row(), xs.data(), ld * nrhs, home);
  for (index_t k = 0; k < inner.block_count(); ++k) {
    if (grid.mycol() != inner.block_owner(k)) continue;
    const index_t j0 = inner.block_start(k), jb = inner.block_size(k);
    const int pr = x.layout().rows.block_owner(k);
    piece.resize(static_cast<std::size_t>(jb * nrhs));
    if (grid.myrow() == pr)
      copy_block(jb, nrhs, xs.data() + x.layout().rows.local(j0), ld, piece.data(), jb);
    comm::broadcast(grid.col(), piece.data(), jb * nrhs, pr);
    const W* block = nullptr;
    index_t block_ld = rows;
    if constexpr (std::is_same_v<std::decay_t<F>, std::identity>) {
      block = m.at(0, inner.local(j0));
      block_ld = m.ld();
    } else {
      pack(rows, jb, m.at(0, inner.local(j0)), m.ld(), left, f);
      block = left.data();
    }
    blas::gemm_few(blas::op::none, rows, nrhs, jb, W(1), block, block_ld, piece.data(), jb, W(1),
                   sum.data(), ld);
  }
  comm::sum(grid.row(), sum.data(), ld * nrhs);
  if (grid.mycol() != home) return;
  for (index_t c = 0; c < nrhs; ++c)
    for (index_t i = 0; i < rows; ++i) *out.at(i, c) += alpha * sum[i + c * ld];
}

template <scalar T, scalar W, class F>
void add_product(const dist_matrix<T>& m, const dist_matrix<T>& x, W alpha, F&& f,
                 dist_matrix<W>& out) {
  if (x.cols() <= x.block())
    add_product_few(m, x, alpha, f, out);
  else
    add_product_spread(m, x, alpha, f, out);
}

}  // namespace

template <scalar T>
matrix_figures measure_matrix(const dist_matrix<T>& m) {
  std::vector<double> row_sums(static_cast<std::size_t>(m.local_rows()), 0.0),
      col_sums(static_cast<std::size_t>(m.local_cols()), 0.0);
  matrix_figures f;
  for (index_t lj = 0; lj < m.local_cols(); ++lj)
    for (index_t li = 0; li < m.local_rows(); ++li) {
      const double a = magnitude(*m.at(li, lj));
      row_sums[li] += a;
      col_sums[lj] += a;
      keep_max(f.max_abs, a);
    }
  comm::sum(m.grid().row(), row_sums.data(), m.local_rows());
  comm::sum(m.grid().col(), col_sums.data(), m.local_cols());
  for (const double s : row_sums) keep_max(f.norm_inf, s);
  for (const double s : col_sums) keep_max(f.norm_1, s);
  double all[] = {f.norm_1, f.norm_inf, f.max_abs};
  comm::max(m.grid().all(), all, 3);
  return {all[0], all[1], all[2]};
}

template <scalar T>
factor_figures measure_factors(const dist_matrix<T>& lu, std::span<const index_t> pivots,
                               solve_with with) {
  factor_figures f;
  f.min_pivot = std::numeric_limits<double>::infinity();
  const auto& layout = lu.layout();
  for (index_t lj = 0; lj < lu.local_cols(); ++lj) {
    const index_t j = layout.cols.global(lu.grid().mycol(), lj);
    for (index_t li = 0; li < lu.local_rows(); ++li) {
      const index_t i = layout.rows.global(lu.grid().myrow(), li);
      if (i > j) continue;
      const double a = magnitude(*lu.at(li, lj));
      keep_max(f.max_u, a);
      if (i == j) keep_min(f.min_pivot, a);
    }
  }
  comm::max(lu.grid().all(), &f.max_u, 1);
  comm::min(lu.grid().all(), &f.min_pivot, 1);
  const auto inverse = estimate_inverse_norms(lu, pivots, with);
  f.inverse_norm_1 = inverse.norm_1;
  f.inverse_norm_inf = inverse.norm_inf;
  return f;
}

template <scalar T>
dist_matrix<wide_t<T>> residual(const dist_matrix<T>& m, const dist_matrix<T>& x,
                                const dist_matrix<T>& b) {
  using W = wide_t<T>;
  dist_matrix<W> r(b.grid(), b.rows(), b.cols(), b.block());
  std::copy_n(b.data(), b.ld() * b.local_cols(), r.data());
  if constexpr (std::is_same_v<T, W>)
    add_product(m, x, W(-1), std::identity{}, r);
  else
    add_product(
        m, x, W(-1), [](T v) { return static_cast<W>(v); }, r);
  return r;
}

template <scalar T>
dist_matrix<T> product(const dist_matrix<T>& m, const dist_matrix<T>& x) {
  dist_matrix<T> y(x.grid(), m.rows(), x.cols(), x.block());
  add_product(m, x, T(1), std::identity{}, y);
  return y;
}

template <scalar T>
solution_figures backward_errors(const dist_matrix<T>& m, const matrix_figures& mf,
                                 const dist_matrix<T>& x, const dist_matrix<T>& b,
                                 const dist_matrix<wide_t<T>>& r) {
  // |m| |x| + |b|, in double: the scale of each residual entry.
  dist_matrix<double> scale(b.grid(), b.rows(), b.cols(), b.block());
  for (index_t i = 0; i < b.ld() * b.local_cols(); ++i) scale.data()[i] = magnitude(b.data()[i]);
  add_product(
      m, x, 1.0, [](T v) { return magnitude(v); }, scale);

  const auto norm = [](const auto& a) {
    return column_maxima(a, [&](index_t li, index_t lj) { return magnitude(*a.at(li, lj)); });
  };
  const auto rn = norm(r), xn = norm(x), bn = norm(b);
  const auto worst = column_maxima(r, [&](index_t li, index_t lj) {
    return ratio(magnitude(*r.at(li, lj)), *scale.at(li, lj));
  });
  solution_figures s;
  for (std::size_t j = 0; j < rn.size(); ++j) {
    s.normwise.push_back(ratio(rn[j], mf.norm_inf * xn[j] + bn[j]));
    s.componentwise.push_back(worst[j]);
  }
  return s;
}

template <scalar T>
refinement refine(const dist_matrix<T>& m, const matrix_figures& mf, const dist_matrix<T>& lu,
                  std::span<const index_t> pivots, solve_with with, dist_matrix<T>& x,
                  const dist_matrix<T>& b) {
  constexpr int most = 5;
  refinement out;
  double last = 3;  // above any backward error, as in xGERFS
  dist_matrix<T> d(x.grid(), x.rows(), x.cols(), x.block());
  for (;;) {
    const auto r = residual(m, x, b);
    out.final = backward_errors(m, mf, x, b, r);
    const double worst = worst_of(out.final.componentwise);
    out.normwise.push_back(worst_of(out.final.normwise));
    out.componentwise.push_back(worst);
    if (!(worst > unit_roundoff<T>() && 2 * worst <= last && out.iterations < most)) return out;
    last = worst;
    for (index_t i = 0; i < d.ld() * d.local_cols(); ++i) d.data()[i] = static_cast<T>(r.data()[i]);
    solve(lu, pivots, d, with);
    for (index_t i = 0; i < x.ld() * x.local_cols(); ++i) x.data()[i] += d.data()[i];
    ++out.iterations;
  }
}

#define INSTANTIATE(T)                                                                        \
  template matrix_figures measure_matrix<T>(const dist_matrix<T>&);                           \
  template factor_figures measure_factors<T>(const dist_matrix<T>&, std::span<const index_t>, \
                                             solve_with);                                     \
  template dist_matrix<wide_t<T>> residual<T>(const dist_matrix<T>&, const dist_matrix<T>&,   \
                                              const dist_matrix<T>&);                         \
  template dist_matrix<T> product<T>(const dist_matrix<T>&, const dist_matrix<T>&);           \
  template solution_figures backward_errors<T>(const dist_matrix<T>&, const matrix_figures&,  \
                                               const dist_matrix<T>&, const dist_matrix<T>&,  \
                                               const dist_matrix<wide_t<T>>&);                \
  template refinement refine<T>(const dist_matrix<T>&, const matrix_figures&,                 \
                                const dist_matrix<T>&, std::span<const index_t>, solve_with,  \
                                dist_matrix<T>&, const dist_matrix<T>&);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
