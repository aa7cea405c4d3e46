// Shared pieces of the MPI tests.
#pragma once

#include <gtest/gtest.h>

#include <complex>
#include <vector>

#include "gridlu/grid.hpp"

namespace gridlu::testing_support {

using scalar_types = ::testing::Types<float, double, std::complex<float>, std::complex<double>>;

// The grid shapes the suite covers, those that fit the ranks this run has.
inline std::vector<grid_shape> shapes_for_world() {
  int ranks = 0;
  MPI_Comm_size(MPI_COMM_WORLD, &ranks);
  std::vector<grid_shape> out;
  for (const grid_shape s :
       {grid_shape{1, 1}, {1, 2}, {2, 1}, {2, 2}, {1, 4}, {4, 1}, {1, 3}, {3, 1}, {2, 3}, {3, 2}})
    if (s.p * s.q == ranks) out.push_back(s);
  return out;
}

inline bool is_root() {
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  return rank == 0;
}

}  // namespace gridlu::testing_support
