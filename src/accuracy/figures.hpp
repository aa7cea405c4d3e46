// Arithmetic on figures that judge an answer (all >= 0): a NaN, once seen, is kept.
#pragma once

#include <cmath>
#include <limits>

namespace gridlu::detail {

inline void keep_max(double& m, double v) {
  if (std::isnan(v) || v > m) m = v;
}
inline void keep_min(double& m, double v) {
  if (std::isnan(v) || v < m) m = v;
}

// a / b: NaN if either is, 0 / 0 = 0 (nothing to judge), x / 0 infinite.
inline double ratio(double a, double b) {
  if (std::isnan(a) || std::isnan(b)) return std::numeric_limits<double>::quiet_NaN();
  if (b > 0) return a / b;
  return a == 0 ? 0.0 : std::numeric_limits<double>::infinity();
}

}  // namespace gridlu::detail
