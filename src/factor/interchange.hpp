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

// What the interchanges row (first + t) <-> row pivots[t], t = 0, 1, ... in order, do to
// this rank's rows: their net permutation, the same for every column, so it is planned
// once and applied to any number of column ranges.
struct interchange_plan {
  std::vector<std::vector<index_t>> send_rows, recv_rows;  // local rows, by process row
  std::vector<index_t> local_from, local_to;               // moves within this rank
  std::vector<index_t> packed_rows, unpacked_rows;         // every row each pass reads or writes
  std::size_t moves = 0;                                   // over the whole process column
};

// With `inverse`, the plan undoes the sequence instead: the interchanges in reverse order,
// which is P^T where the sequence is P.
interchange_plan plan_interchanges(const cyclic_map& rows, int me, index_t first,
                                   std::span<const index_t> pivots, bool inverse = false);

// Applies a plan to the local columns in `columns`. The net permutation is exchanged in
// one all-to-all over the process column per group of columns: one message per pair of
// process rows, not one per row. Collective over a's process column.
template <scalar T>
void interchange_rows(dist_matrix<T>& a, const interchange_plan& plan,
                      std::span<const column_range> columns, interchange_buffers<T>& buffers);

// Plans and applies in one go.
template <scalar T>
void interchange_rows(dist_matrix<T>& a, index_t first, std::span<const index_t> pivots,
                      std::span<const column_range> columns, interchange_buffers<T>& buffers) {
  interchange_rows(a, plan_interchanges(a.layout().rows, a.grid().myrow(), first, pivots), columns,
                   buffers);
}

}  // namespace gridlu::detail
