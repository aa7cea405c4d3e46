// A distributed dense matrix: this rank's part of a block-cyclic m x n matrix, stored
// column-major with a leading dimension.
#pragma once

#include <algorithm>
#include <cstdint>
#include <optional>
#include <utility>
#include <vector>

#include "gridlu/grid.hpp"
#include "gridlu/layout.hpp"
#include "gridlu/scalar.hpp"

namespace gridlu {

namespace detail {
// Storage of the local parts and panels. Large ones go on 2 MiB pages where the kernel
// grants them: row interchanges walk rows across columns, one 4 KiB page per entry with
// small pages, and fresh small pages are slow to fault in (see DEVELOPERS.md).
void* allocate_storage(std::size_t bytes);
void release_storage(void* p, std::size_t bytes) noexcept;

template <class T>
struct storage_allocator {
  using value_type = T;
  storage_allocator() = default;
  template <class U>
  storage_allocator(const storage_allocator<U>&) noexcept {}
  T* allocate(std::size_t n) { return static_cast<T*>(allocate_storage(n * sizeof(T))); }
  void deallocate(T* p, std::size_t n) noexcept { release_storage(p, n * sizeof(T)); }
  friend bool operator==(const storage_allocator&, const storage_allocator&) = default;
};
}  // namespace detail

template <scalar T>
class dist_matrix {
public:
  // The grid must outlive the matrix.
  dist_matrix(const process_grid& grid, index_t m, index_t n, index_t nb);

  const process_grid& grid() const { return *grid_; }
  const block_cyclic& layout() const { return layout_; }
  index_t rows() const { return layout_.rows.extent(); }
  index_t cols() const { return layout_.cols.extent(); }
  index_t block() const { return layout_.rows.block(); }
  index_t local_rows() const { return local_rows_; }
  index_t local_cols() const { return local_cols_; }
  index_t ld() const { return ld_; }
  // Bytes of the whole matrix, all ranks' parts together.
  double bytes() const {
    return static_cast<double>(rows()) * static_cast<double>(cols()) * sizeof(T);
  }

  T* data() { return storage_.data(); }
  const T* data() const { return storage_.data(); }
  // Pointer to local entry (li, lj); columns are contiguous. An empty view at the edge
  // of the local part (li or lj one past the end) points at the end, never beyond it.
  T* at(index_t li, index_t lj) { return storage_.data() + offset(li, lj); }
  const T* at(index_t li, index_t lj) const { return storage_.data() + offset(li, lj); }

  // Local storage of global entry (i, j), or nullptr when another rank owns it. Whole
  // local blocks follow: the entries of a block are contiguous in each column.
  const T* find(index_t i, index_t j) const {
    const auto p = layout_.locate(i, j);
    return p.prow == grid_->myrow() && p.pcol == grid_->mycol() ? at(p.lrow, p.lcol) : nullptr;
  }
  T* find(index_t i, index_t j) { return const_cast<T*>(std::as_const(*this).find(i, j)); }

  // Sets every local entry to f(i, j) of its global indices.
  template <class F>
  void fill(F&& f) {
    for (index_t lj = 0; lj < local_cols_; ++lj) {
      const index_t j = layout_.cols.global(grid_->mycol(), lj);
      for (index_t li = 0; li < local_rows_; ++li)
        *at(li, lj) = f(layout_.rows.global(grid_->myrow(), li), j);
    }
  }

  // One block of this rank's part: the global indices of its first entry, its extent,
  // and its storage (column-major, leading dimension ld).
  template <class E>
  struct block_view {
    index_t row, col, rows, cols;
    E* data;
    index_t ld;
  };
  // The count of this rank's blocks, and the b-th of them (0 <= b < local_blocks()),
  // column of blocks by column of blocks: how an assembly code fills its own blocks.
  index_t local_blocks() const { return row_blocks() * col_blocks(); }
  block_view<T> local_block(index_t b) { return view<T>(*this, b); }
  block_view<const T> local_block(index_t b) const { return view<const T>(*this, b); }

  // Whole matrix, column-major m x n, on rank `root` of the grid (empty elsewhere).
  // For tests and small problems only: it holds everything on one rank.
  std::vector<T> gather(int root = 0) const;
  // Inverse of gather: root's column-major m x n array is distributed.
  void scatter(const std::vector<T>& whole, int root = 0);

private:
  index_t row_blocks() const { return (local_rows_ + block() - 1) / block(); }
  index_t col_blocks() const { return (local_cols_ + block() - 1) / block(); }
  template <class E, class M>
  static block_view<E> view(M& m, index_t b) {
    const index_t nb = m.block(), li = (b % m.row_blocks()) * nb, lj = (b / m.row_blocks()) * nb;
    return {m.layout_.rows.global(m.grid_->myrow(), li),
            m.layout_.cols.global(m.grid_->mycol(), lj),
            std::min(nb, m.local_rows_ - li),
            std::min(nb, m.local_cols_ - lj),
            m.at(li, lj),
            m.ld_};
  }
  index_t offset(index_t li, index_t lj) const {
    return std::min(li + lj * ld_, static_cast<index_t>(storage_.size()));
  }

  const process_grid* grid_;
  block_cyclic layout_;
  index_t local_rows_, local_cols_, ld_;
  std::vector<T, detail::storage_allocator<T>> storage_;
};

// Copies a rows x cols column-major block between leading dimensions (packing a part
// of a local matrix into a message buffer, or back).
template <class T>
void copy_block(index_t rows, index_t cols, const T* from, index_t ld_from, T* to, index_t ld_to) {
  for (index_t c = 0; c < cols; ++c) std::copy_n(from + c * ld_from, rows, to + c * ld_to);
}

// The first entry in row-major order that is NaN or infinite, as (row, column), or
// nothing. Same answer on every rank.
template <scalar T>
std::optional<std::pair<index_t, index_t>> first_nonfinite(const dist_matrix<T>& a);

// A checksum of the entries with their global positions: the same on any grid and
// block size, different after any change of a value (with overwhelming probability).
// `transposed`: the checksum of the transpose of a, as if it had been read the other way.
template <scalar T>
std::uint64_t content_checksum(const dist_matrix<T>& a, bool transposed = false);

}  // namespace gridlu
