// HDF5 files: datasets in and out of distributed matrices, attributes, descriptions.
// No HDF5 type appears here; the handles live in src/io/.
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <variant>
#include <vector>

#include "gridlu/matrix.hpp"

namespace gridlu::io {

// What a dataset holds. `type` is one of the four element-type names gridlu solves in
// (scalar_traits<T>::name) or a description of anything else ("int32", "string",
// "compound {re, im}", ...); `usable` says which.
struct dataset_shape {
  std::vector<index_t> dims;
  std::string type;
  bool usable = false;
  bool is_complex = false;
};

using attribute = std::variant<std::int64_t, double, std::string, std::vector<double>>;

// An HDF5 file opened by every rank of a communicator (MPI-IO). Reads and writes of
// matrices are collective and in two phases: round by round, each process row takes a
// stripe of whole file rows from a block it owns, its ranks each read or write a
// contiguous share of the stripe's rows, and an all-to-all within the process row carries
// every rank its columns (process columns when transposed). No HDF5 call moves more than
// comm::transfer_limit() bytes; memory beyond the matrix is io_buffer_bytes. Errors are
// agreed across ranks.
class file {
public:
  enum class mode { read, create };
  // read: the file must exist and be HDF5 (input error otherwise). create: truncates.
  file(const process_grid& grid, const std::string& path, mode m);
  ~file();
  file(file&&) noexcept;
  file& operator=(file&&) noexcept;

  const std::string& path() const { return path_; }
  bool has_dataset(const std::string& name) const;
  // Throws an input error naming the dataset when it is missing.
  dataset_shape shape(const std::string& name) const;

  // Reads a 2-D dataset (a 1-D one as n x 1) into m, whose sizes must match, converting
  // to T. With `transposed`, element [i][j] of the dataset is m(j, i).
  template <scalar T>
  void read(const std::string& name, dist_matrix<T>& m, bool transposed = false) const;
  // content_checksum of the matrix that read(name, m, transposed) would fill, computed
  // slab by slab from the file without holding it.
  template <scalar T>
  std::uint64_t checksum(const std::string& name, bool transposed = false) const;

  // Writes m as a row-major dataset; as 1-D when `one_dimensional` (m must be n x 1).
  template <scalar T>
  void write(const std::string& name, const dist_matrix<T>& m, bool one_dimensional = false);

  // Small 1-D integer datasets, the same on every rank (pivots).
  void write_indices(const std::string& name, const std::vector<index_t>& values);
  std::vector<index_t> read_indices(const std::string& name) const;

  // Attributes of the file ("/") or of a dataset; the same value on every rank.
  void set_attribute(const std::string& object, const std::string& key, const attribute& value);
  std::optional<attribute> get_attribute(const std::string& object, const std::string& key) const;
  // The attribute if it exists and holds a V.
  template <class V>
  std::optional<V> get_attribute_as(const std::string& object, const std::string& key) const {
    const auto a = get_attribute(object, key);
    if (const V* v = a ? std::get_if<V>(&*a) : nullptr) return *v;
    return std::nullopt;
  }

  // Closes the file, flushing everything; errors surface here rather than silently in
  // the destructor.
  void close();

private:
  struct handles;
  const process_grid* grid_;
  std::string path_;
  std::unique_ptr<handles> h_;
};

// The peak bytes of the buffers file::read and file::write hold per rank beyond the
// matrix, for a rows x cols matrix of element_bytes entries in blocks of `block` on
// `shape`, with transfer limit `limit`: the largest over reading, writing and reading
// transposed. For file rows along one matrix dimension (extent A) and file columns along
// the other (extent C, shared by the Q ranks of a process row: Q = shape.q, or shape.p
// when transposed):
//   h      = min(block, A, max(1, floor(limit * Q / (C * element_bytes))))   stripe rows
//   whole  = ceil(h / Q) * C        a rank's rows of the stripe, as in the file (x2:
//                                   the rows and their pieces sorted by owner)
//   piece  = h * ceil_cols          a rank's columns of the stripe, ceil_cols the most
//                                   columns one rank owns (block-cyclic over Q)
//   bytes  = element_bytes * (2 * whole + piece), or element_bytes * whole when Q = 1
//            (the rows move straight to the matrix)
// and the result is the larger of (A, C, Q) = (rows, cols, shape.q) and
// (cols, rows, shape.p). Pure arithmetic: no MPI, no file.
std::int64_t io_buffer_bytes(index_t rows, index_t cols, index_t block, grid_shape shape,
                             std::int64_t element_bytes, std::int64_t limit);

// Where a file is and which version of it: enough to notice that it changed, and to
// tell whether two names reach the same file.
struct file_identity {
  std::string path;  // absolute, symbolic links resolved as far as they exist
  bool exists = false;
  std::uint64_t device = 0, inode = 0;
  std::int64_t size = 0;
  double mtime = 0;  // seconds since the epoch
};
file_identity identify(const std::string& path);
// True when both names reach one file: by device and inode where both exist, by their
// resolved paths otherwise.
bool same_file(const file_identity& a, const file_identity& b);

// Checksums are stored as text attributes ("0x" and 16 hex digits): 64-bit unsigned
// integers do not survive every HDF5 reader.
std::string checksum_text(std::uint64_t sum);
std::optional<std::uint64_t> parse_checksum(const std::string& text);

// "3000 x 4", "3000", or "scalar": a dataset's dimensions as people write them.
std::string shape_text(const std::vector<index_t>& dims);

// "HDF5 1.10.8"
std::string library_version();

// True when a file could not be closed because its writes failed (a full disk): HDF5
// cannot then shut down cleanly, and a program should end without MPI_Finalize.
bool left_unclosed();

// Everything in any HDF5 file, read on the calling rank alone (for `gridlu info`).
struct description {
  struct item {
    std::string path;
    dataset_shape shape;
    std::vector<std::pair<std::string, std::string>> attributes;  // key, printable value
  };
  std::vector<std::pair<std::string, std::string>> attributes;  // of the root group
  std::vector<item> groups;  // every other group (their shapes are empty)
  std::vector<item> datasets;
};
description describe(const std::string& path);

}  // namespace gridlu::io
