// Process grid, communicators, collective error agreement, and the matrix's
// gather/scatter, checked against the block-cyclic definition.
#include <gtest/gtest.h>

#include "comm/collectives.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/matrix.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;

int world_size() {
  int n = 0;
  MPI_Comm_size(MPI_COMM_WORLD, &n);
  return n;
}
int world_rank() {
  int r = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &r);
  return r;
}

TEST(GridShape, ParsesPxQAndRefusesTheRest) {
  EXPECT_EQ(parse_grid_shape("2x3"), (grid_shape{2, 3}));
  EXPECT_EQ(parse_grid_shape("12X1"), (grid_shape{12, 1}));
  for (const char* bad : {"", "2", "x3", "2x", "0x2", "2x-1", "axb", "2x3x4", " 2x3"}) {
    try {
      parse_grid_shape(bad);
      ADD_FAILURE() << "accepted '" << bad << "'";
    } catch (const error& e) {
      EXPECT_EQ(e.kind(), error_kind::usage) << bad;
    }
  }
}

TEST(GridShape, SquareShapeHasPAtMostQAndUsesEveryRank) {
  EXPECT_EQ(square_grid_shape(1), (grid_shape{1, 1}));
  EXPECT_EQ(square_grid_shape(2), (grid_shape{1, 2}));
  EXPECT_EQ(square_grid_shape(6), (grid_shape{2, 3}));
  EXPECT_EQ(square_grid_shape(16), (grid_shape{4, 4}));
  EXPECT_EQ(square_grid_shape(7), (grid_shape{1, 7}));
  for (int r = 1; r <= 64; ++r) {
    const auto s = square_grid_shape(r);
    EXPECT_EQ(s.p * s.q, r);
    EXPECT_LE(s.p, s.q);
  }
}

TEST(ProcessGrid, ShapeNotMatchingTheRanksIsAUsageError) {
  try {
    process_grid grid(MPI_COMM_WORLD, {world_size() + 1, 1});
    ADD_FAILURE() << "accepted a grid larger than the world";
  } catch (const error& e) {
    EXPECT_EQ(e.kind(), error_kind::usage);
    EXPECT_NE(std::string(e.what()).find("ranks"), std::string::npos);
  }
}

TEST(ProcessGrid, RowAndColumnCommunicatorsFollowRowMajorRanks) {
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    EXPECT_EQ(grid.myrow(), world_rank() / shape.q);
    EXPECT_EQ(grid.mycol(), world_rank() % shape.q);
    EXPECT_EQ(grid.row().size(), shape.q);
    EXPECT_EQ(grid.col().size(), shape.p);
    EXPECT_EQ(grid.row().rank(), grid.mycol());
    EXPECT_EQ(grid.col().rank(), grid.myrow());
    // Sum of world ranks along my row: q*myrow*q + (0 + ... + q-1).
    std::int64_t v = world_rank();
    comm::sum(grid.row(), &v, 1);
    EXPECT_EQ(v, std::int64_t{shape.q} * grid.myrow() * shape.q + shape.q * (shape.q - 1) / 2);
  }
}

TEST(Agreement, OneFailingRankMakesEveryRankThrowItsError) {
  const process_grid grid(MPI_COMM_WORLD, square_grid_shape(world_size()));
  const int last = world_size() - 1;
  try {
    comm::together(grid.all(), [&] {
      if (world_rank() == last) throw error(error_kind::input, "rank-local failure");
    });
    ADD_FAILURE() << "no rank threw";
  } catch (const error& e) {
    EXPECT_EQ(e.kind(), error_kind::input);
    EXPECT_STREQ(e.what(), "rank-local failure");
  }
  // Several failures: the lowest failing rank's message wins; no failure: no throw.
  try {
    comm::together(grid.all(),
                   [&] { throw error(error_kind::usage, "from " + std::to_string(world_rank())); });
    ADD_FAILURE();
  } catch (const error& e) {
    EXPECT_STREQ(e.what(), "from 0");
  }
  EXPECT_NO_THROW(comm::together(grid.all(), [] {}));
}

template <class T>
class Distribution : public ::testing::Test {};
TYPED_TEST_SUITE(Distribution, scalar_types);

TYPED_TEST(Distribution, FillGatherScatterAgreeWithGlobalIndices) {
  using T = TypeParam;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const index_t m : {1, 5, 17})
      for (const index_t n : {1, 4, 23})
        for (const index_t nb : {1, 2, 5, 32}) {
          dist_matrix<T> a(grid, m, n, nb);
          a.fill([](index_t i, index_t j) { return random_entry<T>(3, i, j); });
          const auto whole = a.gather();
          if (is_root()) {
            std::vector<T> expected;
            for (index_t j = 0; j < n; ++j)
              for (index_t i = 0; i < m; ++i) expected.push_back(random_entry<T>(3, i, j));
            EXPECT_EQ(whole, expected);
          }
          dist_matrix<T> b(grid, m, n, nb);
          b.scatter(whole);
          bool same = true;
          for (index_t lj = 0; lj < b.local_cols(); ++lj)
            for (index_t li = 0; li < b.local_rows(); ++li)
              same = same && *b.at(li, lj) == *a.at(li, lj);
          EXPECT_TRUE(same) << "scatter did not restore rank " << world_rank() << "'s part";
          // Access by global index: exactly one rank owns each entry, holding its value.
          std::int64_t owners = 0;
          bool found_right = true;
          for (index_t j = 0; j < n; ++j)
            for (index_t i = 0; i < m; ++i)
              if (const T* e = a.find(i, j)) {
                ++owners;
                found_right = found_right && *e == random_entry<T>(3, i, j);
              }
          comm::sum(grid.all(), &owners, 1);
          EXPECT_EQ(owners, m * n);
          EXPECT_TRUE(found_right);
        }
  }
}

}  // namespace
