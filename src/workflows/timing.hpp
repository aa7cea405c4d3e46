// Timing helpers shared by the workflows.
#pragma once

#include <algorithm>
#include <vector>

#include "gridlu/grid.hpp"
#include "gridlu/lu.hpp"

namespace gridlu::workflows {

// Wall time of f on the slowest rank: barriers on both sides.
template <class F>
double timed(const process_grid& grid, F&& f) {
  comm::barrier(grid.all());
  const double start = comm::wtime();
  f();
  comm::barrier(grid.all());
  return comm::wtime() - start;
}

// Each phase's time on the slowest rank for it.
inline lu_phases slowest(const process_grid& grid, lu_phases p) {
  static_assert(sizeof(lu_phases) % sizeof(double) == 0, "lu_phases holds doubles only");
  comm::max(grid.all(), &p.panel, sizeof(lu_phases) / sizeof(double));
  return p;
}

// Percent of an order-n factorization's flops done after k columns.
inline double percent_of_flops(index_t n, index_t k) {
  const double total = lu_flops<double>(static_cast<double>(n));
  return n > 0 ? 100.0 * (1.0 - lu_flops<double>(static_cast<double>(n - k)) / total) : 0.0;
}

inline double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const std::size_t m = v.size() / 2;
  return v.size() % 2 ? v[m] : 0.5 * (v[m - 1] + v[m]);
}

}  // namespace gridlu::workflows
