#include "gridlu/mixed.hpp"

#include <algorithm>
#include <cmath>
#include <complex>
#include <cstdint>
#include <cstdio>
#include <string>
#include <type_traits>
#include <utility>
#include <vector>

#include "accuracy/figures.hpp"
#include "gridlu/accuracy.hpp"

namespace gridlu {
namespace {

using detail::keep_max;
using detail::ratio;

// GMRES ends a correction once the preconditioned residual has fallen by this factor,
// our choice (Carson & Higham analyse it as a parameter), or after krylov_most_steps
// steps: a basis of that many vectors of n is little next to A.
constexpr double krylov_tolerance = 1e-6;
constexpr int krylov_most_steps = 50;
// Each Krylov correction gains far more than a classical one.
constexpr int krylov_most_corrections = 10;
// Corrections after Langou et al.'s rule is met, while the backward error halves.
constexpr int most_polishing_corrections = 3;

template <scalar T>
T conjugate(T v) {
  if constexpr (scalar_traits<T>::is_complex)
    return std::conj(v);
  else
    return v;
}

// The largest magnitude and the 2-norm of each column, in double; the same on every rank.
struct column_norms {
  std::vector<double> largest, two;
};

template <scalar T>
column_norms norms_of_columns(const dist_matrix<T>& m) {
  const auto k = static_cast<std::size_t>(m.cols());
  column_norms c{std::vector<double>(k, 0.0), std::vector<double>(k, 0.0)};
  for (index_t lj = 0; lj < m.local_cols(); ++lj) {
    const auto j = m.layout().cols.global(m.grid().mycol(), lj);
    for (index_t li = 0; li < m.local_rows(); ++li) {
      keep_max(c.largest[j], std::abs(*m.at(li, lj)));
      c.two[j] += std::norm(*m.at(li, lj));
    }
  }
  comm::max(m.grid().all(), c.largest.data(), m.cols());
  comm::sum(m.grid().all(), c.two.data(), m.cols());
  for (auto& v : c.two) v = std::sqrt(v);
  return c;
}

// a's figures and ||a||_F in one pass over a; the same on every rank. a fits single
// precision's range (it was copied there), so no square overflows or vanishes in double.
struct matrix_norms {
  matrix_figures figures;  // as measure_matrix gives them, up to rounding
  double frobenius = 0;
};

template <scalar T>
matrix_norms norms_of(const dist_matrix<T>& a) {
  std::vector<double> rows(static_cast<std::size_t>(a.local_rows()), 0.0),
      cols(static_cast<std::size_t>(a.local_cols()), 0.0);
  double squares = 0, largest = 0;
  for (index_t lj = 0; lj < a.local_cols(); ++lj)
    for (index_t li = 0; li < a.local_rows(); ++li) {
      // |v| as the root of its square: std::abs of a complex number guards against
      // overflow at many times the cost, and none can happen here.
      const double square = std::norm(*a.at(li, lj)), v = std::sqrt(square);
      rows[li] += v;
      cols[lj] += v;
      keep_max(largest, v);
      squares += square;
    }
  comm::sum(a.grid().row(), rows.data(), a.local_rows());
  comm::sum(a.grid().col(), cols.data(), a.local_cols());
  double maxima[] = {0, 0, largest};
  for (const double s : cols) keep_max(maxima[0], s);
  for (const double s : rows) keep_max(maxima[1], s);
  comm::max(a.grid().all(), maxima, 3);
  comm::sum(a.grid().all(), &squares, 1);
  return {{maxima[0], maxima[1], maxima[2]}, std::sqrt(squares)};
}

// u^H v for n x 1 vectors; the same on every rank.
template <scalar T>
T dot(const dist_matrix<T>& u, const dist_matrix<T>& v) {
  T s = 0;
  for (index_t li = 0; li < u.local_rows() * u.local_cols(); ++li)
    s += conjugate(*u.at(li, 0)) * *v.at(li, 0);
  comm::sum(u.grid().all(), &s, 1);
  return s;
}

template <scalar T>
double norm_2(const dist_matrix<T>& v) {
  return std::sqrt(std::real(dot(v, v)));
}

// u += alpha v, for matrices of one layout.
template <scalar T>
void add_scaled(dist_matrix<T>& u, T alpha, const dist_matrix<T>& v) {
  for (index_t i = 0; i < u.ld() * u.local_cols(); ++i) u.data()[i] += alpha * v.data()[i];
}

// Column jf of `from` onto column jt of `to` (same rows, same process rows), through
// store(entry of to, value): the process column holding it sends it along each row.
template <scalar T, class F>
void move_column(const dist_matrix<T>& from, index_t jf, dist_matrix<T>& to, index_t jt,
                 F&& store) {
  const auto& grid = from.grid();
  const int source = from.layout().cols.owner(jf), target = to.layout().cols.owner(jt);
  std::vector<T> piece(static_cast<std::size_t>(from.local_rows()));
  if (grid.mycol() == source)
    std::copy_n(from.at(0, from.layout().cols.local(jf)), piece.size(), piece.data());
  if (source != target) comm::broadcast(grid.row(), piece.data(), from.local_rows(), source);
  if (grid.mycol() != target) return;
  for (index_t li = 0; li < to.local_rows(); ++li)
    store(*to.at(li, to.layout().cols.local(jt)), piece[li]);
}

// One plane rotation of GMRES's least-squares problem, chosen to zero b against a:
// [c s; -conj(s) c] [a; b] = [t; 0].
template <scalar T>
struct rotation {
  double c = 1;
  T s = 0;

