// The process grid: P x Q ranks of an MPI communicator with their row and column
// communicators, and the typed collectives the algorithms use. Everything above this
// layer talks to MPI through here.
#pragma once

#include <mpi.h>

#include <exception>
#include <string>
#include <string_view>
#include <vector>

#include "gridlu/error.hpp"
#include "gridlu/layout.hpp"

namespace gridlu {

// MPI_Init / MPI_Finalize for the lifetime of the program's main().
class mpi_session {
public:
  mpi_session(int& argc, char**& argv);
  ~mpi_session();
  mpi_session(const mpi_session&) = delete;
  mpi_session& operator=(const mpi_session&) = delete;
};

// An owned MPI communicator (freed on destruction).
class communicator {
public:
  communicator() = default;
  explicit communicator(MPI_Comm comm) : comm_(comm) {}
  ~communicator();
  communicator(communicator&& other) noexcept;
  communicator& operator=(communicator&& other) noexcept;
  communicator(const communicator&) = delete;
  communicator& operator=(const communicator&) = delete;

  MPI_Comm get() const { return comm_; }
  int rank() const;
  int size() const;

private:
  MPI_Comm comm_ = MPI_COMM_NULL;
};

struct grid_shape {
  int p = 1;
  int q = 1;
  friend bool operator==(const grid_shape&, const grid_shape&) = default;
};

// "PxQ" -> {P, Q}; throws a usage error for anything else.
grid_shape parse_grid_shape(std::string_view text);
// As square as possible with P <= Q (more process columns favour the row broadcasts).
grid_shape square_grid_shape(int ranks);

// Ranks are laid out row-major: rank = myrow * Q + mycol.
class process_grid {
public:
  // Throws a usage error when p*q differs from the size of `parent`.
  process_grid(MPI_Comm parent, grid_shape shape);

  int prows() const { return shape_.p; }
  int pcols() const { return shape_.q; }
  grid_shape shape() const { return shape_; }
  int myrow() const { return myrow_; }
  int mycol() const { return mycol_; }
  int rank() const { return all_.rank(); }
  int size() const { return all_.size(); }

  const communicator& all() const { return all_; }
  const communicator& row() const { return row_; }  // my process row, ranked by column
  const communicator& col() const { return col_; }  // my process column, ranked by row

private:
  grid_shape shape_;
  communicator all_, row_, col_;
  int myrow_ = 0, mycol_ = 0;
};

namespace comm {

double wtime();
// The MPI library's own description of itself (first line).
std::string library_version();
void barrier(const communicator& c);

template <class T>
void broadcast(const communicator& c, T* data, index_t count, int root);

template <class T>
void send(const communicator& c, const T* data, index_t count, int dest);
template <class T>
void receive(const communicator& c, T* data, index_t count, int source);

// Elementwise reductions in place over all ranks of c (real scalars and index_t).
template <class T>
void sum(const communicator& c, T* data, index_t count);
template <class T>
void max(const communicator& c, T* data, index_t count);

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
  explicit request(MPI_Request r) : r_(r) {}
  ~request();
  request(request&& other) noexcept;
  request& operator=(request&& other) noexcept;
  request(const request&) = delete;
  request& operator=(const request&) = delete;

  bool test();  // lets MPI progress it; true once complete
  void wait();

private:
  MPI_Request r_ = MPI_REQUEST_NULL;
};

// Non-blocking broadcast; every rank of c starts it, in the same order as c's other
// collectives.
template <class T>
request start_broadcast(const communicator& c, T* data, index_t count, int root);

// All-to-all with per-rank element counts; displacements follow the rank order.
template <class T>
void all_to_all(const communicator& c, const T* send, const std::vector<int>& send_counts, T* recv,
                const std::vector<int>& recv_counts);

// Concatenates every rank's block on root, in rank order; counts known on root.
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

// Every rank brings its own outcome (null if it succeeded). If any rank failed, all
// ranks throw the same gridlu::error: the code and message of the lowest failing rank.
void agree(const communicator& c, std::exception_ptr mine);

// Runs f on every rank and agrees on the outcome before anyone moves on.
template <class F>
void together(const communicator& c, F&& f) {
  std::exception_ptr failure;
  try {
    f();
  } catch (...) {
    failure = std::current_exception();
  }
  agree(c, failure);
}

}  // namespace comm
}  // namespace gridlu
