#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <charconv>
#include <climits>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <numeric>

#include "comm/collectives.hpp"
#include "comm/fault.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "instantiate.hpp"
#include "io/hdf5.hpp"

namespace gridlu::io {
namespace {

using h5::check;
using h5::handle;

// HDF5 prints its own error stack by default; gridlu reports errors itself.
void silence_hdf5() {
  static const bool done = [] {
    H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
    return true;
  }();
  (void)done;
}

std::string quoted(const std::string& s) { return "'" + s + "'"; }

// "float64", "complex128", or a description of a type gridlu cannot solve in.
dataset_shape describe_type(hid_t type) {
  dataset_shape s;
  const std::size_t size = H5Tget_size(type);
  switch (H5Tget_class(type)) {
    case H5T_FLOAT:
      s.usable = size == 4 || size == 8;
      s.type = "float" + std::to_string(8 * size);
      break;
    case H5T_INTEGER:
      s.type = (H5Tget_sign(type) == H5T_SGN_NONE ? "uint" : "int") + std::to_string(8 * size);
      break;
    case H5T_STRING:
      s.type = "string";
      break;
    case H5T_COMPOUND: {
      const int members = H5Tget_nmembers(type);
      std::string names;
      bool floats = true;
      for (int m = 0; m < members; ++m) {
        char* name = H5Tget_member_name(type, static_cast<unsigned>(m));
        names += (m ? ", " : "") + std::string(name ? name : "?");
        H5free_memory(name);
        floats = floats && H5Tget_member_class(type, static_cast<unsigned>(m)) == H5T_FLOAT;
      }
      if (members == 2 && floats && names == "r, i" && (size == 8 || size == 16)) {
        s.usable = s.is_complex = true;
        s.type = "complex" + std::to_string(8 * size);
      } else {
        s.type = "compound {" + names + "}";
      }
      break;
    }
    default:
      s.type = "other";
  }
  return s;
}

dataset_shape describe_dataset(hid_t dset) {
  const handle type(H5Dget_type(dset), H5Tclose);
  const handle space(H5Dget_space(dset), H5Sclose);
  dataset_shape s = describe_type(type.get());
  const int rank = H5Sget_simple_extent_ndims(space.get());
  std::vector<hsize_t> dims(static_cast<std::size_t>(std::max(rank, 0)));
  if (rank > 0) H5Sget_simple_extent_dims(space.get(), dims.data(), nullptr);
  s.dims.assign(dims.begin(), dims.end());
  return s;
}

// A header can claim far more entries than the file holds (a crafted or damaged file):
// refuse before allocating memory for them. Unfiltered, every entry takes its bytes in the
// file; deflate, the filter HDF5 ships, compresses by about 1000:1 at most.
void require_stored(hid_t dset, const dataset_shape& s, const std::string& what) {
  const handle type(check(H5Dget_type(dset), "H5Dget_type"), H5Tclose);
  const handle dcpl(check(H5Dget_create_plist(dset), "H5Dget_create_plist"), H5Pclose);
  double bytes = static_cast<double>(H5Tget_size(type.get()));
  for (const index_t d : s.dims) bytes *= static_cast<double>(d);
  const double most = H5Pget_nfilters(dcpl.get()) > 0 ? 1100.0 : 1.0;
  const double stored = static_cast<double>(H5Dget_storage_size(dset));
  if (bytes > stored * most)
    throw error(error_kind::input, what + " claims " + shape_text(s.dims) + " entries, " +
                                       std::to_string(static_cast<long long>(bytes)) +
                                       " bytes, but the file stores " +
                                       std::to_string(static_cast<long long>(stored)) +
                                       " (truncated or damaged file?)");
}

handle open_dataset(hid_t file, const std::string& name, const std::string& path) {
  if (H5Lexists(file, name.c_str(), H5P_DEFAULT) <= 0)
    throw error(error_kind::input, "no dataset " + quoted(name) + " in " + path);
  const hid_t id = H5Dopen2(file, name.c_str(), H5P_DEFAULT);
  return {check(id, quoted(name) + " in " + path + " is not a dataset"), H5Dclose};
}

// Stripe height and the bound on read/write buffers (io.hpp): pure arithmetic shared
// by the plan and io_buffer_bytes.
index_t stripe_height(index_t block, index_t file_cols, int sharers, std::int64_t element_bytes,
                      std::int64_t limit) {
  const index_t row_bytes = std::max<index_t>(1, file_cols) * element_bytes;
  return std::min(block, std::max<index_t>(1, limit * sharers / row_bytes));
}

// The largest number of elements one H5Dread/H5Dwrite moves: within the transfer limit
// and within HDF5's 2 GiB per call.
index_t call_elements(std::size_t element_bytes) {
  const std::int64_t bytes = std::min<std::int64_t>(comm::transfer_limit(), INT_MAX);
  return std::max<index_t>(1, bytes / static_cast<std::int64_t>(element_bytes));
}

// Calls f(row, col, rows, cols) for pieces of file rows [first, first + count) of `cols`
// columns, each at most `most` elements: several whole rows, or, when a row alone is
// longer, pieces of one row. Each piece is contiguous in a row-major buffer of the rows.
template <class F>
void for_each_call(index_t first, index_t count, index_t cols, index_t most, F&& f) {
  if (cols <= most) {
    const index_t rows = most / std::max<index_t>(cols, 1);
    for (index_t t = 0; t < count; t += rows) f(first + t, 0, std::min(rows, count - t), cols);
    return;
  }
  for (index_t t = 0; t < count; ++t)
    for (index_t c = 0; c < cols; c += most) f(first + t, c, 1, std::min(most, cols - c));
}

// What each rank moves, round by round. Process row i (along: the process grid direction
// that follows the file's rows) takes, one round after another, stripes of `height` file
// rows of the blocks it owns; the Q ranks of process row i share a stripe, each reading
// or writing a contiguous run of its whole rows, and an all-to-all within process row i
// carries each rank its columns. No rank ever holds more than one stripe's share.
struct stripe_plan {
  const process_grid& grid;
  cyclic_map along, across;
  bool transposed;
  index_t height;

