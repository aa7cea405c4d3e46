// The block-cyclic map against a brute-force deal of blocks to processes, on every
// small case: n <= 60, nb <= 8, P <= 5.
#include <gtest/gtest.h>

#include <vector>

#include "gridlu/layout.hpp"

namespace {

using gridlu::block_cyclic;
using gridlu::cyclic_map;
using gridlu::index_t;

// Deals blocks round-robin, one index at a time: the definition of the distribution.
struct dealt {
  std::vector<int> owner;
  std::vector<index_t> local;
  std::vector<std::vector<index_t>> globals;  // per process, in local order
};
dealt deal(index_t n, index_t nb, int procs) {
  dealt d{std::vector<int>(n), std::vector<index_t>(n), std::vector<std::vector<index_t>>(procs)};
  for (index_t g = 0; g < n; ++g) {
    const int p = static_cast<int>((g / nb) % procs);
    d.owner[g] = p;
    d.local[g] = static_cast<index_t>(d.globals[p].size());
    d.globals[p].push_back(g);
  }
  return d;
}

TEST(CyclicMap, EverySmallCaseRoundTripsAndPartitions) {
  for (index_t n = 0; n <= 60; ++n)
    for (index_t nb = 1; nb <= 8; ++nb)
      for (int procs = 1; procs <= 5; ++procs) {
        SCOPED_TRACE(testing::Message() << "n=" << n << " nb=" << nb << " P=" << procs);
        const cyclic_map map(n, nb, procs);
        const dealt d = deal(n, nb, procs);
        index_t total = 0;
        for (int p = 0; p < procs; ++p) {
          ASSERT_EQ(map.local_extent(p), static_cast<index_t>(d.globals[p].size()));
          total += map.local_extent(p);
          for (index_t l = 0; l < map.local_extent(p); ++l)
            ASSERT_EQ(map.global(p, l), d.globals[p][l]);
          // local_begin(p, g) counts p's indices below g, for every cut g.
          for (index_t g = 0; g <= n; ++g) {
            index_t below = 0;
            for (index_t h : d.globals[p]) below += h < g;
            ASSERT_EQ(map.local_begin(p, g), below);
          }
        }
        ASSERT_EQ(total, n);  // every index owned exactly once
        for (index_t g = 0; g < n; ++g) {
          ASSERT_EQ(map.owner(g), d.owner[g]);
          ASSERT_EQ(map.local(g), d.local[g]);
          ASSERT_EQ(map.global(map.owner(g), map.local(g)), g);
          ASSERT_EQ(map.block_owner(map.block_of(g)), map.owner(g));
        }
        index_t covered = 0;
        for (index_t b = 0; b < map.block_count(); ++b) {
          ASSERT_EQ(map.block_start(b), covered);
          ASSERT_GE(map.block_size(b), 1);
          ASSERT_LE(map.block_size(b), nb);
          covered += map.block_size(b);
        }
        ASSERT_EQ(covered, n);
      }
}

TEST(CyclicMap, IsAConstexprValue) {
  constexpr cyclic_map map(10, 3, 2);  // blocks {0,1,2}{3,4,5}{6,7,8}{9}
  static_assert(map.owner(4) == 1 && map.local(4) == 1);
  static_assert(map.owner(9) == 1 && map.local(9) == 3);
  static_assert(map.local_extent(0) == 6 && map.local_extent(1) == 4);
  static_assert(map == cyclic_map(10, 3, 2));
  SUCCEED();
}

TEST(BlockCyclic, CombinesRowAndColumnMaps) {
  for (int p = 1; p <= 3; ++p)
    for (int q = 1; q <= 3; ++q) {
      const block_cyclic layout(13, 9, 2, p, q);
      std::vector<int> count(static_cast<std::size_t>(p * q), 0);
      for (index_t i = 0; i < 13; ++i)
        for (index_t j = 0; j < 9; ++j) {
          const auto at = layout.locate(i, j);
          ASSERT_EQ(layout.rows.global(at.prow, at.lrow), i);
          ASSERT_EQ(layout.cols.global(at.pcol, at.lcol), j);
          ++count[at.prow * q + at.pcol];
        }
      for (int r = 0; r < p * q; ++r)
        EXPECT_EQ(count[r], layout.rows.local_extent(r / q) * layout.cols.local_extent(r % q));
    }
}

}  // namespace
