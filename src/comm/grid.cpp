// The one place that calls MPI.
#include "comm/collectives.hpp"

#include <algorithm>
#include <charconv>
#include <climits>
#include <cmath>
#include <complex>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <new>
#include <numeric>

namespace gridlu {
namespace {

void check(int rc, const char* what) {
  if (rc != MPI_SUCCESS) {
    char text[MPI_MAX_ERROR_STRING];
    int len = 0;
    MPI_Error_string(rc, text, &len);
    throw error(error_kind::internal, std::string(what) + ": " + std::string(text, len));
  }
}

template <class T>
MPI_Datatype mpi_type() {
  if constexpr (std::is_same_v<T, float>)
    return MPI_FLOAT;
  else if constexpr (std::is_same_v<T, double>)
    return MPI_DOUBLE;
  else if constexpr (std::is_same_v<T, std::complex<float>>)
    return MPI_CXX_FLOAT_COMPLEX;
  else if constexpr (std::is_same_v<T, std::complex<double>>)
    return MPI_CXX_DOUBLE_COMPLEX;
  else if constexpr (std::is_same_v<T, std::int64_t>)
    return MPI_INT64_T;
  else if constexpr (std::is_same_v<T, int>)
    return MPI_INT;
  else if constexpr (std::is_same_v<T, char>)
    return MPI_CHAR;
  else
    static_assert(sizeof(T) == 0, "no MPI type for T");
}

int to_int(index_t count) {
  if (count < 0 || count > INT_MAX) throw error(error_kind::internal, "message too large for MPI");
  return static_cast<int>(count);
}

template <class I>
std::vector<I> displacements(const std::vector<I>& counts) {
  std::vector<I> d(counts.size(), 0);
  for (std::size_t i = 1; i < counts.size(); ++i) d[i] = d[i - 1] + counts[i - 1];
  return d;
}

std::int64_t limit_bytes = std::int64_t{1} << 28;

// Elements of T one call may move: the transfer limit's worth, at least one.
template <class T>
index_t piece_of() {
  return std::max<index_t>(
      1, std::min<index_t>(limit_bytes / static_cast<index_t>(sizeof(T)), INT_MAX));
}

// f(first, count) for consecutive pieces of [0, count) within the transfer limit.
template <class T, class F>
void in_pieces(index_t count, F&& f) {
  const index_t piece = piece_of<T>();
  for (index_t done = 0; done < count; done += piece) f(done, std::min(piece, count - done));
}

}  // namespace

mpi_session::mpi_session(int& argc, char**& argv) { MPI_Init(&argc, &argv); }

mpi_session::~mpi_session() { MPI_Finalize(); }

communicator::~communicator() {
  if (comm_ != MPI_COMM_NULL) MPI_Comm_free(&comm_);
}
communicator::communicator(communicator&& other) noexcept : comm_(other.comm_) {
  other.comm_ = MPI_COMM_NULL;
}
communicator& communicator::operator=(communicator&& other) noexcept {
  std::swap(comm_, other.comm_);
  return *this;
}
int communicator::rank() const {
  int r = 0;
  MPI_Comm_rank(comm_, &r);
  return r;
}
int communicator::size() const {
  int s = 0;
  MPI_Comm_size(comm_, &s);
  return s;
}

grid_shape parse_grid_shape(std::string_view text) {
  const auto x = text.find_first_of("xX");
  grid_shape s{0, 0};
  const auto number = [](std::string_view part, int& out) {
    const auto [end, ec] = std::from_chars(part.data(), part.data() + part.size(), out);
    return ec == std::errc{} && end == part.data() + part.size() && out > 0;
  };
  if (x == std::string_view::npos || !number(text.substr(0, x), s.p) ||
      !number(text.substr(x + 1), s.q))
    throw error(error_kind::usage,
                "grid '" + std::string(text) + "' is not of the form PxQ with P, Q >= 1");
  return s;
}

grid_shape square_grid_shape(int ranks) {
  int p = 1;
  for (int d = 1; d * d <= ranks; ++d)
    if (ranks % d == 0) p = d;
  return {p, ranks / p};
}

process_grid::process_grid(MPI_Comm parent, grid_shape shape) : shape_(shape) {
  int size = 0, rank = 0;
  MPI_Comm_size(parent, &size);
  MPI_Comm_rank(parent, &rank);
  if (shape.p < 1 || shape.q < 1 || shape.p * shape.q != size)
    throw error(error_kind::usage, "grid " + std::to_string(shape.p) + "x" +
                                       std::to_string(shape.q) + " needs " +
                                       std::to_string(shape.p * shape.q) + " ranks, but " +
                                       std::to_string(size) + " are running");
  MPI_Comm c = MPI_COMM_NULL;
  check(MPI_Comm_dup(parent, &c), "MPI_Comm_dup");
  all_ = communicator(c);
  myrow_ = rank / shape.q;
  mycol_ = rank % shape.q;
  check(MPI_Comm_split(c, myrow_, mycol_, &c), "MPI_Comm_split");
  row_ = communicator(c);
  check(MPI_Comm_split(all_.get(), mycol_, myrow_, &c), "MPI_Comm_split");
  col_ = communicator(c);
}

namespace comm {

std::int64_t transfer_limit() { return limit_bytes; }
void set_transfer_limit(std::int64_t bytes) {
  if (bytes < 1 || bytes > largest_transfer_limit)
    throw error(error_kind::usage,
                "the transfer limit must be from 1 byte to 1 GiB, not " + std::to_string(bytes));
  limit_bytes = bytes;
}

void transfer_limit_from_environment() {
  const char* text = std::getenv("GRIDLU_TRANSFER_LIMIT");
  if (!text) return;
  std::int64_t bytes = 0;
  const auto end = text + std::strlen(text);
  const auto [at, rc] = std::from_chars(text, end, bytes);
  if (rc != std::errc() || at != end || *text == '\0')
    throw error(error_kind::usage,
                "GRIDLU_TRANSFER_LIMIT must be a number of bytes, not '" + std::string(text) + "'");
  set_transfer_limit(bytes);
}

double wtime() { return MPI_Wtime(); }

int world_rank() {
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  return rank;
}

int world_size() { return size_of(MPI_COMM_WORLD); }

int size_of(MPI_Comm c) {
  int size = 0;
  MPI_Comm_size(c, &size);
  return size;
}

MPI_Comm from_fortran(MPI_Fint c) { return MPI_Comm_f2c(c); }

int ranks_on_node(const communicator& c) {
  MPI_Comm node = MPI_COMM_NULL;
  check(MPI_Comm_split_type(c.get(), MPI_COMM_TYPE_SHARED, 0, MPI_INFO_NULL, &node),
        "MPI_Comm_split_type");
  return communicator(node).size();
}

bool any_rank(bool mine) {
  int v = mine ? 1 : 0;
  check(MPI_Allreduce(MPI_IN_PLACE, &v, 1, MPI_INT, MPI_MAX, MPI_COMM_WORLD), "MPI_Allreduce");
  return v != 0;
}

void end_without_finalize(int code) {
  std::fflush(nullptr);
  std::_Exit(code);
}

void abort_job(int code) {
  std::fflush(nullptr);
  int started = 0, finished = 0;
  MPI_Initialized(&started);
  MPI_Finalized(&finished);
  if (started && !finished) MPI_Abort(MPI_COMM_WORLD, code);
  std::_Exit(code);  // outside MPI's lifetime this rank is the whole job
}

std::string library_version() {
  char text[MPI_MAX_LIBRARY_VERSION_STRING];
  int len = 0;
  MPI_Get_library_version(text, &len);
  const std::string s(text, static_cast<std::size_t>(len));
  return s.substr(0, s.find_first_of(",\n"));
}
void barrier(const communicator& c) { check(MPI_Barrier(c.get()), "MPI_Barrier"); }

double ping_pong(const communicator& c, int a, int b, index_t bytes, int rounds) {
  const int me = c.rank();
  if (me != a && me != b) return 0;
  const int peer = me == a ? b : a;
  std::vector<char> message(static_cast<std::size_t>(bytes));
  const auto send = [&] {
    check(MPI_Send(message.data(), to_int(bytes), MPI_BYTE, peer, 0, c.get()), "MPI_Send");
  };
  const auto receive = [&] {
    check(MPI_Recv(message.data(), to_int(bytes), MPI_BYTE, peer, 0, c.get(), MPI_STATUS_IGNORE),
          "MPI_Recv");
  };
  const double start = MPI_Wtime();
  for (int r = 0; r < rounds; ++r) {
    if (me == a)
      send(), receive();
    else
      receive(), send();
  }
  return (MPI_Wtime() - start) / (2.0 * rounds);
}

template <class T>
void broadcast(const communicator& c, T* data, index_t count, int root) {
  in_pieces<T>(count, [&](index_t first, index_t n) {
    check(MPI_Bcast(data + first, to_int(n), mpi_type<T>(), root, c.get()), "MPI_Bcast");
  });
}

void broadcast(const communicator& c, std::string& text, int root) {
  std::int64_t size = static_cast<std::int64_t>(text.size());
  broadcast(c, &size, 1, root);
  text.resize(static_cast<std::size_t>(size));
  broadcast(c, text.data(), size, root);
}

// An all-reduce in place, in pieces within the transfer limit.
template <class T>
void all_reduce(const communicator& c, T* data, index_t count, MPI_Datatype type, MPI_Op op) {
  in_pieces<T>(count, [&](index_t first, index_t n) {
    check(MPI_Allreduce(MPI_IN_PLACE, data + first, to_int(n), type, op, c.get()), "MPI_Allreduce");
  });
}

template <class T>
void sum(const communicator& c, T* data, index_t count) {
  all_reduce(c, data, count, mpi_type<T>(), MPI_SUM);
}

// MPI_MAX and MPI_MIN on floating types may drop a NaN; these keep it, so that a NaN
// anywhere cannot make a figure look good.
template <class T, bool largest>
void extreme_keeping_nan(void* in, void* inout, int* len, MPI_Datatype*) {
  const T* a = static_cast<const T*>(in);
  T* b = static_cast<T*>(inout);
  for (int i = 0; i < *len; ++i)
    if (std::isnan(a[i]) || (largest ? a[i] > b[i] : a[i] < b[i])) b[i] = a[i];
}

template <class T, bool largest>
MPI_Op extreme_op() {
  if constexpr (std::is_floating_point_v<T>) {
    static const MPI_Op op = [] {
      MPI_Op o;
      check(MPI_Op_create(&extreme_keeping_nan<T, largest>, 1, &o), "MPI_Op_create");
      return o;
    }();
    return op;
  } else {
    return largest ? MPI_MAX : MPI_MIN;
  }
}

template <class T>
void max(const communicator& c, T* data, index_t count) {
  all_reduce(c, data, count, mpi_type<T>(), extreme_op<T, true>());
}
template <class T>
void min(const communicator& c, T* data, index_t count) {
  all_reduce(c, data, count, mpi_type<T>(), extreme_op<T, false>());
}

void bit_xor(const communicator& c, std::uint64_t* data, index_t count) {
  all_reduce(c, data, count, MPI_UINT64_T, MPI_BXOR);
}

namespace {

// The pivot message: a header, then the candidate's row, then the diagonal row.
struct pivot_header {
  double magnitude;
  index_t row;
  int holds_diagonal;
};
constexpr std::size_t row_offset = (sizeof(pivot_header) + 15) / 16 * 16;

template <class T>
void combine_pivots(void* in, void* inout, int* len, MPI_Datatype* type) {
  int bytes = 0;
  MPI_Type_size(*type, &bytes);
  const std::size_t width = (static_cast<std::size_t>(bytes) - row_offset) / (2 * sizeof(T));
  auto* from = static_cast<std::byte*>(in);
  auto* to = static_cast<std::byte*>(inout);
  for (int e = 0; e < *len; ++e, from += bytes, to += bytes) {
    pivot_header f, t;
    std::memcpy(&f, from, sizeof f);
    std::memcpy(&t, to, sizeof t);
    const bool wins = f.row >= 0 && (t.row < 0 || f.magnitude > t.magnitude ||
                                     (f.magnitude == t.magnitude && f.row < t.row));
    if (wins) {
      t.magnitude = f.magnitude;
      t.row = f.row;
      std::memcpy(to + row_offset, from + row_offset, width * sizeof(T));
    }
    if (f.holds_diagonal) {
      t.holds_diagonal = 1;
      std::memcpy(to + row_offset + width * sizeof(T), from + row_offset + width * sizeof(T),
                  width * sizeof(T));
    }
    std::memcpy(to, &t, sizeof t);
  }
}

// One committed type per message size and one operation per scalar type, made on first
// use and kept for the rest of the run (MPI_Finalize reclaims them).
template <class T>
std::pair<MPI_Datatype, MPI_Op> pivot_message(int bytes) {
  static std::vector<std::pair<int, MPI_Datatype>> types;
  static MPI_Op op = [] {
    MPI_Op o;
    check(MPI_Op_create(&combine_pivots<T>, 1, &o), "MPI_Op_create");
    return o;
  }();
  for (const auto& [b, t] : types)
    if (b == bytes) return {t, op};
  MPI_Datatype t;
  check(MPI_Type_contiguous(bytes, MPI_BYTE, &t), "MPI_Type_contiguous");
  check(MPI_Type_commit(&t), "MPI_Type_commit");
  types.emplace_back(bytes, t);
  return {t, op};
}

}  // namespace

template <class T>
candidate best_with_rows(const communicator& c, candidate mine, T* pivot_row, T* diagonal_row,
                         bool holds_diagonal, index_t width) {
  if (c.size() == 1) return mine;
  const std::size_t row_bytes = static_cast<std::size_t>(width) * sizeof(T);
  const int bytes = to_int(static_cast<index_t>(row_offset + 2 * row_bytes));
  std::vector<std::byte> message(static_cast<std::size_t>(bytes));
  const pivot_header h{mine.magnitude, mine.row, holds_diagonal ? 1 : 0};
  std::memcpy(message.data(), &h, sizeof h);
  std::memcpy(message.data() + row_offset, pivot_row, row_bytes);
  if (holds_diagonal) std::memcpy(message.data() + row_offset + row_bytes, diagonal_row, row_bytes);
  const auto [type, op] = pivot_message<T>(bytes);
  check(MPI_Allreduce(MPI_IN_PLACE, message.data(), 1, type, op, c.get()), "MPI_Allreduce");
  pivot_header out;
  std::memcpy(&out, message.data(), sizeof out);
  std::memcpy(pivot_row, message.data() + row_offset, row_bytes);
  std::memcpy(diagonal_row, message.data() + row_offset + row_bytes, row_bytes);
  return {out.magnitude, out.row};
}

request::~request() {
  if (!r_.empty()) MPI_Waitall(static_cast<int>(r_.size()), r_.data(), MPI_STATUSES_IGNORE);
}
request::request(request&& other) noexcept : r_(std::move(other.r_)) { other.r_.clear(); }
request& request::operator=(request&& other) noexcept {
  std::swap(r_, other.r_);
  return *this;
}
bool request::test() {
  if (r_.empty()) return true;
  int done = 0;
  check(MPI_Testall(static_cast<int>(r_.size()), r_.data(), &done, MPI_STATUSES_IGNORE),
        "MPI_Testall");
  if (done) r_.clear();
  return done != 0;
}
void request::wait() {
  if (r_.empty()) return;
  check(MPI_Waitall(static_cast<int>(r_.size()), r_.data(), MPI_STATUSES_IGNORE), "MPI_Waitall");
  r_.clear();
}

template <class T>
request start_broadcast(const communicator& c, T* data, index_t count, int root) {
  if (c.size() == 1) return {};
  std::vector<MPI_Request> pieces;
  in_pieces<T>(count, [&](index_t first, index_t n) {
    check(MPI_Ibcast(data + first, to_int(n), mpi_type<T>(), root, c.get(), &pieces.emplace_back()),
          "MPI_Ibcast");
  });
  return request(std::move(pieces));
}

// Point to point, in pieces within the transfer limit. Each pair knows the count it
// exchanges, so no rank needs to learn how many pieces the others send (no extra round of
// agreement) and 64-bit counts never reach MPI.
template <class T>
void all_to_all(const communicator& c, const T* send, const std::vector<index_t>& send_counts,
                T* recv, const std::vector<index_t>& recv_counts) {
  constexpr int tag = 7;
  const auto sd = displacements(send_counts), rd = displacements(recv_counts);
  const int me = c.rank(), ranks = c.size();
  std::copy_n(send + sd[me], send_counts[me], recv + rd[me]);
  std::vector<MPI_Request> pending;
  for (int k = 1; k < ranks; ++k) {
    const int from = (me + ranks - k) % ranks;
    in_pieces<T>(recv_counts[from], [&](index_t first, index_t n) {
      check(MPI_Irecv(recv + rd[from] + first, to_int(n), mpi_type<T>(), from, tag, c.get(),
                      &pending.emplace_back()),
            "MPI_Irecv");
    });
  }
  for (int k = 1; k < ranks; ++k) {
    const int to = (me + k) % ranks;
    in_pieces<T>(send_counts[to], [&](index_t first, index_t n) {
      check(MPI_Isend(send + sd[to] + first, to_int(n), mpi_type<T>(), to, tag, c.get(),
                      &pending.emplace_back()),
            "MPI_Isend");
    });
  }
  check(MPI_Waitall(static_cast<int>(pending.size()), pending.data(), MPI_STATUSES_IGNORE),
        "MPI_Waitall");
}

namespace {

// Calls f(offset, counts, displacements) for rounds in which no rank's block exceeds the
// transfer limit: round k moves elements [offset, offset + piece) of every block. Every
// rank knows every count, so all agree on the number of rounds without a message.
template <class T, class F>
void in_rounds(const std::vector<index_t>& counts, F&& f) {
  const index_t piece = piece_of<T>();
  const index_t most = counts.empty() ? 0 : *std::max_element(counts.begin(), counts.end());
  const index_t rounds = std::max<index_t>(1, (most + piece - 1) / piece);
  const auto d = displacements(counts);
  std::vector<int> n(counts.size()), at(counts.size());
  for (index_t k = 0; k < rounds; ++k) {
    const index_t offset = k * piece;
    for (std::size_t p = 0; p < counts.size(); ++p) {
      n[p] = to_int(std::clamp<index_t>(counts[p] - offset, 0, piece));
      at[p] = to_int(d[p] + std::min(offset, counts[p]));
    }
    f(offset, n, at);
  }
}

}  // namespace

template <class T>
void gather(const communicator& c, const T* send, index_t count, T* recv,
            const std::vector<index_t>& counts, int root) {
  in_rounds<T>(counts, [&](index_t offset, const std::vector<int>& n, const std::vector<int>& at) {
    check(MPI_Gatherv(send + std::min(offset, count), n[c.rank()], mpi_type<T>(), recv, n.data(),
                      at.data(), mpi_type<T>(), root, c.get()),
          "MPI_Gatherv");
  });
}
template <class T>
void scatter(const communicator& c, const T* send, const std::vector<index_t>& counts, T* recv,
             index_t count, int root) {
  in_rounds<T>(counts, [&](index_t offset, const std::vector<int>& n, const std::vector<int>& at) {
    check(MPI_Scatterv(send, n.data(), at.data(), mpi_type<T>(), recv + std::min(offset, count),
                       n[c.rank()], mpi_type<T>(), root, c.get()),
          "MPI_Scatterv");
  });
}

template <class T>
void all_gather(const communicator& c, const T* send, index_t count, T* recv,
                const std::vector<index_t>& counts) {
  in_rounds<T>(counts, [&](index_t offset, const std::vector<int>& n, const std::vector<int>& at) {
    check(MPI_Allgatherv(send + std::min(offset, count), n[c.rank()], mpi_type<T>(), recv, n.data(),
                         at.data(), mpi_type<T>(), c.get()),
          "MPI_Allgatherv");
  });
}

void agree(const communicator& c, std::exception_ptr mine) {
  error_kind code = error_kind::internal;
  std::string message;
  if (mine) {
    try {
      std::rethrow_exception(mine);
    } catch (const error& e) {
      code = e.kind();
      message = e.what();
    } catch (const std::bad_alloc&) {
      code = error_kind::output;
      message = "out of memory on rank " + std::to_string(c.rank());
    } catch (const std::exception& e) {
      message = e.what();
    } catch (...) {
      message = "unknown failure";
    }
  }
  int first = mine ? c.rank() : c.size();
  check(MPI_Allreduce(MPI_IN_PLACE, &first, 1, MPI_INT, MPI_MIN, c.get()), "MPI_Allreduce");
  if (first == c.size()) return;
  int header[2] = {static_cast<int>(code), static_cast<int>(message.size())};
  check(MPI_Bcast(header, 2, MPI_INT, first, c.get()), "MPI_Bcast");
  message.resize(static_cast<std::size_t>(header[1]));
  check(MPI_Bcast(message.data(), header[1], MPI_CHAR, first, c.get()), "MPI_Bcast");
  throw error(static_cast<error_kind>(header[0]), message);
}

#define GRIDLU_COMM_TYPES(X) \
  X(float) X(double) X(std::complex<float>) X(std::complex<double>) X(std::int64_t) X(int)
#define GRIDLU_COMM_INSTANTIATE(T)                                                                 \
  template void broadcast<T>(const communicator&, T*, index_t, int);                               \
  template void all_to_all<T>(const communicator&, const T*, const std::vector<index_t>&, T*,      \
                              const std::vector<index_t>&);                                        \
  template void gather<T>(const communicator&, const T*, index_t, T*, const std::vector<index_t>&, \
                          int);                                                                    \
  template void scatter<T>(const communicator&, const T*, const std::vector<index_t>&, T*,         \
                           index_t, int);                                                          \
  template void all_gather<T>(const communicator&, const T*, index_t, T*,                          \
                              const std::vector<index_t>&);                                        \
  template request start_broadcast<T>(const communicator&, T*, index_t, int);
GRIDLU_COMM_TYPES(GRIDLU_COMM_INSTANTIATE)
#undef GRIDLU_COMM_INSTANTIATE
#undef GRIDLU_COMM_TYPES

#define GRIDLU_PIVOT_INSTANTIATE(T) \
  template candidate best_with_rows<T>(const communicator&, candidate, T*, T*, bool, index_t);
GRIDLU_PIVOT_INSTANTIATE(float)
GRIDLU_PIVOT_INSTANTIATE(double)
GRIDLU_PIVOT_INSTANTIATE(std::complex<float>)
GRIDLU_PIVOT_INSTANTIATE(std::complex<double>)
#undef GRIDLU_PIVOT_INSTANTIATE

template void sum<float>(const communicator&, float*, index_t);
template void sum<double>(const communicator&, double*, index_t);
template void sum<std::int64_t>(const communicator&, std::int64_t*, index_t);
template void sum<std::complex<float>>(const communicator&, std::complex<float>*, index_t);
template void sum<std::complex<double>>(const communicator&, std::complex<double>*, index_t);
template void max<float>(const communicator&, float*, index_t);
template void max<double>(const communicator&, double*, index_t);
template void max<std::int64_t>(const communicator&, std::int64_t*, index_t);
template void min<double>(const communicator&, double*, index_t);
template void min<std::int64_t>(const communicator&, std::int64_t*, index_t);

}  // namespace comm
}  // namespace gridlu