  static rotation zeroing(T a, double b) {
    const double t = std::hypot(std::abs(a), b);
    if (t == 0) return {};
    if (std::abs(a) == 0) return {0, T(1)};
    return {std::abs(a) / t, a / std::abs(a) * b / t};
  }
  void apply(T& x, T& y) const {
    const T x0 = x;
    x = c * x0 + s * y;
    y = -conjugate(s) * x0 + c * y;
  }
};

// Refinement of x with residuals in double and corrections from single-precision factors.
template <scalar T>
class refinement_run {
public:
  using S = narrow_t<T>;

  refinement_run(const dist_matrix<T>& a, const dist_matrix<S>& lu, std::span<const index_t> pivots,
                 const dist_matrix<T>& b, dist_matrix<T>& x, refinement_method method)
      : a_(a),
        lu_(lu),
        pivots_(pivots),
        b_(b),
        x_(x),
        method_(method),
        most_(method == refinement_method::classical ? mixed_most_iterations
                                                     : krylov_most_corrections),
        norms_(norms_of(a)),
        langou_scale_(norms_.frobenius * std::sqrt(static_cast<double>(a.rows())) *
                      unit_roundoff<T>()),
        b_inf_(norms_of_columns(b).largest) {}

  mixed_outcome run() {
    out_.matrix = norms_.figures;
    std::fill_n(x_.data(), x_.ld() * x_.local_cols(), T(0));
    single_correction(b_);          // x0 = inv(LU) b in single precision
    auto r = residual(a_, x_, b_);  // in double: wide_t<T> is T
    record(measure(r));
    while (!(out_.residual_ratios.back() <= 1)) {
      out_.why = failure();
      if (!out_.why.empty()) return out_;
      count(correct(r));
      r = residual(a_, x_, b_);
      record(measure(r));
    }
    out_.converged = true;
    polish(std::move(r));
    return out_;
  }

private:
  struct measures {
    double backward_error = 0, ratio = 0;  // the worst over the columns
  };

  // The normwise backward error and Langou et al.'s ratio of x, from r = b - a x.
  measures measure(const dist_matrix<T>& r) const {
    const auto rn = norms_of_columns(r), xn = norms_of_columns(x_);
    measures m;
    for (std::size_t j = 0; j < rn.two.size(); ++j) {
      keep_max(m.backward_error,
               ratio(rn.largest[j], norms_.figures.norm_inf * xn.largest[j] + b_inf_[j]));
      keep_max(m.ratio, ratio(rn.two[j], xn.two[j] * langou_scale_));
    }
    return m;
  }

  void record(const measures& m) {
    out_.normwise_backward_errors.push_back(m.backward_error);
    out_.residual_ratios.push_back(m.ratio);
  }

  // Why refinement gives up on the X just measured (empty: go on). Beside Langou et
  // al.'s limit on corrections, ours: a correction that did not reduce the ratio means
  // refinement stalls or diverges, and more of them would only waste time.
  std::string failure() const {
    const auto& ratios = out_.residual_ratios;
    const double now = ratios.back();
    const char* what = method_ == refinement_method::classical
                           ? "refinement with single-precision factors"
                           : "GMRES refinement preconditioned by single-precision factors";
    const char* plural = out_.iterations == 1 ? "" : "s";
    char text[200];
    if (!std::isfinite(now) || !std::isfinite(out_.normwise_backward_errors.back()))
      std::snprintf(text, sizeof text, "%s met a residual that is not finite after %d correction%s",
                    what, out_.iterations, plural);
    else if (ratios.size() > 1 && now >= ratios[ratios.size() - 2])
      std::snprintf(text, sizeof text, "%s stalled after %d correction%s (residual ratio %.1e)",
                    what, out_.iterations, plural, now);
    else if (out_.iterations == most_)
      std::snprintf(text, sizeof text,
                    "%s did not converge in %d corrections (residual ratio %.1e)", what,
                    out_.iterations, now);
    else
      return {};
    return text;
  }