  struct rows_range {
    index_t first = 0, count = 0;  // count 0: nothing
  };

  const communicator& comm() const { return transposed ? grid.col() : grid.row(); }
  int sharers() const { return across.procs(); }
  index_t file_cols() const { return across.extent(); }
  int my_along() const { return transposed ? grid.mycol() : grid.myrow(); }
  int my_across() const { return transposed ? grid.myrow() : grid.mycol(); }
  index_t stripes_per_block() const { return (along.block() + height - 1) / height; }
  index_t blocks_of(int i) const {
    return i < along.block_count() ? (along.block_count() - 1 - i) / along.procs() + 1 : 0;
  }
  // The stripe process row i moves in `round`.
  rows_range stripe(index_t round, int i) const {
    const index_t b = i + round / stripes_per_block() * along.procs();
    const index_t offset = round % stripes_per_block() * height;
    if (b >= along.block_count() || offset >= along.block_size(b)) return {};
    return {along.block_start(b) + offset, std::min(height, along.block_size(b) - offset)};
  }
  index_t rounds() const {
    index_t most = 0;
    for (int i = 0; i < along.procs(); ++i)
      if (const index_t blocks = blocks_of(i); blocks > 0) {
        const index_t last = along.block_size(i + (blocks - 1) * along.procs());
        most = std::max(most, (blocks - 1) * stripes_per_block() + (last + height - 1) / height);
      }
    return most;
  }
  // The most rows of a stripe, and of a rank's share of one.
  index_t most_rows() const { return std::min(height, along.extent()); }
  index_t most_share() const { return (most_rows() + sharers() - 1) / sharers(); }
  // The rows of stripe s that rank d of the process row reads or writes.
  rows_range share(rows_range s, int d) const {
    const index_t lo = s.count * d / sharers(), hi = s.count * (d + 1) / sharers();
    return {s.first + lo, hi - lo};
  }
  // Calls f(global, length) for each run of file columns that rank d (across) owns, in
  // order: whole blocks, so pieces move with contiguous copies.
  template <class F>
  void for_each_run(int d, F&& f) const {
    for (index_t b = d; b < across.block_count(); b += across.procs())
      f(across.block_start(b), across.block_size(b));
  }
  // Moves file rows r (inside one block this rank's process row owns) of this rank's
  // columns between the matrix and `piece` (r.count x local-across, row-major like the
  // file): into the matrix, or out of it.
  template <bool into_matrix, class M, class P>
  void move_piece(M& m, rows_range r, P* piece) const {
    if (r.count == 0) return;
    const index_t h = r.count, first = along.local(r.first);
    const index_t width = across.local_extent(my_across());
    const auto move = [](auto* from, auto* to, index_t n) { std::copy_n(from, n, to); };
    if (transposed) {  // file row t is matrix column first + t: contiguous both ways
      for (index_t t = 0; t < h; ++t) {
        if constexpr (into_matrix)
          move(piece + t * width, m.at(0, first + t), width);
        else
          move(m.at(0, first + t), piece + t * width, width);
      }
      return;
    }
    // File row t is matrix row first + t: a transposition, done in tiles of `tile`
    // columns so that reads and writes both stay within a few cache lines and pages.
    constexpr index_t tile = 16;
    for (index_t l0 = 0; l0 < width; l0 += tile) {
      const index_t n = std::min(tile, width - l0);
      decltype(m.at(0, 0)) column[tile];
      for (index_t c = 0; c < n; ++c) column[c] = m.at(first, l0 + c);
      for (index_t t = 0; t < h; ++t) {
        auto* row = piece + t * width + l0;
        for (index_t c = 0; c < n; ++c) {
          if constexpr (into_matrix)
            column[c][t] = row[c];
          else
            row[c] = column[c][t];
        }
      }
    }
  }
};

template <scalar T>
stripe_plan make_plan(const process_grid& grid, const dist_matrix<T>& m, bool transposed) {
  // The stripes move between the file's ranks and the matrix's owners: one grid for both.
  if (&m.grid() != &grid)
    throw error(error_kind::internal,
                "a matrix is read or written through a file opened on "
                "another process grid");
  const auto& rows = m.layout().rows;
  const auto& cols = m.layout().cols;
  const auto& across = transposed ? rows : cols;
  const index_t h = stripe_height(across.block(), across.extent(), across.procs(), sizeof(T),
                                  comm::transfer_limit());
  return transposed ? stripe_plan{grid, cols, rows, true, h}
                    : stripe_plan{grid, rows, cols, false, h};
}

// The file rows [row, row + rows) x columns [col, col + cols) of a 2-D dataset (of a 1-D
// one, elements [row, row + rows)).
handle select_piece(hid_t dset, index_t row, index_t col, index_t rows, index_t cols) {
  handle space(check(H5Dget_space(dset), "H5Dget_space"), H5Sclose);
  const hsize_t start[2] = {static_cast<hsize_t>(row), static_cast<hsize_t>(col)};
  const hsize_t n[2] = {static_cast<hsize_t>(rows), static_cast<hsize_t>(cols)};
  check(H5Sselect_hyperslab(space.get(), H5S_SELECT_SET, start, nullptr, n, nullptr),
        "H5Sselect_hyperslab", error_kind::internal);
  return space;
}

handle memory_space(index_t elements) {
  const hsize_t n = static_cast<hsize_t>(elements);
  return {check(H5Screate_simple(1, &n, nullptr), "H5Screate_simple", error_kind::internal),
          H5Sclose};
}

// Reads the file piece at (row, col), rows x width, as T into `to` (row-major): one
// call. A real dataset read into a complex T lands in the first half of the piece's bytes
// and is widened in place, back to front (real j is read before entry j / 2 overwrites
// it): no second buffer.
template <scalar T>
void read_piece(hid_t dset, bool file_complex, index_t row, index_t col, index_t rows,
                index_t width, T* to, const std::string& what) {
  const bool widen = scalar_traits<T>::is_complex && !file_complex;
  const auto type = widen ? h5::memory_type<real_t<T>>() : h5::memory_type<T>();
  const auto file_space = select_piece(dset, row, col, rows, width);
  const auto mem_space = memory_space(rows * width);
  check(H5Dread(dset, type.get(), mem_space.get(), file_space.get(), H5P_DEFAULT, to),
        "cannot read " + what + " (truncated or damaged file?)");
  if constexpr (scalar_traits<T>::is_complex)
    if (widen) {  // complex entries are arrays of two reals ([complex.numbers])
      auto* parts = reinterpret_cast<real_t<T>*>(to);
      for (index_t j = rows * width - 1; j >= 0; --j) {
        const real_t<T> v = parts[j];
        parts[2 * j + 1] = 0;
        parts[2 * j] = v;
      }
    }
}

// Reads file rows [first, first + count) into `out` (row-major, `cols` wide), in calls
// within the transfer limit.
template <scalar T>
void read_rows(hid_t dset, bool file_complex, index_t first, index_t count, index_t cols, T* out,
               const std::string& what) {
  if (fault::hit("read"))
    throw error(error_kind::input, "cannot read " + what + ": injected fault");
  for_each_call(first, count, cols, call_elements(sizeof(T)),
                [&](index_t row, index_t col, index_t rows, index_t width) {
                  read_piece(dset, file_complex, row, col, rows, width,
                             out + (row - first) * cols + col, what);
                });
}

// Writes `in` (row-major, `cols` wide) to file rows [first, first + count), in calls
// within the transfer limit.
template <scalar T>
void write_rows(hid_t dset, index_t first, index_t count, index_t cols, const T* in,
                const std::string& what) {
  if (fault::hit("write"))
    throw error(error_kind::output, "cannot write " + what + ": injected fault");
  const auto type = h5::memory_type<T>();
  for_each_call(first, count, cols, call_elements(sizeof(T)),
                [&](index_t row, index_t col, index_t rows, index_t width) {
                  const auto file_space = select_piece(dset, row, col, rows, width);
                  const auto mem_space = memory_space(rows * width);
                  check(H5Dwrite(dset, type.get(), mem_space.get(), file_space.get(), H5P_DEFAULT,
                                 in + (row - first) * cols + col),
                        "cannot write " + what + " (disk full?)", error_kind::output);
                });
}

// Ranks started in different directories, or on nodes that mount different file systems,
// can find different files under one name. Read as one, they would send the ranks
// different ways later, into collectives that never match: refused at the open instead.
void require_same_file(const process_grid& grid, const std::string& path) {
  const auto id = identify(path);
  const double mine[2] = {static_cast<double>(id.size), id.mtime};
  double first[2] = {mine[0], mine[1]};
  comm::broadcast(grid.all(), first, 2, 0);
  comm::together(grid.all(), [&] {
    if (mine[0] != first[0] || mine[1] != first[1])
      throw error(error_kind::input, path + " on rank " + std::to_string(grid.rank()) +
                                         " is not the file rank 0 reads (another size or "
                                         "modification time); every rank must see one file");
  });
}

}  // namespace

// Asks the kernel to fetch a rank's next slab of a contiguous dataset from disk while
// the current one is being distributed, so reading from a cold cache overlaps the
// all-to-all and the transposition. Does nothing for chunked or compact datasets.
class read_ahead {
public:
  read_ahead(const std::string& path, hid_t dset, index_t row_bytes)
      : fd_(open(path.c_str(), O_RDONLY)), offset_(H5Dget_offset(dset)), row_bytes_(row_bytes) {}
  ~read_ahead() {
    if (fd_ >= 0) close(fd_);
  }
  read_ahead(const read_ahead&) = delete;
  read_ahead& operator=(const read_ahead&) = delete;
  void rows(index_t first, index_t count) const {
    if (fd_ < 0 || offset_ == HADDR_UNDEF) return;
    posix_fadvise(fd_, static_cast<off_t>(offset_ + first * row_bytes_),
                  static_cast<off_t>(count * row_bytes_), POSIX_FADV_WILLNEED);
  }

private:
  int fd_;
  haddr_t offset_;
  index_t row_bytes_;
};

struct file::handles {
  handle file;
};

file::file(const process_grid& grid, const std::string& path, mode m)
    : grid_(&grid), path_(path), h_(std::make_unique<handles>()) {
  silence_hdf5();
  const std::string damaged = path + " cannot be opened as HDF5 (truncated or damaged?)";
  if (m == mode::read)
    comm::together(grid.all(), [&] {
      struct stat st {};
      if (fault::hit("open-input"))
        throw error(error_kind::input, "cannot open " + path + ": injected fault");
      if (stat(path.c_str(), &st) != 0)
        throw error(error_kind::input, "cannot open " + path + ": " + std::strerror(errno));
      if (H5Fis_hdf5(path.c_str()) <= 0)
        throw error(error_kind::input, path + " is not an HDF5 file");
      // HDF5's collective open reads the file's metadata on rank 0 and broadcasts it; damage
      // found there sends rank 0 out of the open while the others wait for the broadcast.
      // Rank 0 opens the file alone first, and all agree before the collective open.
      if (grid.rank() == 0)
        const handle alone(check(H5Fopen(path.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT), damaged),
                           H5Fclose);
    });
  if (m == mode::read) require_same_file(grid, path);
  comm::together(grid.all(), [&] {
    handle fapl(check(H5Pcreate(H5P_FILE_ACCESS), "H5Pcreate", error_kind::internal), H5Pclose);
    check(H5Pset_fapl_mpio(fapl.get(), grid.all().get(), MPI_INFO_NULL), "H5Pset_fapl_mpio",
          error_kind::internal);
    if (m == mode::create) {
      // The 1.8 file format and later: object headers carry checksums, so a damaged file
      // of gridlu's is told apart instead of being parsed as it is.
      check(H5Pset_libver_bounds(fapl.get(), H5F_LIBVER_V18, H5F_LIBVER_LATEST),
            "H5Pset_libver_bounds", error_kind::internal);
      const hid_t id = H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, fapl.get());
      h_->file = handle(check(id, "cannot create " + path, error_kind::output), H5Fclose);
      return;
    }
    const hid_t id = H5Fopen(path.c_str(), H5F_ACC_RDONLY, fapl.get());
    h_->file = handle(check(id, damaged), H5Fclose);
  });
}

