#include "gridlu/accuracy.hpp"

#include "instantiate.hpp"
#include "kernels/blas.hpp"

namespace gridlu {

template <scalar T>
real_t<T> norm_inf(const dist_matrix<T>& a) {
  std::vector<real_t<T>> sums(static_cast<std::size_t>(a.local_rows()), 0);
  for (index_t lj = 0; lj < a.local_cols(); ++lj)
    for (index_t li = 0; li < a.local_rows(); ++li) sums[li] += std::abs(*a.at(li, lj));
  comm::sum(a.grid().row(), sums.data(), a.local_rows());
  real_t<T> largest = 0;
  for (const auto s : sums) largest = std::max(largest, s);
  comm::max(a.grid().col(), &largest, 1);
  return largest;
}

template <scalar T>
std::vector<real_t<T>> column_norms_inf(const dist_matrix<T>& a) {
  // Each column's maximum is formed on its process column; the others contribute zero.
  std::vector<real_t<T>> norms(static_cast<std::size_t>(a.cols()), 0);
  for (index_t lj = 0; lj < a.local_cols(); ++lj) {
    auto& m = norms[a.layout().cols.global(a.grid().mycol(), lj)];
    for (index_t li = 0; li < a.local_rows(); ++li) m = std::max(m, std::abs(*a.at(li, lj)));
  }
  comm::max(a.grid().all(), norms.data(), a.cols());
  return norms;
}

template <scalar T>
void subtract_product(const dist_matrix<T>& a, const dist_matrix<T>& x, dist_matrix<T>& r) {
  // One outer product per block k of a's columns: a's block column along the process
  // rows, x's block row down the process columns, one GEMM per rank.
  const auto& grid = a.grid();
  const auto& inner = a.layout().cols;
  std::vector<T> left, right;
  for (index_t k = 0; k < inner.block_count(); ++k) {
    const index_t j0 = inner.block_start(k), jb = inner.block_size(k);
    const int pc = inner.block_owner(k), pr = x.layout().rows.block_owner(k);
    left.resize(static_cast<std::size_t>(a.local_rows() * jb));
    right.resize(static_cast<std::size_t>(jb * x.local_cols()));
    if (grid.mycol() == pc)
      copy_block(a.local_rows(), jb, a.at(0, inner.local(j0)), a.ld(), left.data(), a.local_rows());
    if (grid.myrow() == pr)
      copy_block(jb, x.local_cols(), x.at(x.layout().rows.local(j0), 0), x.ld(), right.data(), jb);
    comm::broadcast(grid.row(), left.data(), static_cast<index_t>(left.size()), pc);
    comm::broadcast(grid.col(), right.data(), static_cast<index_t>(right.size()), pr);
    blas::gemm(blas::op::none, blas::op::none, r.local_rows(), r.local_cols(), jb, T(-1),
               left.data(), a.local_rows(), right.data(), jb, T(1), r.data(), r.ld());
  }
}

template <scalar T>
std::vector<double> backward_errors(const dist_matrix<T>& a, const dist_matrix<T>& x,
                                    const dist_matrix<T>& b) {
  dist_matrix<T> r(b.grid(), b.rows(), b.cols(), b.block());
  std::copy_n(b.data(), b.ld() * b.local_cols(), r.data());
  subtract_product(a, x, r);
  const double anorm = norm_inf(a);
  const auto rn = column_norms_inf(r), xn = column_norms_inf(x), bn = column_norms_inf(b);
  std::vector<double> errors(rn.size());
  for (std::size_t j = 0; j < rn.size(); ++j) {
    const double scale = anorm * xn[j] + bn[j];
    errors[j] = scale > 0 ? rn[j] / scale : 0.0;  // b = 0 and x = 0 solve exactly
  }
  return errors;
}

#define INSTANTIATE(T)                                                                          \
  template real_t<T> norm_inf<T>(const dist_matrix<T>&);                                        \
  template std::vector<real_t<T>> column_norms_inf<T>(const dist_matrix<T>&);                   \
  template void subtract_product<T>(const dist_matrix<T>&, const dist_matrix<T>&,               \
                                    dist_matrix<T>&);                                           \
  template std::vector<double> backward_errors<T>(const dist_matrix<T>&, const dist_matrix<T>&, \
                                                  const dist_matrix<T>&);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