  // Our addition, in the spirit of LAPACK's xGERFS: Langou et al.'s rule accepts a
  // backward error well above u (its bound grows with sqrt(n) and ||A||_F), and X is
  // to match a double LU solve. So correct on while the normwise backward error is
  // above u and at least halves (and the rule still holds), at most three times; a
  // correction that fails this is undone and not counted.
  void polish(dist_matrix<T> r) {
    for (int extra = 0; extra < most_polishing_corrections; ++extra) {
      const double now = out_.normwise_backward_errors.back();
      if (!(now > unit_roundoff<T>())) return;  // nothing left to gain
      const dist_matrix<T> kept = x_;
      const int inner = correct(r);
      r = residual(a_, x_, b_);
      const auto next = measure(r);
      if (!(next.backward_error <= now / 2 && next.ratio <= 1)) {
        x_ = kept;
        return;
      }
      record(next);
      count(inner);
    }
  }

  void count(int inner_steps) {
    ++out_.iterations;
    if (method_ == refinement_method::krylov) out_.inner_iterations.push_back(inner_steps);
  }

  // x += d with a d = r; returns the GMRES steps taken (0 for classical).
  int correct(const dist_matrix<T>& r) {
    if (method_ == refinement_method::classical) {
      single_correction(r);
      return 0;
    }
    int steps = 0;
    dist_matrix<T> v(a_.grid(), a_.rows(), 1, a_.block());
    for (index_t j = 0; j < r.cols(); ++j) {
      move_column(r, j, v, 0, [](T& to, T from) { to = from; });
      steps += gmres(v);
      move_column(v, 0, x_, j, [](T& to, T from) { to += from; });
    }
    return steps;
  }

  // x += d, d = inv(LU) r in single precision. Each column of r is divided by its
  // largest magnitude first (and d multiplied back), so that it neither overflows nor
  // underflows single precision's range: common practice.
  void single_correction(const dist_matrix<T>& r) {
    const auto largest = norms_of_columns(r).largest;
    const auto by = [&](index_t lj) {
      const double s = largest[r.layout().cols.global(r.grid().mycol(), lj)];
      return s > 0 ? s : 1.0;
    };
    dist_matrix<S> d(r.grid(), r.rows(), r.cols(), r.block());
    for (index_t lj = 0; lj < r.local_cols(); ++lj)
      for (index_t li = 0; li < r.local_rows(); ++li)
        *d.at(li, lj) = static_cast<S>(*r.at(li, lj) / by(lj));
    solve(lu_, pivots_, d);
    for (index_t lj = 0; lj < r.local_cols(); ++lj)
      for (index_t li = 0; li < r.local_rows(); ++li)
        *x_.at(li, lj) += static_cast<T>(*d.at(li, lj)) * by(lj);
  }

  // Overwrites v (n x 1) with d from GMRES on inv(M) A d = inv(M) v from d = 0, M the
  // single-precision factors applied in double (in single they could not precondition
  // beyond kappa ~ 1e7): modified Gram-Schmidt Arnoldi, plane rotations on the
  // Hessenberg matrix. Returns the steps taken.
  int gmres(dist_matrix<T>& v) {
    solve_widened(lu_, pivots_, v);
    const double beta = norm_2(v);
    if (!(beta > 0)) return 0;  // zero: d = 0; NaN: left for the residual to show
    std::vector<dist_matrix<T>> basis;
    basis.push_back(v);
    scale(basis.back(), 1 / beta);
    std::vector<std::vector<T>> h;  // the columns of the rotated Hessenberg matrix, R
    std::vector<rotation<T>> rotations;
    std::vector<T> g{T(beta)};  // the rotated right-hand side of the least-squares problem
    while (static_cast<int>(h.size()) < krylov_most_steps &&
           std::abs(g.back()) > krylov_tolerance * beta) {
      auto w = product(a_, basis.back());
      solve_widened(lu_, pivots_, w);
      std::vector<T> column(basis.size() + 1);
      for (std::size_t i = 0; i < basis.size(); ++i) {
        column[i] = dot(basis[i], w);
        add_scaled(w, -column[i], basis[i]);
      }
      const double next = norm_2(w);
      const std::size_t k = basis.size() - 1;
      for (std::size_t i = 0; i < k; ++i) rotations[i].apply(column[i], column[i + 1]);
      rotations.push_back(rotation<T>::zeroing(column[k], next));
      column[k + 1] = next;
      rotations.back().apply(column[k], column[k + 1]);
      column.pop_back();
      g.push_back(T(0));
      rotations.back().apply(g[k], g[k + 1]);
      h.push_back(std::move(column));
      if (next == 0) break;  // the Krylov space holds the solution
      scale(w, 1 / next);
      basis.push_back(std::move(w));
    }
    combine(basis, h, g, v);
    return static_cast<int>(h.size());
  }