file::file(file&&) noexcept = default;
file& file::operator=(file&&) noexcept = default;

namespace {
// HDF5 1.10 keeps a file whose last writes failed half-closed, and crashes when it tries
// again at MPI_Finalize; the command then ends without it (see left_unclosed).
bool unclosed = false;
}  // namespace

bool left_unclosed() { return unclosed; }

file::~file() {
  if (h_ && h_->file.release() < 0) unclosed = true;
}

void file::close() {
  if (fault::hit("close"))  // as if this rank failed inside the collective close
    throw lone_failure(error_kind::output, "cannot finish writing " + path_ + ": injected fault");
  comm::together(grid_->all(), [&] {
    if (h_->file.release() < 0) {
      unclosed = true;
      throw error(error_kind::output, "cannot finish writing " + path_ + " (disk full?)");
    }
  });
}

bool file::has_dataset(const std::string& name) const {
  bool found = false;
  comm::together(grid_->all(),
                 [&] { found = H5Lexists(h_->file.get(), name.c_str(), H5P_DEFAULT) > 0; });
  return found;
}

dataset_shape file::shape(const std::string& name) const {
  dataset_shape s;
  comm::together(grid_->all(),
                 [&] { s = describe_dataset(open_dataset(h_->file.get(), name, path_).get()); });
  return s;
}

