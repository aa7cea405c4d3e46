// Assembly of the collocation matrix into any block-cyclic layout, the total charge of a
// solution, and the known answers of the built-in problems.
#include <cmath>
#include <numbers>
#include <vector>

#include "bem/panels.hpp"
#include "gridlu/error.hpp"
#include "instantiate.hpp"

namespace gridlu::bem {
namespace {

constexpr double pi = std::numbers::pi;

// Every local block, column by column through a buffer of the entries in double
// precision; column(j, row, rows, out) computes them.
template <class V, scalar T, class Column>
void fill_blocks(dist_matrix<T>& a, Column column) {
  std::vector<V> entries(static_cast<std::size_t>(a.block()));
  for (index_t b = 0; b < a.local_blocks(); ++b) {
    const auto v = a.local_block(b);
    for (index_t c = 0; c < v.cols; ++c) {
      column(v.col + c, v.row, v.rows, entries.data());
      T* out = v.data + c * v.ld;
      for (index_t r = 0; r < v.rows; ++r) out[r] = static_cast<T>(entries[r]);
    }
  }
}

}  // namespace

template <scalar T>
void assemble(const problem& p, dist_matrix<T>& a) {
  if (a.rows() != p.size() || a.cols() != p.size())
    throw error(error_kind::usage, "the matrix of " + p.mesh.name() + " must be " +
                                       std::to_string(p.size()) + " x " + std::to_string(p.size()));
  if (!(p.wavenumber >= 0) || !std::isfinite(p.wavenumber))
    throw error(error_kind::usage, "the wavenumber must be zero or positive and finite");
  if (!p.is_complex()) {
    fill_blocks<double>(a, [&p](index_t j, index_t row, index_t rows, double* out) {
      detail::laplace_column(p, j, row, rows, out);
    });
  } else if constexpr (scalar_traits<T>::is_complex) {
    fill_blocks<std::complex<double>>(
        a, [&p](index_t j, index_t row, index_t rows, std::complex<double>* out) {
          detail::helmholtz_column(p, j, row, rows, out);
        });
  } else {
    throw error(error_kind::usage,
                "a Helmholtz problem (wavenumber above 0) needs a complex element type");
  }
}

template <scalar T>
std::complex<double> total_charge(const surface& s, const dist_matrix<T>& x, index_t column) {
  if (x.rows() != s.size() || column < 0 || column >= x.cols())
    throw error(error_kind::usage, "total charge: x must have " + std::to_string(s.size()) +
                                       " rows and column " + std::to_string(column));
  std::complex<double> sum = 0;
  for (index_t b = 0; b < x.local_blocks(); ++b) {
    const auto v = x.local_block(b);
    if (column < v.col || column >= v.col + v.cols) continue;
    const T* values = v.data + (column - v.col) * v.ld;
    for (index_t r = 0; r < v.rows; ++r) sum += std::complex<double>(values[r]) * s[v.row + r].area;
  }
  comm::sum(x.grid().all(), &sum, 1);
  return sum;
}

double sphere_capacitance(double radius) { return 4 * pi * radius; }

double cube_capacitance(double side) { return 4 * pi * side * cube_capacitance_ratio; }

// On |x| = R the potential of a constant density sigma, by the addition theorem
//   exp(ik|x-y|) / (4 pi |x-y|)
//     = ik sum_n j_n(k r<) h_n(k r>) sum_m Y_nm(x^) conj(Y_nm(y^)),
// h_n the spherical Hankel function of the first kind: integrating over |y| = R
// (dA = R^2 dy^), every term with n > 0 vanishes against the constant, and
// sum_m Y_0m conj(Y_0m) = 1 / (4 pi) integrates to 1, so
//   S[1](x) = ik R^2 j_0(kR) h_0(kR) = ik R^2 (sin kR / kR) (exp(ikR) / (ikR))
//           = exp(ikR) sin(kR) / k,
// and unit potential needs sigma = k / (exp(ikR) sin(kR)). As k -> 0 it tends to 1 / R,
// the charge density of the sphere of capacitance 4 pi R.
std::complex<double> sphere_helmholtz_density(double wavenumber, double radius) {
  const double kr = wavenumber * radius;
  return wavenumber / (std::polar(1.0, kr) * std::sin(kr));
}

#define INSTANTIATE(T)                                        \
  template void assemble<T>(const problem&, dist_matrix<T>&); \
  template std::complex<double> total_charge<T>(const surface&, const dist_matrix<T>&, index_t);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu::bem
