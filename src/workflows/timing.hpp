// Timing helpers shared by the workflows.
#pragma once

#include <algorithm>
#include <vector>

#include "gridlu/grid.hpp"

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

inline double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const std::size_t m = v.size() / 2;
  return v.size() % 2 ? v[m] : 0.5 * (v[m - 1] + v[m]);
}

}  // namespace gridlu::workflows
