// The two numerical failures every solving path (the command's workflows, the library's
// factorization) refuses before it reports or writes anything: an exactly singular A and
// a solution that is not finite.
#pragma once

#include <string>
#include <utility>

#include "gridlu/lu.hpp"

namespace gridlu {

inline void refuse_singular(const lu_result& lu) {
  if (lu.first_zero_pivot >= 0)
    throw error(error_kind::numerical, "A is exactly singular: the pivot of column " +
                                           std::to_string(lu.first_zero_pivot) +
                                           " (0-based) is zero; no solution");
}

// An entry as the file's reader names it, 0-based: NAME[i, j], or NAME[i] for a vector.
inline std::string entry_name(const std::string& dataset, std::pair<index_t, index_t> at,
                              bool one_d) {
  return dataset + "[" + std::to_string(at.first) +
         (one_d ? "" : ", " + std::to_string(at.second)) + "]";
}

template <scalar T>
void refuse_nonfinite_solution(const dist_matrix<T>& x, bool one_d) {
  if (const auto at = first_nonfinite(x))
    throw error(error_kind::numerical,
                entry_name("X", *at, one_d) +
                    " is not finite (NaN or Inf): the solve overflowed, A being numerically "
                    "singular or badly scaled; no solution");
}

}  // namespace gridlu