namespace {

// Read side of a round: this rank's rows of the stripe (row-major, all file columns) cut
// into the runs of columns each rank of the process row owns, in rank order.
template <scalar T>
void pack_for_owners(const stripe_plan& plan, const std::vector<T>& rows, index_t count,
                     std::vector<T>& sent, std::vector<index_t>& send_counts) {
  sent.resize(static_cast<std::size_t>(count * plan.file_cols()));
  T* next = sent.data();
  for (int d = 0; d < plan.sharers(); ++d) {
    for (index_t t = 0; t < count; ++t)
      plan.for_each_run(d, [&](index_t g, index_t len) {
        next = std::copy_n(rows.data() + t * plan.file_cols() + g, len, next);
      });
    send_counts[static_cast<std::size_t>(d)] = count * plan.across.local_extent(d);
  }
}

// Write side: the pieces every rank of the process row sent (count rows of its columns
// each, in rank order) put together into whole rows.
template <scalar T>
void assemble_rows(const stripe_plan& plan, const std::vector<T>& received, index_t count,
                   std::vector<T>& rows) {
  rows.resize(static_cast<std::size_t>(count * plan.file_cols()));
  const T* next = received.data();
  for (int d = 0; d < plan.sharers(); ++d)
    for (index_t t = 0; t < count; ++t)
      plan.for_each_run(d, [&](index_t g, index_t len) {
        std::copy_n(next, len, rows.data() + t * plan.file_cols() + g);
        next += len;
      });
}

}  // namespace

