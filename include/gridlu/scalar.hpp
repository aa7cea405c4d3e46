// The four element types and what the algorithms need to know about each.
#pragma once

#include <cmath>
#include <complex>
#include <limits>
#include <string_view>

namespace gridlu {

template <class T>
struct scalar_traits;

template <>
struct scalar_traits<float> {
  using real = float;
  using wide = double;   // residuals are formed in this type
  using narrow = float;  // mixed precision factors in this type
  static constexpr bool is_complex = false;
  static constexpr std::string_view name = "float32";
};
template <>
struct scalar_traits<double> {
  using real = double;
  using wide = double;   // residuals are formed in this type
  using narrow = float;  // mixed precision factors in this type
  static constexpr bool is_complex = false;
  static constexpr std::string_view name = "float64";
};
template <>
struct scalar_traits<std::complex<float>> {
  using real = float;
  using wide = std::complex<double>;   // residuals are formed in this type
  using narrow = std::complex<float>;  // mixed precision factors in this type
  static constexpr bool is_complex = true;
  static constexpr std::string_view name = "complex64";
};
template <>
struct scalar_traits<std::complex<double>> {
  using real = double;
  using wide = std::complex<double>;   // residuals are formed in this type
  using narrow = std::complex<float>;  // mixed precision factors in this type
  static constexpr bool is_complex = true;
  static constexpr std::string_view name = "complex128";
};

template <class T>
using real_t = typename scalar_traits<T>::real;
// The double-precision type of the same kind: single-precision residuals and sums are
// formed in it so that they neither overflow nor lose the digits being judged.
template <class T>
using wide_t = typename scalar_traits<T>::wide;
// The single-precision type of the same kind.
template <class T>
using narrow_t = typename scalar_traits<T>::narrow;

template <class T>
concept scalar = requires {
  typename scalar_traits<T>::real;
};

// Machine epsilon of the type, the distance from 1 to the next number.
template <scalar T>
constexpr real_t<T> epsilon() {
  return std::numeric_limits<real_t<T>>::epsilon();
}

// Unit roundoff u = epsilon / 2: the largest relative error of one rounding, the unit
// in which accuracy figures are stated (LAPACK's xLAMCH('E')).
template <scalar T>
constexpr double unit_roundoff() {
  return static_cast<double>(epsilon<T>()) / 2;
}

// Neither part is NaN or infinite.
template <scalar T>
bool is_finite(T x) {
  if constexpr (scalar_traits<T>::is_complex)
    return std::isfinite(x.real()) && std::isfinite(x.imag());
  else
    return std::isfinite(x);
}

// |Re| + |Im|: the magnitude LAPACK's pivot search compares for complex types.
template <scalar T>
real_t<T> abs1(T x) {
  if constexpr (scalar_traits<T>::is_complex)
    return std::abs(x.real()) + std::abs(x.imag());
  else
    return std::abs(x);
}

// Flops of an LU factorization of order n: 2/3 n^3 real operations, four times as many
// for complex (a complex multiply-add is four real ones) -- common practice.
template <scalar T>
double lu_flops(double n) {
  const double real_flops = 2.0 / 3.0 * n * n * n;
  return scalar_traits<T>::is_complex ? 4.0 * real_flops : real_flops;
}

// Calls f with a value of each element type named by `type` ("float64", ...).
template <class F>
bool dispatch_scalar(std::string_view type, F&& f) {
  if (type == scalar_traits<float>::name)
    f(float{});
  else if (type == scalar_traits<double>::name)
    f(double{});
  else if (type == scalar_traits<std::complex<float>>::name)
    f(std::complex<float>{});
  else if (type == scalar_traits<std::complex<double>>::name)
    f(std::complex<double>{});
  else
    return false;
  return true;
}

}  // namespace gridlu
