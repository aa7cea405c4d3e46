#include "factor/interchange.hpp"

#include "comm/collectives.hpp"
#include "instantiate.hpp"

#include <algorithm>
#include <complex>
#include <numeric>
#include <utility>
#include <vector>

namespace gridlu::detail {
namespace {
constexpr std::size_t ways = 4;  // columns moved together
}  // namespace

interchange_plan plan_interchanges(const cyclic_map& rows, int me, index_t first,
                                   std::span<const index_t> pivots, bool inverse) {
  // Net effect of the sequence: after it, row first + i holds what row first + origin[i]
  // held. Listed by destination, the moves write each column in ascending order: a
  // settle (thousands of moves per column) took about a third less than in pivot order.
  index_t span = static_cast<index_t>(pivots.size());
  for (const index_t r : pivots) span = std::max(span, r - first + 1);
  std::vector<index_t> origin(static_cast<std::size_t>(span));
  std::iota(origin.begin(), origin.end(), index_t{0});
  for (std::size_t t = 0; t < pivots.size(); ++t)
    std::swap(origin[t], origin[static_cast<std::size_t>(pivots[t] - first)]);
  if (inverse) {
    std::vector<index_t> undo(origin.size());
    for (std::size_t i = 0; i < origin.size(); ++i) undo[origin[i]] = static_cast<index_t>(i);
    origin = std::move(undo);
  }

  // Local row indices of the moves, by who holds the source and who the destination.
  interchange_plan plan;
  const int procs = rows.procs();
  plan.send_rows.resize(procs);
  plan.recv_rows.resize(procs);
  for (index_t i = 0; i < span; ++i) {
    if (origin[i] == i) continue;
    ++plan.moves;
    const index_t dest = first + i, source = first + origin[i];
    const int from = rows.owner(source), to = rows.owner(dest);
    if (from == me && to == me) {
      plan.local_from.push_back(rows.local(source));
      plan.local_to.push_back(rows.local(dest));
    } else if (from == me) {
      plan.send_rows[to].push_back(rows.local(source));
    } else if (to == me) {
      plan.recv_rows[from].push_back(rows.local(dest));
    }
  }
  for (int p = 0; p < procs; ++p) {
    const auto &sent = plan.send_rows[p], &received = plan.recv_rows[p];
    plan.packed_rows.insert(plan.packed_rows.end(), sent.begin(), sent.end());
    plan.unpacked_rows.insert(plan.unpacked_rows.end(), received.begin(), received.end());
  }
  plan.packed_rows.insert(plan.packed_rows.end(), plan.local_from.begin(), plan.local_from.end());
  plan.packed_rows.insert(plan.packed_rows.end(), plan.local_to.begin(), plan.local_to.end());
  return plan;
}

template <scalar T>
void interchange_rows(dist_matrix<T>& a, const interchange_plan& plan,
                      std::span<const column_range> columns, interchange_buffers<T>& buffers) {
  if (plan.moves == 0) return;  // the same on every rank of the column
  const int procs = a.layout().rows.procs();
  const auto& [send_rows, recv_rows, local_from, local_to, packed_rows, unpacked_rows, moves] =
      plan;
  // Everything goes column by column: a column is contiguous, a row is not, and walking
  // rows across all columns costs a cache line and a page per entry.
  std::vector<T*> targets;
  for (const auto& c : columns)
    for (index_t lj = c.begin; lj < c.end; ++lj) targets.push_back(a.at(0, lj));
  if (targets.empty()) return;  // the same on every rank of the process column
  // Between process rows, a row that leaves is read when packed and its slot written
  // when the message is unpacked, so the columns go in groups whose touched cache lines
  // stay in cache between the two: one miss per entry instead of two (the group size
  // depends only on what every rank of the column knows, so they agree on it).
  constexpr std::size_t lines_kept = std::size_t{1} << 17;  // 8 MiB of 64-byte lines
  const std::size_t group =
      procs == 1 ? targets.size() : std::max<std::size_t>(1, lines_kept / moves);
  std::vector<index_t> send_counts(procs), recv_counts(procs);
  std::vector<T*> out(procs);
  std::vector<const T*> in(procs);
  auto& [sent, received, held] = buffers;
  // Four columns at a time: four times the independent cache misses in flight, which
  // is what bounds the moves (about 12 % faster than one column at a time). The rows
  // are scattered, so the hardware cannot guess them: the next quad's are prefetched
  // while one quad moves (about 14 % faster again at n = 8192 on 1x2).
  const auto for_each_quad = [](std::span<T* const> part, std::span<const index_t> touched,
                                auto&& f) {
    for (std::size_t j = 0; j < part.size(); j += ways) {
      for (std::size_t q = j + ways; q < std::min(part.size(), j + 2 * ways); ++q)
        for (const index_t li : touched) __builtin_prefetch(part[q] + li, 1);
      f(part.subspan(j, std::min(ways, part.size() - j)));
    }
  };
  held.resize(local_from.size() * ways);
  for (std::size_t g0 = 0; g0 < targets.size(); g0 += group) {
    const auto part = std::span(targets).subspan(g0, std::min(group, targets.size() - g0));
    const auto width = part.size();
    for (int p = 0; p < procs; ++p) {
      send_counts[p] = static_cast<index_t>(send_rows[p].size()) * width;
      recv_counts[p] = static_cast<index_t>(recv_rows[p].size()) * width;
    }
    sent.resize(static_cast<std::size_t>(
        std::accumulate(send_counts.begin(), send_counts.end(), index_t{0})));
    received.resize(static_cast<std::size_t>(
        std::accumulate(recv_counts.begin(), recv_counts.end(), index_t{0})));
    for (index_t p = 0, offset = 0; p < procs; offset += send_counts[p++])
      out[p] = sent.data() + offset;
    // One pass packs what leaves and then moves what stays (a row sent away may be
    // overwritten by a move within this rank).
    for_each_quad(part, packed_rows, [&](std::span<T* const> quad) {
      for (int p = 0; p < procs; ++p)
        for (const index_t li : send_rows[p])
          for (T* column : quad) *out[p]++ = column[li];
      std::size_t k = 0;
      for (const index_t li : local_from)
        for (T* column : quad) held[k++] = column[li];
      k = 0;
      for (const index_t li : local_to)
        for (T* column : quad) column[li] = held[k++];
    });
    if (procs == 1) continue;
    comm::all_to_all(a.grid().col(), sent.data(), send_counts, received.data(), recv_counts);
    // The same order as the packing: per quad of columns, each source's rows.
    for (index_t p = 0, offset = 0; p < procs; offset += recv_counts[p++])
      in[p] = received.data() + offset;
    for_each_quad(part, unpacked_rows, [&](std::span<T* const> quad) {
      for (int p = 0; p < procs; ++p)
        for (const index_t li : recv_rows[p])
          for (T* column : quad) column[li] = *in[p]++;
    });
  }
}

#define INSTANTIATE(T)                                                        \
  template void interchange_rows<T>(dist_matrix<T>&, const interchange_plan&, \
                                    std::span<const column_range>, interchange_buffers<T>&);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu::detail