template <scalar T>
void file::read(const std::string& name, dist_matrix<T>& m, bool transposed) const {
  const auto dset = open_dataset(h_->file.get(), name, path_);
  const auto s = describe_dataset(dset.get());
  const stripe_plan plan = make_plan(*grid_, m, transposed);
  const index_t file_rows = plan.along.extent(), file_cols = plan.file_cols();
  const bool fits = s.dims.size() == 2
                        ? s.dims[0] == file_rows && s.dims[1] == file_cols
                        : s.dims.size() == 1 && s.dims[0] == file_rows && file_cols == 1;
  const std::string what = quoted(name) + " from " + path_;
  // Callers check the inputs' shapes first, but datasets of other files (saved factors,
  // checkpoints) reach here as the file has them: a misfit is the file's, not gridlu's.
  if (!fits || !s.usable || (s.is_complex && !scalar_traits<T>::is_complex))
    throw error(error_kind::input, quoted(name) + " in " + path_ + " is " + shape_text(s.dims) +
                                       " " + s.type + "; expected " +
                                       shape_text({file_rows, file_cols}) + " " +
                                       std::string(scalar_traits<T>::name) +
                                       (scalar_traits<T>::is_complex ? " (or real)" : ""));
  const int i = plan.my_along(), me = plan.my_across();
  const index_t width = plan.across.local_extent(me);
  const handle type(H5Dget_type(dset.get()), H5Tclose);
  const read_ahead ahead(path_, dset.get(),
                         file_cols * static_cast<index_t>(H5Tget_size(type.get())));
  const auto q = static_cast<std::size_t>(plan.sharers());
  // Sized once for the largest stripe: grown round by round, a vector can take twice
  // what it needs.
  std::vector<T> rows, sent, received;
  rows.reserve(static_cast<std::size_t>(plan.most_share() * file_cols));
  if (q > 1) {
    sent.reserve(rows.capacity());
    received.reserve(static_cast<std::size_t>(plan.most_rows() * width));
  }
  for (index_t round = 0; round < plan.rounds(); ++round) {
    const auto stripe = plan.stripe(round, i);
    const auto mine = plan.share(stripe, me);
    if (const auto next = plan.share(plan.stripe(round + 1, i), me); next.count > 0)
      ahead.rows(next.first, next.count);
    comm::together(grid_->all(), [&] {
      rows.resize(static_cast<std::size_t>(mine.count * file_cols));
      read_rows(dset.get(), s.is_complex, mine.first, mine.count, file_cols, rows.data(), what);
    });
    if (q == 1) {  // the rows are all this rank's: no exchange
      plan.move_piece<true>(m, mine, rows.data());
      continue;
    }
    std::vector<index_t> send_counts(q), recv_counts(q);
    pack_for_owners(plan, rows, mine.count, sent, send_counts);
    for (std::size_t d = 0; d < q; ++d)
      recv_counts[d] = plan.share(stripe, static_cast<int>(d)).count * width;
    received.resize(static_cast<std::size_t>(
        std::accumulate(recv_counts.begin(), recv_counts.end(), index_t{0})));
    comm::all_to_all(plan.comm(), sent.data(), send_counts, received.data(), recv_counts);
    const T* next = received.data();
    for (std::size_t d = 0; d < q; next += recv_counts[d], ++d)
      plan.move_piece<true>(m, plan.share(stripe, static_cast<int>(d)), next);
  }
}

template <scalar T>
std::uint64_t file::checksum(const std::string& name, bool transposed) const {
  const auto dset = open_dataset(h_->file.get(), name, path_);
  const auto s = describe_dataset(dset.get());
  if (s.dims.empty() || s.dims.size() > 2 || !s.usable)
    throw error(error_kind::input, quoted(name) + " in " + path_ + " is not a matrix of numbers");
  const index_t file_rows = s.dims[0], file_cols = s.dims.size() == 2 ? s.dims[1] : 1;
  const std::string what = quoted(name) + " from " + path_;
  std::uint64_t sum = 0;
  comm::together(grid_->all(), [&] {
    std::vector<T> piece;
    index_t call = 0;  // the ranks take the reads in turn, 64 rows at most: all ranks hash
    const index_t most = std::min(call_elements(sizeof(T)), 64 * file_cols);
    for_each_call(0, file_rows, file_cols, most,
                  [&](index_t row, index_t col, index_t rows, index_t width) {
                    if (call++ % grid_->size() != grid_->rank()) return;
                    piece.resize(static_cast<std::size_t>(rows * width));
                    read_piece(dset.get(), s.is_complex, row, col, rows, width, piece.data(), what);
                    for (index_t t = 0; t < rows; ++t)
                      for (index_t c = 0; c < width; ++c) {
                        const T& v = piece[static_cast<std::size_t>(t * width + c)];
                        sum ^= transposed ? detail::entry_hash(col + c, row + t, v)
                                          : detail::entry_hash(row + t, col + c, v);
                      }
                  });
  });
  comm::bit_xor(grid_->all(), &sum, 1);
  return sum;
}

