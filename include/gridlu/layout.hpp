// Block-cyclic index maps: pure integer arithmetic, no MPI, no storage.
#pragma once

#include <algorithm>
#include <cstdint>

namespace gridlu {

using index_t = std::int64_t;

// One dimension of a block-cyclic distribution: indices 0..n-1 are cut into blocks
// of `nb`, and block b belongs to process b mod nprocs. A plain value, like a layout
// mapping: it answers "who owns g, and where", nothing else.
class cyclic_map {
public:
  constexpr cyclic_map() = default;
  constexpr cyclic_map(index_t n, index_t nb, int nprocs) : n_(n), nb_(nb), procs_(nprocs) {}

  constexpr index_t extent() const { return n_; }
  constexpr index_t block() const { return nb_; }
  constexpr int procs() const { return procs_; }

  constexpr index_t block_count() const { return (n_ + nb_ - 1) / nb_; }
  constexpr index_t block_of(index_t g) const { return g / nb_; }
  constexpr index_t block_start(index_t b) const { return b * nb_; }
  constexpr index_t block_size(index_t b) const { return std::min(nb_, n_ - b * nb_); }
  constexpr int block_owner(index_t b) const { return static_cast<int>(b % procs_); }

  constexpr int owner(index_t g) const { return block_owner(g / nb_); }
  constexpr index_t local(index_t g) const { return (g / nb_ / procs_) * nb_ + g % nb_; }
  constexpr index_t global(int p, index_t l) const {
    return ((l / nb_) * procs_ + p) * nb_ + l % nb_;
  }

  // Number of indices below g that process p owns, which is also the local index of
  // the first index >= g that p owns: p's indices >= g are local [local_begin, extent).
  constexpr index_t local_begin(int p, index_t g) const {
    const index_t b = g / nb_;
    const index_t cycles = b / procs_;
    const int r = static_cast<int>(b % procs_);
    index_t count = cycles * nb_;
    if (p < r)
      count += nb_;
    else if (p == r)
      count += g % nb_;
    return count;
  }
  constexpr index_t local_extent(int p) const { return local_begin(p, n_); }

  friend constexpr bool operator==(const cyclic_map&, const cyclic_map&) = default;

private:
  index_t n_ = 0;
  index_t nb_ = 1;
  int procs_ = 1;
};

// Where entry (i, j) of an m x n matrix lives on a P x Q process grid.
struct block_cyclic {
  cyclic_map rows;
  cyclic_map cols;

  constexpr block_cyclic() = default;
  constexpr block_cyclic(index_t m, index_t n, index_t nb, int p, int q)
      : rows(m, nb, p), cols(n, nb, q) {}

  struct place {
    int prow, pcol;
    index_t lrow, lcol;
    friend constexpr bool operator==(const place&, const place&) = default;
  };
  constexpr place locate(index_t i, index_t j) const {
    return {rows.owner(i), cols.owner(j), rows.local(i), cols.local(j)};
  }
  friend constexpr bool operator==(const block_cyclic&, const block_cyclic&) = default;
};

}  // namespace gridlu
