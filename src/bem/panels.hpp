// Internals of the boundary-element problems: point arithmetic, and one column of the
// collocation matrix at a time for the assembly.
#pragma once

#include <cmath>
#include <complex>

#include "gridlu/bem.hpp"

namespace gridlu::bem::detail {

inline point operator+(const point& a, const point& b) {
  return {a[0] + b[0], a[1] + b[1], a[2] + b[2]};
}
inline point operator-(const point& a, const point& b) {
  return {a[0] - b[0], a[1] - b[1], a[2] - b[2]};
}
inline point operator*(double s, const point& a) { return {s * a[0], s * a[1], s * a[2]}; }
inline double dot(const point& a, const point& b) {
  return a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
}
inline point cross(const point& a, const point& b) {
  return {a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]};
}
inline double norm(const point& a) { return std::sqrt(dot(a, a)); }

// Entries (row .. row + rows - 1, j) of p's matrix into out[0 .. rows - 1].
void laplace_column(const problem& p, index_t j, index_t row, index_t rows, double* out);
void helmholtz_column(const problem& p, index_t j, index_t row, index_t rows,
                      std::complex<double>* out);

}  // namespace gridlu::bem::detail
