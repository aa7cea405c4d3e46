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

// No single MPI or HDF5 call moves more than this many bytes (nor 2^31 elements): longer
// transfers go in pieces. The default, 256 MiB, is far below the 2 GiB that MPI's int
// counts and HDF5 over MPI-IO allow; tests lower it to a few bytes so that every split path
// runs on small matrices. Throws a usage error outside [1 byte, 1 GiB].
inline constexpr std::int64_t largest_transfer_limit = std::int64_t{1} << 30;
std::int64_t transfer_limit();
void set_transfer_limit(std::int64_t bytes);
// Sets the limit from the environment variable GRIDLU_TRANSFER_LIMIT (bytes), if set.
void transfer_limit_from_environment();

double wtime();
// This process's rank in, and the size of, the whole job (MPI_COMM_WORLD).
int world_rank();
int world_size();
// The size of any communicator, and a Fortran communicator handle as a C one.
int size_of(MPI_Comm c);
MPI_Comm from_fortran(MPI_Fint c);
// Ends every rank of the job at once with `code`: for failures the ranks cannot agree on.
[[noreturn]] void abort_job(int code);
// How many ranks of c share this rank's node (and so its memory). Collective.
int ranks_on_node(const communicator& c);
// True on every rank if `mine` is true on any rank of the job.
bool any_rank(bool mine);
// Ends this rank with `code` without MPI_Finalize, output flushed: for a library that
// cannot shut down cleanly, once every rank has agreed to end this way.
[[noreturn]] void end_without_finalize(int code);
// The MPI library's own description of itself (first line).
std::string library_version();
void barrier(const communicator& c);

template <class T>
void broadcast(const communicator& c, T* data, index_t count, int root);
// Root's text on every rank.
void broadcast(const communicator& c, std::string& text, int root);

// Elementwise reductions in place over all ranks of c (sum: any scalar or index_t;
// max, min: real scalars and index_t). A NaN anywhere makes max and min NaN.
template <class T>
void sum(const communicator& c, T* data, index_t count);
template <class T>
void max(const communicator& c, T* data, index_t count);
template <class T>
void min(const communicator& c, T* data, index_t count);

// Every rank brings its own outcome (null if it succeeded). If any rank failed, all
// ranks throw the same gridlu::error: the kind and message of the lowest failing rank.
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
