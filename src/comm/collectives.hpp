// Communication internals of the algorithms: point-to-point messages, the pivot
// reduction, non-blocking broadcasts, all-to-all and gathers. Not part of the public
// headers: a library user needs only the grid and the collectives in gridlu/grid.hpp.
#pragma once

#include <cstdint>
#include <vector>

#include "gridlu/grid.hpp"

namespace gridlu::comm {

// Bitwise exclusive or of unsigned 64-bit words (order-independent checksums).
void bit_xor(const communicator& c, std::uint64_t* data, index_t count);

// Pivot candidate: largest magnitude wins, equal magnitudes go to the smaller row,
// which is how LAPACK's first-maximum search breaks ties. No candidate: row -1.
struct candidate {
  double magnitude;
  index_t row;
};

// One reduction per column of a panel: every rank brings its best candidate with that
// row's `width` entries in pivot_row, and the rank holding the diagonal row brings it in
// diagonal_row. Every rank returns with the winner, its entries in pivot_row, and the
// diagonal row's entries in diagonal_row, so both rows of the interchange travel in the
// message that finds the pivot.
template <class T>
candidate best_with_rows(const communicator& c, candidate mine, T* pivot_row, T* diagonal_row,
                         bool holds_diagonal, index_t width);

// A non-blocking operation in flight. Destruction waits for it: its buffers must
// outlive it.
class request {
public:
  request() = default;
  explicit request(std::vector<MPI_Request> r) : r_(std::move(r)) {}
  ~request();
  request(request&& other) noexcept;
  request& operator=(request&& other) noexcept;
  request(const request&) = delete;
  request& operator=(const request&) = delete;

  bool test();  // lets MPI progress it; true once complete
  void wait();

private:
  std::vector<MPI_Request> r_;  // one per piece of the transfer
};

// Non-blocking broadcast; every rank of c starts it, in the same order as c's other
// collectives.
template <class T>
request start_broadcast(const communicator& c, T* data, index_t count, int root);

// All-to-all with per-rank element counts; displacements follow the rank order. Point to
// point, each message in pieces within the transfer limit.
template <class T>
void all_to_all(const communicator& c, const T* send, const std::vector<index_t>& send_counts,
                T* recv, const std::vector<index_t>& recv_counts);

// Concatenates every rank's block on root, in rank order. Every rank passes every count
// (so all agree on the rounds the transfer limit asks for); root's buffer holds at most
// 2^31 elements.
template <class T>
void gather(const communicator& c, const T* send, index_t count, T* recv,
            const std::vector<index_t>& counts, int root);
template <class T>
void scatter(const communicator& c, const T* send, const std::vector<index_t>& counts, T* recv,
             index_t count, int root);
// Every rank brings its block and gets all blocks concatenated in rank order.
template <class T>
void all_gather(const communicator& c, const T* send, index_t count, T* recv,
                const std::vector<index_t>& counts);

// Seconds of one trip of a `bytes` message between ranks a and b of c, the mean of
// `rounds` round trips; the other ranks take no part and return 0.
double ping_pong(const communicator& c, int a, int b, index_t bytes, int rounds);

}  // namespace gridlu::comm