  // v = V y with R y = g (R upper triangular, its columns in h).
  static void combine(const std::vector<dist_matrix<T>>& basis,
                      const std::vector<std::vector<T>>& h, std::vector<T> g, dist_matrix<T>& v) {
    std::fill_n(v.data(), v.ld() * v.local_cols(), T(0));
    for (std::size_t j = h.size(); j-- > 0;) {
      g[j] /= h[j][j];
      for (std::size_t i = 0; i < j; ++i) g[i] -= h[j][i] * g[j];
      add_scaled(v, g[j], basis[j]);
    }
  }

  static void scale(dist_matrix<T>& v, double by) {
    for (index_t i = 0; i < v.ld() * v.local_cols(); ++i) v.data()[i] *= by;
  }

  const dist_matrix<T>& a_;
  const dist_matrix<S>& lu_;
  std::span<const index_t> pivots_;
  const dist_matrix<T>& b_;
  dist_matrix<T>& x_;
  refinement_method method_;
  int most_;  // corrections before falling back
  matrix_norms norms_;
  double langou_scale_;
  std::vector<double> b_inf_;
  mixed_outcome out_;
};

}  // namespace

template <scalar T>
mixed_outcome refine_mixed(const dist_matrix<T>& a, const dist_matrix<narrow_t<T>>& lu,
                           std::span<const index_t> pivots, const dist_matrix<T>& b,
                           dist_matrix<T>& x, refinement_method method) {
  static_assert(!std::is_same_v<narrow_t<T>, T>, "mixed precision refines double systems");
  return refinement_run<T>(a, lu, pivots, b, x, method).run();
}

template <scalar T>
bool narrow_copy(const dist_matrix<T>& a, dist_matrix<narrow_t<T>>& to) {
  if (&a.grid() != &to.grid() || a.rows() != to.rows() || a.cols() != to.cols() ||
      a.block() != to.block())
    throw error(error_kind::usage, "narrow_copy: the copy must have a's shape, grid and block");
  std::int64_t overflow = 0;  // a finite entry became infinite
  for (index_t i = 0; i < a.ld() * a.local_cols(); ++i) {
    to.data()[i] = static_cast<narrow_t<T>>(a.data()[i]);
    overflow |= is_finite(a.data()[i]) && !is_finite(to.data()[i]);
  }
  comm::max(a.grid().all(), &overflow, 1);
  return overflow == 0;
}

template <scalar T>
mixed_solution solve_mixed(const dist_matrix<T>& a, dist_matrix<narrow_t<T>>& single,
                           dist_matrix<T>& x, refinement_method method, const lu_options& options) {
  mixed_solution out;
  if (!narrow_copy(a, single)) {
    out.refinement.why = mixed_out_of_range;
    return out;
  }
  out.factors = factor(single, options);
  if (out.factors.first_zero_pivot >= 0) {
    out.refinement.why = mixed_zero_pivot(out.factors.first_zero_pivot);
    return out;
  }
  const dist_matrix<T> b = x;
  out.refinement = refine_mixed(a, single, out.factors.pivots, b, x, method);
  return out;
}

#define INSTANTIATE(T)                                                                           \
  template mixed_outcome refine_mixed<T>(const dist_matrix<T>&, const dist_matrix<narrow_t<T>>&, \
                                         std::span<const index_t>, const dist_matrix<T>&,        \
                                         dist_matrix<T>&, refinement_method);                    \
  template bool narrow_copy<T>(const dist_matrix<T>&, dist_matrix<narrow_t<T>>&);                \
  template mixed_solution solve_mixed<T>(const dist_matrix<T>&, dist_matrix<narrow_t<T>>&,       \
                                         dist_matrix<T>&, refinement_method, const lu_options&);
INSTANTIATE(double)
INSTANTIATE(std::complex<double>)
#undef INSTANTIATE

}  // namespace gridlu