template <scalar T>
void file::write(const std::string& name, const dist_matrix<T>& m, bool one_dimensional) {
  const stripe_plan plan = make_plan(*grid_, m, false);
  const index_t rows_total = m.rows(), cols = m.cols();
  handle dset;
  comm::together(grid_->all(), [&] {
    const hsize_t dims[2] = {static_cast<hsize_t>(rows_total), static_cast<hsize_t>(cols)};
    const handle space(check(H5Screate_simple(one_dimensional ? 1 : 2, dims, nullptr),
                             "H5Screate_simple", error_kind::internal),
                       H5Sclose);
    const handle dcpl(check(H5Pcreate(H5P_DATASET_CREATE), "H5Pcreate", error_kind::internal),
                      H5Pclose);
    H5Pset_fill_time(dcpl.get(), H5D_FILL_TIME_NEVER);  // every element is written
    const auto type = h5::memory_type<T>();
    const hid_t id = H5Dcreate2(h_->file.get(), name.c_str(), type.get(), space.get(), H5P_DEFAULT,
                                dcpl.get(), H5P_DEFAULT);
    dset = handle(
        check(id, "cannot create dataset " + quoted(name) + " in " + path_, error_kind::output),
        H5Dclose);
  });
  const int i = plan.my_along(), me = plan.my_across();
  const index_t width = plan.across.local_extent(me);
  const auto q = static_cast<std::size_t>(plan.sharers());
  const std::string what = quoted(name) + " to " + path_;
  std::vector<T> rows, sent, received;  // sized once, as in read
  rows.reserve(static_cast<std::size_t>(plan.most_share() * cols));
  if (q > 1) {
    received.reserve(rows.capacity());
    sent.reserve(static_cast<std::size_t>(plan.most_rows() * width));
  }
  for (index_t round = 0; round < plan.rounds(); ++round) {
    const auto stripe = plan.stripe(round, i);
    const auto mine = plan.share(stripe, me);
    if (q == 1) {  // the rows are all this rank's: no exchange
      rows.resize(static_cast<std::size_t>(mine.count * cols));
      plan.move_piece<false>(m, mine, rows.data());
      comm::together(grid_->all(), [&] {
        write_rows(dset.get(), mine.first, mine.count, cols, rows.data(), what);
      });
      continue;
    }
    std::vector<index_t> send_counts(q), recv_counts(q);
    sent.resize(static_cast<std::size_t>(stripe.count * width));
    T* next = sent.data();
    for (std::size_t d = 0; d < q; next += send_counts[d], ++d) {
      const auto theirs = plan.share(stripe, static_cast<int>(d));
      plan.move_piece<false>(m, theirs, next);
      send_counts[d] = theirs.count * width;
      recv_counts[d] = mine.count * plan.across.local_extent(static_cast<int>(d));
    }
    received.resize(static_cast<std::size_t>(mine.count * cols));
    comm::all_to_all(plan.comm(), sent.data(), send_counts, received.data(), recv_counts);
    comm::together(grid_->all(), [&] {
      assemble_rows(plan, received, mine.count, rows);
      write_rows(dset.get(), mine.first, mine.count, cols, rows.data(), what);
    });
  }
}

void file::write_indices(const std::string& name, const std::vector<index_t>& values) {
  comm::together(grid_->all(), [&] {
    const hsize_t n = values.size();
    const handle space(check(H5Screate_simple(1, &n, nullptr), "H5Screate_simple"), H5Sclose);
    const handle dset(
        check(H5Dcreate2(h_->file.get(), name.c_str(), H5T_NATIVE_INT64, space.get(), H5P_DEFAULT,
                         H5P_DEFAULT, H5P_DEFAULT),
              "cannot create dataset " + quoted(name) + " in " + path_, error_kind::output),
        H5Dclose);
    if (grid_->rank() != 0) return;
    for_each_call(0, static_cast<index_t>(n), 1, call_elements(sizeof(index_t)),
                  [&](index_t first, index_t, index_t count, index_t) {
                    const auto file_space = select_piece(dset.get(), first, 0, count, 1);
                    const auto mem_space = memory_space(count);
                    check(H5Dwrite(dset.get(), H5T_NATIVE_INT64, mem_space.get(), file_space.get(),
                                   H5P_DEFAULT, values.data() + first),
                          "cannot write " + quoted(name) + " to " + path_, error_kind::output);
                  });
  });
}

std::vector<index_t> file::read_indices(const std::string& name) const {
  std::vector<index_t> values;
  comm::together(grid_->all(), [&] {
    const auto dset = open_dataset(h_->file.get(), name, path_);
    const auto s = describe_dataset(dset.get());
    if (s.dims.size() != 1 || s.type.rfind("int", 0) != 0)
      throw error(error_kind::input,
                  quoted(name) + " in " + path_ + " is not a 1-D integer dataset");
    require_stored(dset.get(), s, quoted(name) + " in " + path_);
    values.resize(static_cast<std::size_t>(s.dims[0]));
    for_each_call(0, s.dims[0], 1, call_elements(sizeof(index_t)),
                  [&](index_t first, index_t, index_t count, index_t) {
                    const auto file_space = select_piece(dset.get(), first, 0, count, 1);
                    const auto mem_space = memory_space(count);
                    check(H5Dread(dset.get(), H5T_NATIVE_INT64, mem_space.get(), file_space.get(),
                                  H5P_DEFAULT, values.data() + first),
                          "cannot read " + quoted(name) + " from " + path_);
                  });
  });
  return values;
}

