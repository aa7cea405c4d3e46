// GoogleTest main for tests run under mpiexec: every rank runs every test, rank 0
// prints, and the run fails if any rank failed.
#include <gtest/gtest.h>

#include "gridlu/grid.hpp"

int main(int argc, char** argv) {
  gridlu::mpi_session mpi(argc, argv);
  gridlu::comm::transfer_limit_from_environment();  // CI runs some suites with it lowered
  testing::InitGoogleTest(&argc, argv);
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  if (rank != 0) {
    auto& listeners = testing::UnitTest::GetInstance()->listeners();
    delete listeners.Release(listeners.default_result_printer());
  }
  int failed = RUN_ALL_TESTS();
  MPI_Allreduce(MPI_IN_PLACE, &failed, 1, MPI_INT, MPI_MAX, MPI_COMM_WORLD);
  return failed;
}
