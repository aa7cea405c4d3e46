#include "factor/interchange.hpp"

#include "instantiate.hpp"

#include <complex>
#include <numeric>
#include <unordered_map>
#include <vector>

namespace gridlu::detail {

template <scalar T>
void interchange_rows(dist_matrix<T>& a, index_t first, std::span<const index_t> pivots,
                      std::span<const column_range> columns) {
  // Net effect of the sequence: after it, row dest[s] holds what row source[s] held.
  std::vector<index_t> dest, source;
  std::unordered_map<index_t, std::size_t> slot_of;
  const auto slot = [&](index_t row) {
    const auto [it, fresh] = slot_of.try_emplace(row, dest.size());
    if (fresh) {
      dest.push_back(row);
      source.push_back(row);
    }
    return it->second;
  };
  for (std::size_t t = 0; t < pivots.size(); ++t) {
    const auto s = slot(first + static_cast<index_t>(t)), r = slot(pivots[t]);
    std::swap(source[s], source[r]);
  }
  std::vector<std::size_t> moves;
  for (std::size_t s = 0; s < dest.size(); ++s)
    if (dest[s] != source[s]) moves.push_back(s);
  if (moves.empty()) return;  // the same on every rank of the column

  const auto& rows = a.layout().rows;
  const int procs = rows.procs(), me = a.grid().myrow();
  index_t width = 0;
  for (const auto& c : columns) width += c.end - c.begin;
  const int w = static_cast<int>(width);

  std::vector<int> send_counts(procs, 0), recv_counts(procs, 0);
  for (const auto s : moves) {
    if (rows.owner(source[s]) == me) send_counts[rows.owner(dest[s])] += w;
    if (rows.owner(dest[s]) == me) recv_counts[rows.owner(source[s])] += w;
  }
  std::vector<T> sent, received;
  sent.reserve(
      static_cast<std::size_t>(std::accumulate(send_counts.begin(), send_counts.end(), 0)));
  for (int p = 0; p < procs; ++p)
    for (const auto s : moves)
      if (rows.owner(source[s]) == me && rows.owner(dest[s]) == p) {
        const index_t li = rows.local(source[s]);
        for (const auto& c : columns)
          for (index_t lj = c.begin; lj < c.end; ++lj) sent.push_back(*a.at(li, lj));
      }
  received.resize(
      static_cast<std::size_t>(std::accumulate(recv_counts.begin(), recv_counts.end(), 0)));
  comm::all_to_all(a.grid().col(), sent.data(), send_counts, received.data(), recv_counts);
  auto next = received.cbegin();
  for (int p = 0; p < procs; ++p)
    for (const auto s : moves)
      if (rows.owner(dest[s]) == me && rows.owner(source[s]) == p) {
        const index_t li = rows.local(dest[s]);
        for (const auto& c : columns)
          for (index_t lj = c.begin; lj < c.end; ++lj) *a.at(li, lj) = *next++;
      }
}

#define INSTANTIATE(T)                                                                  \
  template void interchange_rows<T>(dist_matrix<T>&, index_t, std::span<const index_t>, \
                                    std::span<const column_range>);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu::detail
