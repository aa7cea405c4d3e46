// Process grid, communicators, collective error agreement, and the matrix's
// gather/scatter, checked against the block-cyclic definition.
#include <gtest/gtest.h>

#include <complex>
#include <numeric>
#include <vector>

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

// Transfers split at a limit of a few bytes arrive exactly as whole ones: the values each
// rank can compute for itself (sums of rank-dependent integers, the root's pattern, every
// sender's numbering) are the reference.
class TransferLimit : public ::testing::Test {
protected:
  void SetUp() override {
    saved_ = comm::transfer_limit();
    comm::set_transfer_limit(24);  // three doubles, one and a half complex<double>
  }
  void TearDown() override { comm::set_transfer_limit(saved_); }

private:
  std::int64_t saved_ = 0;
};

TEST_F(TransferLimit, BroadcastsAndReductionsGoInPiecesAndAgree) {
  const process_grid grid(MPI_COMM_WORLD, square_grid_shape(world_size()));
  const index_t n = 1001;  // no multiple of any piece
  std::vector<std::complex<double>> v(n);
  for (index_t i = 0; i < n; ++i) v[i] = grid.rank() == 0 ? std::complex<double>(i, -i) : 0.0;
  comm::broadcast(grid.all(), v.data(), n, 0);
  for (index_t i = 0; i < n; ++i) ASSERT_EQ(v[i], std::complex<double>(i, -i)) << i;
  std::vector<double> s(n), m(n);
  for (index_t i = 0; i < n; ++i) s[i] = m[i] = static_cast<double>(i * (grid.rank() + 1));
  comm::sum(grid.all(), s.data(), n);
  comm::max(grid.all(), m.data(), n);
  const double ranks = grid.size(), triangle = ranks * (ranks + 1) / 2;
  for (index_t i = 0; i < n; ++i) {
    ASSERT_EQ(s[i], static_cast<double>(i) * triangle) << i;
    ASSERT_EQ(m[i], static_cast<double>(i) * ranks) << i;
  }
  std::vector<double> w(n, grid.rank() == 0 ? 7.0 : 0.0);
  { comm::start_broadcast(grid.all(), w.data(), n, 0).wait(); }
  for (index_t i = 0; i < n; ++i) ASSERT_EQ(w[i], 7.0) << i;
}

TEST_F(TransferLimit, AllToAllInPiecesDeliversEveryBlockInOrder) {
  const process_grid grid(MPI_COMM_WORLD, square_grid_shape(world_size()));
  const int procs = grid.size(), me = grid.rank();
  // Rank p sends rank q a block of 3 p + q + 1 elements numbered from 1000 p + 100 q.
  const auto count = [](int p, int q) { return index_t{3 * p + q + 1}; };
  std::vector<index_t> send_counts(procs), recv_counts(procs);
  std::vector<double> send;
  for (int q = 0; q < procs; ++q) {
    send_counts[q] = count(me, q);
    recv_counts[q] = count(q, me);
    for (index_t k = 0; k < send_counts[q]; ++k) send.push_back(1000.0 * me + 100.0 * q + k);
  }
  std::vector<double> recv(static_cast<std::size_t>(
      std::accumulate(recv_counts.begin(), recv_counts.end(), index_t{0})));
  comm::all_to_all(grid.all(), send.data(), send_counts, recv.data(), recv_counts);
  std::size_t at = 0;
  for (int p = 0; p < procs; ++p)
    for (index_t k = 0; k < recv_counts[p]; ++k, ++at)
      ASSERT_EQ(recv[at], 1000.0 * p + 100.0 * me + k) << "from " << p << " element " << k;
}

TEST_F(TransferLimit, GatherScatterAndAllGatherInRoundsKeepRankOrder) {
  const process_grid grid(MPI_COMM_WORLD, square_grid_shape(world_size()));
  const int procs = grid.size(), me = grid.rank();
  // Rank p's block has 5 p + 2 elements (several rounds at 3 doubles), numbered 1000 p + k.
  std::vector<index_t> counts(procs);
  std::vector<double> expected;
  for (int p = 0; p < procs; ++p) {
    counts[p] = 5 * p + 2;
    for (index_t k = 0; k < counts[p]; ++k) expected.push_back(1000.0 * p + k);
  }
  std::vector<double> mine(static_cast<std::size_t>(counts[me]));
  for (index_t k = 0; k < counts[me]; ++k) mine[k] = 1000.0 * me + k;
  std::vector<double> all(expected.size(), -1.0);
  comm::all_gather(grid.all(), mine.data(), counts[me], all.data(), counts);
  EXPECT_EQ(all, expected);
  std::vector<double> gathered(me == 0 ? expected.size() : 0, -1.0);
  comm::gather(grid.all(), mine.data(), counts[me], gathered.data(), counts, 0);
  if (me == 0) {
    EXPECT_EQ(gathered, expected);
  }
  std::vector<double> back(mine.size(), -1.0);
  comm::scatter(grid.all(), gathered.data(), counts, back.data(), counts[me], 0);
  EXPECT_EQ(back, mine);
}
