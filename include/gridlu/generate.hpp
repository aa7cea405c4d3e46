// Generated test systems whose entries are pure functions of a seed and the global
// (i, j), so a matrix is the same whatever the grid it is generated on.
#pragma once

#include <cstdint>
#include <cstring>

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

}  // namespace gridlu
