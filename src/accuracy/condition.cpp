// Estimates of ||inv(M)||_1 and ||inv(M)||_inf from the distributed factors, by Hager's
// method with Higham's refinements (Higham, "FORTRAN codes for estimating the one-norm
// of a real or complex matrix", ACM TOMS 14, 1988, Algorithm 4.1; the estimator behind
// LAPACK's xGECON). Each step is a solve with one right-hand side, O(n^2) work.
#include <cmath>
#include <functional>
#include <limits>

#include "accuracy/vectors.hpp"
#include "gridlu/accuracy.hpp"
#include "gridlu/lu.hpp"
#include "instantiate.hpp"

namespace gridlu {
namespace {

template <scalar T>
using apply_fn = std::function<void(dist_matrix<T>&)>;

constexpr int most_steps = 5;  // Higham's itmax

// Estimates ||B||_1 given products with B and with B^H, both in place on n x 1 vectors.
template <scalar T>
double estimate_norm_1(const apply_fn<T>& b_times, const apply_fn<T>& adjoint_times,
                       dist_matrix<T>& v) {
  using namespace detail;
  const index_t n = v.rows();
  v.fill([&](index_t, index_t) { return T(real_t<T>(1) / static_cast<real_t<T>>(n)); });
  b_times(v);
  double estimate = sum_abs(v);
  if (n == 1 || !std::isfinite(estimate)) return estimate;
  auto signs = sign_vector(v);
  v = signs;
  adjoint_times(v);
  index_t j = largest_entry(v);
  for (int step = 2; step <= most_steps; ++step) {
    v.fill([&](index_t i, index_t) { return T(i == j ? 1 : 0); });
    b_times(v);
    const double previous = estimate;
    estimate = std::max(estimate, sum_abs(v));
    if (!std::isfinite(estimate)) return estimate;
    // A repeated sign vector (real only) or no increase: converged or cycling.
    auto next = sign_vector(v);
    if ((!scalar_traits<T>::is_complex && same_entries(next, signs)) || estimate <= previous) break;
    signs = std::move(next);
    v = signs;
    adjoint_times(v);
    const index_t last = j;
    j = largest_entry(v);
    if (std::real(entry_at(v, last)) >= std::abs(entry_at(v, j))) break;  // nothing better
  }
  // Higham's extra test vector guards against matrices that fool the iteration.
  v.fill([&](index_t i, index_t) {
    const double t = (1 + static_cast<double>(i) / static_cast<double>(n - 1));
    return T(static_cast<real_t<T>>(i % 2 ? -t : t));
  });
  b_times(v);
  return std::max(estimate, 2 * sum_abs(v) / (3 * static_cast<double>(n)));
}

template <scalar T>
void conjugate(dist_matrix<T>& v) {
  if constexpr (scalar_traits<T>::is_complex)
    for (index_t i = 0; i < v.ld() * v.local_cols(); ++i) v.data()[i] = std::conj(v.data()[i]);
}

}  // namespace

template <scalar T>
inverse_norms estimate_inverse_norms(const dist_matrix<T>& lu, std::span<const index_t> pivots,
                                     solve_with with) {
  const auto by = [&](solve_with w) {
    return apply_fn<T>([&, w](dist_matrix<T>& v) { solve(lu, pivots, v, w); });
  };
  // B = inv(M) and its adjoint B^H. For M = A^T, B^H = conj(inv(A)), applied as
  // conj(inv(A) conj(v)).
  apply_fn<T> b = by(with), b_adjoint = by(solve_with::a);
  if (with == solve_with::a) b_adjoint = by(solve_with::adjoint);
  if (with == solve_with::transpose)
    b_adjoint = [&](dist_matrix<T>& v) {
      conjugate(v);
      solve(lu, pivots, v, solve_with::a);
      conjugate(v);
    };
  dist_matrix<T> v(lu.grid(), lu.rows(), 1, lu.block());
  inverse_norms r;
  r.norm_1 = estimate_norm_1<T>(b, b_adjoint, v);
  r.norm_inf = estimate_norm_1<T>(b_adjoint, b, v);  // ||B||_inf = ||B^H||_1
  return r;
}

#define INSTANTIATE(T)                                                    \
  template inverse_norms estimate_inverse_norms<T>(const dist_matrix<T>&, \
                                                   std::span<const index_t>, solve_with);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
