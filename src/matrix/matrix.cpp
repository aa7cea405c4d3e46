#include "gridlu/matrix.hpp"

#include <sys/mman.h>

#include <cmath>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <new>

#include "comm/collectives.hpp"
#include "comm/fault.hpp"
#include "gridlu/generate.hpp"
#include "instantiate.hpp"

#include <complex>

namespace gridlu {

namespace detail {

namespace {
constexpr std::size_t huge_page = std::size_t{2} << 20;
}  // namespace

void* allocate_storage(std::size_t bytes) {
  if (fault::hit("allocate")) throw std::bad_alloc();
  if (bytes < huge_page) return ::operator new(bytes);
  const std::size_t rounded = (bytes + huge_page - 1) / huge_page * huge_page;
  void* p = std::aligned_alloc(huge_page, rounded);
  if (p == nullptr) throw std::bad_alloc();
  // Advice only: where transparent huge pages are off, this fails and nothing changes.
  madvise(p, rounded, MADV_HUGEPAGE);
  return p;
}

void release_storage(void* p, std::size_t bytes) noexcept {
  if (bytes < huge_page)
    ::operator delete(p);
  else
    std::free(p);
}

}  // namespace detail

template <scalar T>
dist_matrix<T>::dist_matrix(const process_grid& grid, index_t m, index_t n, index_t nb)
    : grid_(&grid),
      layout_(m, n, nb, grid.prows(), grid.pcols()),
      local_rows_(layout_.rows.local_extent(grid.myrow())),
      local_cols_(layout_.cols.local_extent(grid.mycol())),
      ld_(std::max<index_t>(1, local_rows_)),
      storage_(static_cast<std::size_t>(ld_ * local_cols_)) {
  if (m < 0 || n < 0 || nb < 1)
    throw error(error_kind::usage, "matrix sizes must be >= 0 and the block size >= 1");
}

namespace {

// Visits, for rank r of the grid, every (local offset in r's packed column-major part,
// global row, global column) in packing order.
template <class F>
void for_each_entry_of(const block_cyclic& layout, int q, int r, F&& f) {
  const int prow = r / q, pcol = r % q;
  const index_t mr = layout.rows.local_extent(prow), nc = layout.cols.local_extent(pcol);
  for (index_t lj = 0; lj < nc; ++lj)
    for (index_t li = 0; li < mr; ++li)
      f(li + lj * mr, layout.rows.global(prow, li), layout.cols.global(pcol, lj));
}

// How many entries each rank of the grid holds, in rank order.
std::vector<index_t> rank_counts(const block_cyclic& layout, int q, int ranks) {
  std::vector<index_t> counts;
  for (int r = 0; r < ranks; ++r)
    counts.push_back(layout.rows.local_extent(r / q) * layout.cols.local_extent(r % q));
  return counts;
}

}  // namespace

template <scalar T>
std::vector<T> dist_matrix<T>::gather(int root) const {
  const auto& all = grid_->all();
  std::vector<T> packed(static_cast<std::size_t>(local_rows_ * local_cols_));
  for (index_t lj = 0; lj < local_cols_; ++lj)
    std::copy_n(at(0, lj), local_rows_, packed.data() + lj * local_rows_);
  const auto counts = rank_counts(layout_, grid_->pcols(), all.size());
  std::vector<T> received, whole;
  if (all.rank() == root) received.resize(static_cast<std::size_t>(rows() * cols()));
  comm::gather(all, packed.data(), static_cast<index_t>(packed.size()), received.data(), counts,
               root);
  if (all.rank() != root) return whole;
  whole.resize(received.size());
  index_t offset = 0;
  for (int r = 0; r < all.size(); ++r) {
    for_each_entry_of(layout_, grid_->pcols(), r, [&](index_t k, index_t i, index_t j) {
      whole[static_cast<std::size_t>(i + j * rows())] = received[offset + k];
    });
    offset += counts[r];
  }
  return whole;
}

template <scalar T>
void dist_matrix<T>::scatter(const std::vector<T>& whole, int root) {
  const auto& all = grid_->all();
  const auto counts = rank_counts(layout_, grid_->pcols(), all.size());
  std::vector<T> packed;
  comm::together(all, [&] {
    if (all.rank() == root && static_cast<index_t>(whole.size()) != rows() * cols())
      throw error(error_kind::internal, "scatter: array size does not match the matrix");
  });
  if (all.rank() == root) {
    packed.resize(whole.size());
    index_t offset = 0;
    for (int r = 0; r < all.size(); ++r) {
      for_each_entry_of(layout_, grid_->pcols(), r, [&](index_t k, index_t i, index_t j) {
        packed[offset + k] = whole[static_cast<std::size_t>(i + j * rows())];
      });
      offset += counts[r];
    }
  }
  std::vector<T> mine(static_cast<std::size_t>(local_rows_ * local_cols_));
  comm::scatter(all, packed.data(), counts, mine.data(), static_cast<index_t>(mine.size()), root);
  for (index_t lj = 0; lj < local_cols_; ++lj)
    std::copy_n(mine.data() + lj * local_rows_, local_rows_, at(0, lj));
}

template <scalar T>
std::optional<std::pair<index_t, index_t>> first_nonfinite(const dist_matrix<T>& a) {
  // Row-major position i * cols + j, negated so that a max-reduction finds the first.
  std::int64_t key = std::numeric_limits<std::int64_t>::min();
  const auto& layout = a.layout();
  for (index_t lj = 0; lj < a.local_cols(); ++lj) {
    const T* column = a.at(0, lj);
    for (index_t li = 0; li < a.local_rows(); ++li) {
      if (!is_finite(column[li])) {
        const index_t g = layout.rows.global(a.grid().myrow(), li) * a.cols() +
                          layout.cols.global(a.grid().mycol(), lj);
        key = std::max(key, -g);
        break;  // later rows of this column come later in row-major order too
      }
    }
  }
  comm::max(a.grid().all(), &key, 1);
  if (key == std::numeric_limits<std::int64_t>::min()) return std::nullopt;
  return std::pair{-key / a.cols(), -key % a.cols()};
}

template <scalar T>
std::uint64_t content_checksum(const dist_matrix<T>& a, bool transposed) {
  std::uint64_t sum = 0;
  const auto& layout = a.layout();
  for (index_t lj = 0; lj < a.local_cols(); ++lj) {
    const index_t j = layout.cols.global(a.grid().mycol(), lj);
    for (index_t li = 0; li < a.local_rows(); ++li) {
      const index_t i = layout.rows.global(a.grid().myrow(), li);
      sum ^= transposed ? detail::entry_hash(j, i, *a.at(li, lj))
                        : detail::entry_hash(i, j, *a.at(li, lj));
    }
  }
  comm::bit_xor(a.grid().all(), &sum, 1);
  return sum;
}

#define INSTANTIATE(T)                                                                           \
  template class dist_matrix<T>;                                                                 \
  template std::optional<std::pair<index_t, index_t>> first_nonfinite<T>(const dist_matrix<T>&); \
  template std::uint64_t content_checksum<T>(const dist_matrix<T>&, bool);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
