// Generated test systems whose entries are pure functions of a seed or the order n and
// the global (i, j), so a matrix is the same whatever the grid it is generated on.
#pragma once

#include <algorithm>
#include <cstdint>
#include <cstring>
#include <string_view>

#include "gridlu/layout.hpp"
#include "gridlu/scalar.hpp"

namespace gridlu {

namespace detail {
// The splitmix64 finalizer: a fast bijective mixer with good avalanche.
constexpr std::uint64_t mix64(std::uint64_t z) {
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}
// Uniform in [-1, 1) with 53 random bits.
constexpr double unit_interval(std::uint64_t h) {
  return static_cast<double>(h >> 11) * 0x1.0p-52 - 1.0;
}
// Hash of a value at global position (i, j): the terms of content checksums, which XOR
// them so that any grid, block size or reading order gives the same sum.
template <class T>
std::uint64_t entry_hash(index_t i, index_t j, const T& value) {
  std::uint64_t h = mix64(static_cast<std::uint64_t>(i) * 0x9e3779b97f4a7c15ULL ^
                          mix64(static_cast<std::uint64_t>(j)));
  static_assert(sizeof(T) % 4 == 0);
  std::uint32_t words[sizeof(T) / 4];
  std::memcpy(words, &value, sizeof(T));
  for (const auto w : words) h = mix64(h ^ w);
  return h;
}
}  // namespace detail

// Entry (i, j) of the random matrix of `seed`: real and imaginary parts uniform in [-1, 1).
template <scalar T>
T random_entry(std::uint64_t seed, index_t i, index_t j) {
  const std::uint64_t h =
      detail::mix64(detail::mix64(detail::mix64(seed) ^ static_cast<std::uint64_t>(i)) ^
                    static_cast<std::uint64_t>(j) * 0x9e3779b97f4a7c15ULL);
  const auto re = static_cast<real_t<T>>(detail::unit_interval(h));
  if constexpr (scalar_traits<T>::is_complex)
    return T(re, static_cast<real_t<T>>(detail::unit_interval(detail::mix64(h))));
  else
    return re;
}

// Classical test matrices: real entries with closed-form properties to check a solver
// against. Indices are 0-based.
enum class classical { wilkinson, hilbert, frank, second_difference };

// The name of a kind on the command line and in the files' `generator` attribute.
constexpr std::string_view name_of(classical kind) {
  constexpr std::string_view names[] = {"wilkinson", "hilbert", "frank", "second-difference"};
  return names[static_cast<int>(kind)];
}

// 1 on the diagonal and in the last column, -1 below the diagonal: growth factor 2^(n-1)
// under partial pivoting (Wilkinson 1961; Higham, Accuracy and Stability, 2002, §9.4).
template <scalar T>
T wilkinson_entry(index_t n, index_t i, index_t j) {
  return T(i == j || j == n - 1 ? 1 : i > j ? -1 : 0);
}

// 1 / (i + j + 1): its determinant and inverse have closed forms (Choi 1983, Amer. Math.
// Monthly 90). The quotient is taken in the real type so complex types round it alike.
template <scalar T>
T hilbert_entry(index_t i, index_t j) {
  return T(real_t<T>(1) / static_cast<real_t<T>>(i + j + 1));
}

// n - max(i, j) on and above the subdiagonal, 0 below it: determinant 1 (Frank 1958;
// Higham's Test Matrix Toolbox).
template <scalar T>
T frank_entry(index_t n, index_t i, index_t j) {
  return T(j + 1 >= i ? static_cast<real_t<T>>(n - std::max(i, j)) : 0);
}

// 2 on the diagonal, -1 beside it: determinant n + 1 and inverse (1-based)
// min(i, j) (n + 1 - max(i, j)) / (n + 1) (a classical closed form, recalled from memory).
template <scalar T>
T second_difference_entry(index_t i, index_t j) {
  return T(i == j ? 2 : i - j == 1 || j - i == 1 ? -1 : 0);
}

// Entry (i, j) of the classical matrix of order n of this kind.
template <scalar T>
T classical_entry(classical kind, index_t n, index_t i, index_t j) {
  switch (kind) {
    case classical::wilkinson:
      return wilkinson_entry<T>(n, i, j);
    case classical::hilbert:
      return hilbert_entry<T>(i, j);
    case classical::frank:
      return frank_entry<T>(n, i, j);
    case classical::second_difference:
      return second_difference_entry<T>(i, j);
  }
  return T(0);
}

}  // namespace gridlu