void file::set_attribute(const std::string& object, const std::string& key,
                         const attribute& value) {
  comm::together(grid_->all(), [&] {
    const handle obj(check(H5Oopen(h_->file.get(), object.c_str(), H5P_DEFAULT),
                           "no object " + quoted(object) + " in " + path_),
                     H5Oclose);
    if (H5Aexists(obj.get(), key.c_str()) > 0) H5Adelete(obj.get(), key.c_str());
    hsize_t n = 1;
    handle type, space(check(H5Screate(H5S_SCALAR), "H5Screate"), H5Sclose);
    const void* data = nullptr;
    const char* text = nullptr;
    if (const auto* i = std::get_if<std::int64_t>(&value)) {
      type = h5::owned_type(H5Tcopy(H5T_NATIVE_INT64), "H5Tcopy");
      data = i;
    } else if (const auto* d = std::get_if<double>(&value)) {
      type = h5::owned_type(H5Tcopy(H5T_NATIVE_DOUBLE), "H5Tcopy");
      data = d;
    } else if (const auto* v = std::get_if<std::vector<double>>(&value)) {
      type = h5::owned_type(H5Tcopy(H5T_NATIVE_DOUBLE), "H5Tcopy");
      n = v->size();
      space = handle(check(H5Screate_simple(1, &n, nullptr), "H5Screate_simple"), H5Sclose);
      data = v->data();
    } else {
      // Fixed-length UTF-8 (h5py reads it as bytes): a variable-length string lives in a
      // global heap without checksums, whose damage can make HDF5 1.10 loop for ever.
      const auto& str = std::get<std::string>(value);
      type = h5::owned_type(H5Tcopy(H5T_C_S1), "H5Tcopy");
      H5Tset_size(type.get(), std::max<std::size_t>(str.size(), 1));
      H5Tset_strpad(type.get(), H5T_STR_NULLPAD);
      H5Tset_cset(type.get(), H5T_CSET_UTF8);
      text = str.c_str();
      data = text;
    }
    const handle attr(
        check(H5Acreate2(obj.get(), key.c_str(), type.get(), space.get(), H5P_DEFAULT, H5P_DEFAULT),
              "cannot write attribute " + key + " in " + path_, error_kind::output),
        H5Aclose);
    check(H5Awrite(attr.get(), type.get(), data), "cannot write attribute " + key,
          error_kind::output);
  });
}

namespace {

std::optional<attribute> read_attribute(hid_t obj, const std::string& key) {
  if (H5Aexists(obj, key.c_str()) <= 0) return std::nullopt;
  const handle attr(check(H5Aopen(obj, key.c_str(), H5P_DEFAULT), "H5Aopen"), H5Aclose);
  const handle type(check(H5Aget_type(attr.get()), "H5Aget_type"), H5Tclose);
  const handle space(check(H5Aget_space(attr.get()), "H5Aget_space"), H5Sclose);
  const auto points = H5Sget_simple_extent_npoints(space.get());
  const bool scalar = H5Sget_simple_extent_ndims(space.get()) == 0;
  switch (H5Tget_class(type.get())) {
    case H5T_INTEGER:
      if (points == 1) {
        std::int64_t v = 0;
        check(H5Aread(attr.get(), H5T_NATIVE_INT64, &v), "H5Aread");
        return v;
      }
      break;
    case H5T_FLOAT: {
      if (points < 1) break;  // an empty attribute (null dataspace) holds no number
      std::vector<double> v(static_cast<std::size_t>(points));
      check(H5Aread(attr.get(), H5T_NATIVE_DOUBLE, v.data()), "H5Aread");
      if (scalar) return v.at(0);
      return v;
    }
    case H5T_STRING:
      if (points == 1) {
        if (H5Tis_variable_str(type.get()) > 0) {
          char* text = nullptr;
          const auto mem = h5::owned_type(H5Tcopy(type.get()), "H5Tcopy");
          check(H5Aread(attr.get(), mem.get(), &text), "H5Aread");
          std::string s = text ? text : "";
          H5free_memory(text);
          return s;
        }
        std::string s(H5Tget_size(type.get()), '\0');
        check(H5Aread(attr.get(), type.get(), s.data()), "H5Aread");
        return s.substr(0, s.find('\0'));
      }
      break;
    default:
      break;
  }
  return std::string("(") + describe_type(type.get()).type + ")";
}

std::string printable(const attribute& a) {
  if (const auto* i = std::get_if<std::int64_t>(&a)) return std::to_string(*i);
  if (const auto* s = std::get_if<std::string>(&a)) return *s;
  const auto number = [](double d) {
    char text[32];
    std::snprintf(text, sizeof text, "%.6g", d);
    return std::string(text);
  };
  if (const auto* d = std::get_if<double>(&a)) return number(*d);
  const auto& v = std::get<std::vector<double>>(a);
  std::string out = "[";
  for (std::size_t k = 0; k < v.size() && k < 8; ++k) out += (k ? ", " : "") + number(v[k]);
  return out + (v.size() > 8 ? ", ...]" : "]");
}

std::vector<std::pair<std::string, std::string>> all_attributes(hid_t obj) {
  std::vector<std::string> keys;
  H5Aiterate2(
      obj, H5_INDEX_NAME, H5_ITER_INC, nullptr,
      [](hid_t, const char* name, const H5A_info_t*, void* out) -> herr_t {
        static_cast<std::vector<std::string>*>(out)->push_back(name);
        return 0;
      },
      &keys);
  std::vector<std::pair<std::string, std::string>> out;
  for (const auto& k : keys)
    if (auto a = read_attribute(obj, k)) out.emplace_back(k, printable(*a));
  return out;
}

}  // namespace

