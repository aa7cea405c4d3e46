// Row interchanges on a distributed matrix, restricted to some of its local columns.
#pragma once

#include <span>
#include <vector>

#include "gridlu/matrix.hpp"

namespace gridlu::detail {

// Half-open range of local column indices.
struct column_range {
  index_t begin, end;
};

// Message buffers of interchange_rows, kept by the caller across calls: fresh large
// buffers at every step would be mapped, faulted in and zeroed every time.
template <scalar T>
struct interchange_buffers {
  std::vector<T> sent, received, held;
};

// Applies the interchanges row (first + t) <-> row pivots[t], t = 0, 1, ... in order, to
// the local columns in `columns`. The net permutation is exchanged in one all-to-all
// over the process column per group of columns: one message per pair of process rows,
// not one per row. Collective over a's process column.
template <scalar T>
void interchange_rows(dist_matrix<T>& a, index_t first, std::span<const index_t> pivots,
                      std::span<const column_range> columns, interchange_buffers<T>& buffers);

}  // namespace gridlu::detail
