// Shared pieces of the MPI tests.
#pragma once

#include <gtest/gtest.h>

#include <stdlib.h>

#include <complex>
#include <filesystem>
#include <string>
#include <vector>

#include "gridlu/grid.hpp"

namespace gridlu::testing_support {

using scalar_types = ::testing::Types<float, double, std::complex<float>, std::complex<double>>;

// The grid shapes the suite covers, those that fit the ranks this run has.
inline std::vector<grid_shape> shapes_for_world() {
  int ranks = 0;
  MPI_Comm_size(MPI_COMM_WORLD, &ranks);
  std::vector<grid_shape> out;
  for (const grid_shape s : {grid_shape{1, 1},
                             {1, 2},
                             {2, 1},
                             {2, 2},
                             {1, 4},
                             {4, 1},
                             {1, 3},
                             {3, 1},
                             {2, 3},
                             {3, 2},
                             {2, 4},
                             {4, 2},
                             {1, 8},
                             {8, 1},
                             {3, 3}})
    if (s.p * s.q == ranks) out.push_back(s);
  return out;
}

inline bool is_root() {
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  return rank == 0;
}

// A fresh directory for one test: rank 0 makes it, every rank learns its name, and rank
// 0 removes it once every rank is done with it.
class scratch_dir {
public:
  scratch_dir() : world_(MPI_COMM_WORLD, {1, comm::world_size()}) {
    if (world_.rank() == 0) {
      std::string pattern =
          (std::filesystem::temp_directory_path() / "gridlu-test-XXXXXX").string();
      path_ = mkdtemp(pattern.data()) ? pattern : "";
    }
    comm::broadcast(world_.all(), path_, 0);
    EXPECT_FALSE(path_.empty()) << "mkdtemp failed";
  }
  ~scratch_dir() {
    comm::barrier(world_.all());
    std::error_code ec;
    if (world_.rank() == 0) std::filesystem::remove_all(path_, ec);
  }
  scratch_dir(const scratch_dir&) = delete;
  scratch_dir& operator=(const scratch_dir&) = delete;

  // A name in the directory; nothing is made there.
  std::string file(const std::string& name) const {
    return (std::filesystem::path(path_) / name).string();
  }
  const process_grid& world() const { return world_; }

private:
  process_grid world_;
  std::string path_;
};

}  // namespace gridlu::testing_support