std::optional<attribute> file::get_attribute(const std::string& object,
                                             const std::string& key) const {
  std::optional<attribute> value;
  comm::together(grid_->all(), [&] {
    if (H5Lexists(h_->file.get(), object.c_str(), H5P_DEFAULT) <= 0 && object != "/") return;
    const handle obj(check(H5Oopen(h_->file.get(), object.c_str(), H5P_DEFAULT), "H5Oopen"),
                     H5Oclose);
    value = read_attribute(obj.get(), key);
  });
  return value;
}

file_identity identify(const std::string& path) {
  file_identity id;
  std::error_code ec;
  id.path = std::filesystem::weakly_canonical(std::filesystem::absolute(path), ec).string();
  if (ec) id.path = std::filesystem::absolute(path).lexically_normal().string();
  struct stat st {};
  if (stat(path.c_str(), &st) != 0) return id;
  id.exists = true;
  id.device = st.st_dev;
  id.inode = st.st_ino;
  id.size = static_cast<std::int64_t>(st.st_size);
  id.mtime =
      static_cast<double>(st.st_mtim.tv_sec) + 1e-9 * static_cast<double>(st.st_mtim.tv_nsec);
  return id;
}

bool same_file(const file_identity& a, const file_identity& b) {
  if (a.exists && b.exists) return a.device == b.device && a.inode == b.inode;
  return a.path == b.path;
}

std::string checksum_text(std::uint64_t sum) {
  char text[19];
  std::snprintf(text, sizeof text, "0x%016llx", static_cast<unsigned long long>(sum));
  return text;
}

std::optional<std::uint64_t> parse_checksum(const std::string& text) {
  if (text.size() != 18 || text.rfind("0x", 0) != 0) return std::nullopt;
  std::uint64_t v = 0;
  const auto [end, ec] = std::from_chars(text.data() + 2, text.data() + text.size(), v, 16);
  if (ec != std::errc{} || end != text.data() + text.size()) return std::nullopt;
  return v;
}

std::string shape_text(const std::vector<index_t>& dims) {
  if (dims.empty()) return "scalar";
  std::string t;
  for (std::size_t k = 0; k < dims.size(); ++k) t += (k ? " x " : "") + std::to_string(dims[k]);
  return t;
}

std::string library_version() {
  unsigned major = 0, minor = 0, release = 0;
  H5get_libversion(&major, &minor, &release);
  return "HDF5 " + std::to_string(major) + "." + std::to_string(minor) + "." +
         std::to_string(release);
}

description describe(const std::string& path) {
  silence_hdf5();
  struct stat st {};
  if (stat(path.c_str(), &st) != 0)
    throw error(error_kind::input, "cannot open " + path + ": " + std::strerror(errno));
  if (H5Fis_hdf5(path.c_str()) <= 0) throw error(error_kind::input, path + " is not an HDF5 file");
  const handle f(check(H5Fopen(path.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT),
                       path + " cannot be opened as HDF5 (truncated or damaged?)"),
                 H5Fclose);
  description d;
  {
    const handle root(check(H5Oopen(f.get(), "/", H5P_DEFAULT), "H5Oopen"), H5Oclose);
    d.attributes = all_attributes(root.get());
  }
  using objects = std::vector<std::pair<std::string, H5O_type_t>>;
  objects found;
  H5Ovisit(
      f.get(), H5_INDEX_NAME, H5_ITER_INC,
      [](hid_t, const char* name, const H5O_info_t* info, void* out) -> herr_t {
        if (std::strcmp(name, ".") != 0)
          static_cast<objects*>(out)->emplace_back(std::string("/") + name, info->type);
        return 0;
      },
      &found);
  for (const auto& [name, type] : found) {
    const handle obj(check(H5Oopen(f.get(), name.c_str(), H5P_DEFAULT), "H5Oopen"), H5Oclose);
    if (type == H5O_TYPE_DATASET)
      d.datasets.push_back({name, describe_dataset(obj.get()), all_attributes(obj.get())});
    else if (type == H5O_TYPE_GROUP)
      d.groups.push_back({name, {}, all_attributes(obj.get())});
  }
  return d;
}

std::int64_t io_buffer_bytes(index_t rows, index_t cols, index_t block, grid_shape shape,
                             std::int64_t element_bytes, std::int64_t limit) {
  // along: the matrix dimension of the file's rows; the file has `file_cols` columns
  // shared by `sharers` ranks (a process row, or a process column when transposed).
  const auto direction = [&](index_t along, index_t file_cols, int sharers) {
    const index_t h =
        std::min(along, stripe_height(block, file_cols, sharers, element_bytes, limit));
    const index_t whole = (h + sharers - 1) / sharers * file_cols;
    const index_t piece = h * cyclic_map(file_cols, block, sharers).local_extent(0);
    if (sharers == 1) return element_bytes * whole;  // no exchange
    return element_bytes * (2 * whole + piece);
  };
  return std::max(direction(rows, cols, shape.q), direction(cols, rows, shape.p));
}

#define INSTANTIATE(T)                                                           \
  template void file::read<T>(const std::string&, dist_matrix<T>&, bool) const;  \
  template void file::write<T>(const std::string&, const dist_matrix<T>&, bool); \
  template std::uint64_t file::checksum<T>(const std::string&, bool) const;
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu::io
