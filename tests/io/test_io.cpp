// HDF5 matrix files through io::file: what is written is read back bit for bit on any
// grid and block size, transposed, as a 1-D dataset and widened from real to complex.
// The references are the filled values themselves (random_entry is a pure function of
// (i, j)), the gathered matrix, and checksums computed by rank 0 alone on a 1 x 1 grid.
#include <gtest/gtest.h>
#include <unistd.h>

#include <bit>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <string>
#include <vector>

#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;
namespace fs = std::filesystem;

template <class T>
class Io : public ::testing::Test {};
TYPED_TEST_SUITE(Io, scalar_types);

template <class T>
class IoComplex : public ::testing::Test {};
using complex_types = ::testing::Types<std::complex<float>, std::complex<double>>;
TYPED_TEST_SUITE(IoComplex, complex_types);

// Writes m as dataset `name` of a new file at path, closed.
template <scalar T>
void write_file(const process_grid& grid, const std::string& path, const std::string& name,
                const dist_matrix<T>& m, bool one_dimensional = false) {
  io::file f(grid, path, io::file::mode::create);
  f.write(name, m, one_dimensional);
  f.close();
}

// The real m x n dataset "r" at `path`, entries random_entry<R>(seed, i, j).
template <class R>
void write_real_file(const process_grid& grid, const std::string& path, index_t m, index_t n,
                     index_t nb, std::uint64_t seed) {
  dist_matrix<R> r(grid, m, n, nb);
  r.fill([&](index_t i, index_t j) { return random_entry<R>(seed, i, j); });
  write_file(grid, path, "r", r);
}

std::string label(grid_shape s, index_t m, index_t n, index_t nb) {
  return "grid " + std::to_string(s.p) + "x" + std::to_string(s.q) + " " + std::to_string(m) + "x" +
         std::to_string(n) + " nb=" + std::to_string(nb);
}

// Every local entry of m against f of its global indices, bit for bit (the values are
// finite, so == is exact equality). Counts mismatches rather than reporting each one.
template <class T, class F>
index_t local_mismatches(const dist_matrix<T>& m, F&& f) {
  index_t bad = 0;
  for (index_t lj = 0; lj < m.local_cols(); ++lj)
    for (index_t li = 0; li < m.local_rows(); ++li) {
      const index_t i = m.layout().rows.global(m.grid().myrow(), li);
      const index_t j = m.layout().cols.global(m.grid().mycol(), lj);
      if (!(*m.at(li, lj) == f(i, j))) ++bad;
    }
  return bad;
}

// The gathered column-major matrix on the root against f, bit for bit.
template <class T, class F>
index_t gathered_mismatches(const std::vector<T>& whole, index_t m, index_t n, F&& f) {
  index_t bad = 0;
  for (index_t j = 0; j < n; ++j)
    for (index_t i = 0; i < m; ++i)
      if (!(whole[static_cast<std::size_t>(i + j * m)] == f(i, j))) ++bad;
  return bad;
}

// Both views of m against f: every rank's local entries, and the gathered matrix on the
// root (which also checks the gather).
template <class T, class F>
void expect_entries(const dist_matrix<T>& m, F&& f) {
  EXPECT_EQ(local_mismatches(m, f), 0);
  const auto whole = m.gather();
  if (is_root()) {
    EXPECT_EQ(gathered_mismatches(whole, m.rows(), m.cols(), f), 0);
  }
}

// The checksum rank 0 computes alone, on a 1 x 1 grid of MPI_COMM_SELF, of the matrix
// f fills (block size 1: no other rank, no other block size shares any of its work);
// every rank gets it.
template <class T, class F>
std::uint64_t single_rank_checksum(const process_grid& world, index_t m, index_t n, F&& f) {
  std::uint64_t sum = 0;
  if (world.rank() == 0) {
    const process_grid alone(MPI_COMM_SELF, {1, 1});
    dist_matrix<T> a(alone, m, n, 1);
    a.fill(f);
    sum = content_checksum(a);
  }
  // The collectives carry signed 64-bit integers; the bits are what matters.
  auto bits = std::bit_cast<std::int64_t>(sum);
  comm::broadcast(world.all(), &bits, 1, 0);
  return std::bit_cast<std::uint64_t>(bits);
}

// The checksum's own definition (generate.hpp): the XOR of the entries' position-keyed
// hashes, computed here straight from the values.
template <class T, class F>
std::uint64_t checksum_by_definition(index_t m, index_t n, F&& f) {
  std::uint64_t sum = 0;
  for (index_t i = 0; i < m; ++i)
    for (index_t j = 0; j < n; ++j) sum ^= detail::entry_hash(i, j, T(f(i, j)));
  return sum;
}

struct sizes {
  index_t m, n, nb;
};
// Not multiples of the block size, square and not, with some grids wider or taller
// than the number of blocks in one direction.
constexpr sizes size_cases[] = {{37, 37, 8}, {61, 61, 5}, {37, 61, 8}, {61, 13, 5}, {3, 11, 4}};

TYPED_TEST(Io, WriteThenReadIsExactOnEveryGridAndBlockSize) {
  using T = TypeParam;
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const auto [m, n, nb] : size_cases) {
      SCOPED_TRACE(label(shape, m, n, nb));
      const auto entry = [&](index_t i, index_t j) { return random_entry<T>(m + 3 * n, i, j); };
      const std::string path = dir.file("round-trip.h5");
      {
        dist_matrix<T> a(grid, m, n, nb);
        a.fill(entry);
        write_file(grid, path, "a", a);
      }
      const io::file f(grid, path, io::file::mode::read);
      EXPECT_TRUE(f.has_dataset("a"));
      EXPECT_FALSE(f.has_dataset("b"));
      const auto s = f.shape("a");
      EXPECT_EQ(s.dims, (std::vector<index_t>{m, n}));
      EXPECT_EQ(s.type, scalar_traits<T>::name);
      EXPECT_TRUE(s.usable);
      EXPECT_EQ(s.is_complex, scalar_traits<T>::is_complex);
      dist_matrix<T> b(grid, m, n, nb);
      b.fill([](index_t, index_t) { return T(7); });  // nothing of it may survive the read
      f.read("a", b);
      expect_entries(b, entry);
    }
  }
}

// Written on one grid and block size, read on another grid shape (where this run has
// two), on another block size, and by rank 0 alone on a 1 x 1 grid.
TYPED_TEST(Io, ReadOnAnotherGridAndBlockSizeThanWritten) {
  using T = TypeParam;
  const scratch_dir dir;
  const auto shapes = shapes_for_world();
  for (std::size_t s = 0; s < shapes.size(); ++s) {
    const process_grid writer(MPI_COMM_WORLD, shapes[s]);
    const process_grid reader(MPI_COMM_WORLD, shapes[(s + 1) % shapes.size()]);
    for (const auto [m, n, nb] : size_cases) {
      const index_t nb_read = nb == 5 ? 8 : 5;
      SCOPED_TRACE(label(shapes[s], m, n, nb) + " read with nb=" + std::to_string(nb_read));
      const auto entry = [&](index_t i, index_t j) { return random_entry<T>(2 * m + n, i, j); };
      const std::string path = dir.file("moved.h5");
      {
        dist_matrix<T> a(writer, m, n, nb);
        a.fill(entry);
        write_file(writer, path, "a", a);
      }
      {
        const io::file f(reader, path, io::file::mode::read);
        dist_matrix<T> b(reader, m, n, nb_read);
        f.read("a", b);
        EXPECT_EQ(local_mismatches(b, entry), 0);
      }
      index_t alone_bad = 0;
      if (writer.rank() == 0) {
        const process_grid alone(MPI_COMM_SELF, {1, 1});
        const io::file f(alone, path, io::file::mode::read);
        dist_matrix<T> c(alone, m, n, 3);
        f.read("a", c);
        alone_bad = local_mismatches(c, entry);
      }
      EXPECT_EQ(alone_bad, 0);
      comm::barrier(writer.all());  // the next case truncates the file
    }
  }
}

// With `transposed`, dataset element [i][j] lands in m(j, i): a file holding the
// transpose of the matrix reads as the matrix itself.
TYPED_TEST(Io, TransposedReadOfTheTransposeGivesTheMatrix) {
  using T = TypeParam;
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const auto [m, n, nb] : size_cases) {
      SCOPED_TRACE(label(shape, m, n, nb));
      // The matrix wanted is m x n with entry(i, j); the file holds its n x m transpose.
      const auto entry = [&](index_t i, index_t j) { return random_entry<T>(5 + m, i, j); };
      const auto transpose = [&](index_t i, index_t j) { return entry(j, i); };
      const std::string path = dir.file("transposed.h5");
      {
        dist_matrix<T> t(grid, n, m, nb);
        t.fill(transpose);
        write_file(grid, path, "t", t);
      }
      const io::file f(grid, path, io::file::mode::read);
      EXPECT_EQ(f.shape("t").dims, (std::vector<index_t>{n, m}));
      dist_matrix<T> a(grid, m, n, nb == 5 ? 8 : 5);
      f.read("t", a, true);
      expect_entries(a, entry);
      // The checksum of the transposed reading is the matrix's, not the file's layout's.
      const std::uint64_t of_matrix = checksum_by_definition<T>(m, n, entry);
      EXPECT_EQ(f.checksum<T>("t", true), of_matrix);
      EXPECT_EQ(content_checksum(a), of_matrix);
      EXPECT_EQ(f.checksum<T>("t", false), checksum_by_definition<T>(n, m, transpose));
      EXPECT_NE(f.checksum<T>("t", false), of_matrix);
    }
  }
}

// An n x 1 matrix written as a 1-D dataset is stored with one dimension and reads back
// as n x 1, on another block size too.
TYPED_TEST(Io, OneDimensionalDatasetsReadAsColumns) {
  using T = TypeParam;
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const auto& [n, nb] : {std::pair<index_t, index_t>{37, 8}, {61, 5}, {1, 4}}) {
      SCOPED_TRACE(label(shape, n, 1, nb));
      const auto entry = [&](index_t i, index_t j) { return random_entry<T>(99 + n, i, j); };
      const std::string path = dir.file("vector.h5");
      {
        dist_matrix<T> v(grid, n, 1, nb);
        v.fill(entry);
        write_file(grid, path, "v", v, true);
      }
      const io::file f(grid, path, io::file::mode::read);
      EXPECT_EQ(f.shape("v").dims, (std::vector<index_t>{n}));
      dist_matrix<T> w(grid, n, 1, nb == 5 ? 8 : 5);
      f.read("v", w);
      EXPECT_EQ(local_mismatches(w, entry), 0);
      EXPECT_EQ(f.checksum<T>("v"), checksum_by_definition<T>(n, 1, entry));
      EXPECT_EQ(content_checksum(w), f.checksum<T>("v"));
    }
  }
}

// A real dataset read into a complex matrix keeps its values as the real parts, with
// imaginary parts exactly zero; its checksum read as complex is the promoted matrix's.
TYPED_TEST(IoComplex, RealDatasetReadIntoComplexHasZeroImaginaryParts) {
  using T = TypeParam;
  using R = real_t<T>;
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const auto [m, n, nb] : size_cases) {
      SCOPED_TRACE(label(shape, m, n, nb));
      const auto real_entry = [&](index_t i, index_t j) { return random_entry<R>(17 + n, i, j); };
      const auto promoted = [&](index_t i, index_t j) { return T(real_entry(i, j), R(0)); };
      const std::string path = dir.file("real.h5");
      write_real_file<R>(grid, path, m, n, nb, 17 + n);
      const io::file f(grid, path, io::file::mode::read);
      EXPECT_FALSE(f.shape("r").is_complex);
      dist_matrix<T> c(grid, m, n, nb);
      c.fill([](index_t, index_t) { return T(3, 4); });
      f.read("r", c);
      EXPECT_EQ(local_mismatches(c, promoted), 0);
      EXPECT_EQ(f.checksum<T>("r"), checksum_by_definition<T>(m, n, promoted));
      EXPECT_EQ(f.checksum<T>("r"), content_checksum(c));
      EXPECT_EQ(f.checksum<R>("r"), checksum_by_definition<R>(m, n, real_entry));
    }
  }
}

// A complex dataset has no real reading: every rank refuses it alike.
TYPED_TEST(IoComplex, ComplexDatasetIsNotReadIntoARealMatrix) {
  using T = TypeParam;
  using R = real_t<T>;
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  const std::string path = dir.file("complex.h5");
  {
    dist_matrix<T> c(grid, 9, 9, 4);
    c.fill([](index_t i, index_t j) { return random_entry<T>(1, i, j); });
    write_file(grid, path, "c", c);
  }
  const io::file f(grid, path, io::file::mode::read);
  dist_matrix<R> r(grid, 9, 9, 4);
  EXPECT_THROW(f.read("c", r), gridlu::error);
}

// content_checksum depends on the values and their global positions only: the same on
// every grid and block size as rank 0's alone on 1 x 1, the same as the file's own
// checksum of what it holds, and different after one entry changes.
TYPED_TEST(Io, ChecksumsAgreeAcrossGridsBlockSizesAndTheFile) {
  using T = TypeParam;
  const scratch_dir dir;
  for (const auto [m, n, nb] : size_cases) {
    const auto entry = [&](index_t i, index_t j) { return random_entry<T>(41 * m + n, i, j); };
    const std::uint64_t reference = single_rank_checksum<T>(dir.world(), m, n, entry);
    EXPECT_EQ(reference, checksum_by_definition<T>(m, n, entry));
    for (const auto shape : shapes_for_world()) {
      const process_grid grid(MPI_COMM_WORLD, shape);
      for (const index_t block : {index_t{1}, nb, index_t{64}}) {
        SCOPED_TRACE(label(shape, m, n, block));
        dist_matrix<T> a(grid, m, n, block);
        a.fill(entry);
        EXPECT_EQ(content_checksum(a), reference);
        const std::string path = dir.file("sum.h5");
        { write_file(grid, path, "a", a); }
        {
          const io::file f(grid, path, io::file::mode::read);
          EXPECT_EQ(f.checksum<T>("a"), reference);
          dist_matrix<T> b(grid, m, n, block);
          f.read("a", b);
          EXPECT_EQ(content_checksum(b), f.checksum<T>("a"));
        }
        // One entry, held by one rank, changes sign: the sum must notice on every rank.
        if (T* p = a.find(m - 1, n / 2)) *p = -*p;
        EXPECT_NE(content_checksum(a), reference);
        // The same value moved to another position changes it too.
        a.fill(entry);
        if (T* p = a.find(0, 0)) *p = entry(m - 1, n - 1);
        if (T* p = a.find(m - 1, n - 1)) *p = entry(0, 0);
        if (m * n > 1) {
          EXPECT_NE(content_checksum(a), reference);
        }
      }
    }
  }
}

TEST(IoIndices, RoundTripOnEveryRank) {
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    const std::vector<index_t> values = {0, 5, 2, -1, index_t{1} << 40, 36, 36};
    const std::vector<index_t> none;
    const std::string path = dir.file("indices.h5");
    {
      io::file f(grid, path, io::file::mode::create);
      f.write_indices("pivots", values);
      f.write_indices("none", none);
      f.close();
    }
    const io::file f(grid, path, io::file::mode::read);
    EXPECT_EQ(f.read_indices("pivots"), values);
    EXPECT_EQ(f.read_indices("none"), none);
    EXPECT_EQ(f.shape("pivots").dims, (std::vector<index_t>{7}));
    EXPECT_EQ(f.shape("pivots").type, "int64");
    EXPECT_FALSE(f.shape("pivots").usable);
  }
}

// Transfer limits that split every HDF5 call: 24 bytes holds less than one row of any
// case here (each row goes in column pieces, one stripe row per round); 1000 bytes holds
// a few whole rows (stripes of fewer rows than a block, several rows per call).
constexpr std::int64_t split_limits[] = {24, 1000};

// Sets the transfer limit for a scope and restores the one before.
class limit_scope {
public:
  explicit limit_scope(std::int64_t bytes) : saved_(comm::transfer_limit()) {
    comm::set_transfer_limit(bytes);
  }
  ~limit_scope() { comm::set_transfer_limit(saved_); }
  limit_scope(const limit_scope&) = delete;
  limit_scope& operator=(const limit_scope&) = delete;

private:
  std::int64_t saved_;
};

// Sizes not multiples of their blocks, the blocks several stripes high at limit 1000.
constexpr sizes split_cases[] = {{61, 37, 8}, {37, 61, 13}, {5, 70, 16}};

// Under limits that split every call, writing, reading, reading transposed and the
// file's checksums give the filled values themselves (random_entry, a pure function of
// the position) and the checksum by definition, as without a limit; a file written
// split reads the same unsplit and the other way round.
TYPED_TEST(Io, SplitTransfersGiveTheSameMatrixAndChecksums) {
  using T = TypeParam;
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const auto [m, n, nb] : split_cases)
      for (const std::int64_t limit : split_limits) {
        SCOPED_TRACE(label(shape, m, n, nb) + " limit " + std::to_string(limit));
        const auto entry = [&](index_t i, index_t j) { return random_entry<T>(7 * m + n, i, j); };
        const auto transpose = [&](index_t i, index_t j) { return entry(j, i); };
        const std::string split = dir.file("split.h5"), whole = dir.file("whole.h5");
        dist_matrix<T> a(grid, m, n, nb);
        a.fill(entry);
        write_file(grid, whole, "a", a);
        {
          const limit_scope low(limit);
          write_file(grid, split, "a", a);
        }
        for (const auto& path : {split, whole}) {
          const io::file f(grid, path, io::file::mode::read);
          const limit_scope low(limit);
          dist_matrix<T> b(grid, m, n, nb == 8 ? 5 : 8);
          f.read("a", b);
          EXPECT_EQ(local_mismatches(b, entry), 0);
          dist_matrix<T> t(grid, n, m, nb);
          f.read("a", t, true);
          EXPECT_EQ(local_mismatches(t, transpose), 0);
          EXPECT_EQ(f.checksum<T>("a"), checksum_by_definition<T>(m, n, entry));
          EXPECT_EQ(f.checksum<T>("a", true), checksum_by_definition<T>(n, m, transpose));
        }
        const io::file f(grid, split, io::file::mode::read);
        dist_matrix<T> c(grid, m, n, 3);
        f.read("a", c);  // at the default limit
        expect_entries(c, entry);
      }
  }
}

// A real dataset widened into complex under split calls: real parts the file's values,
// imaginary parts exactly zero, read straight and transposed.
TYPED_TEST(IoComplex, SplitWideningKeepsTheValues) {
  using T = TypeParam;
  using R = real_t<T>;
  const scratch_dir dir;
  for (const auto shape : shapes_for_world()) {
    const process_grid grid(MPI_COMM_WORLD, shape);
    for (const auto [m, n, nb] : split_cases)
      for (const std::int64_t limit : split_limits) {
        SCOPED_TRACE(label(shape, m, n, nb) + " limit " + std::to_string(limit));
        const auto promoted = [&](index_t i, index_t j) {
          return T(random_entry<R>(m + n, i, j), R(0));
        };
        const std::string path = dir.file("real.h5");
        write_real_file<R>(grid, path, m, n, nb, m + n);
        const io::file f(grid, path, io::file::mode::read);
        const limit_scope low(limit);
        dist_matrix<T> c(grid, m, n, nb);
        c.fill([](index_t, index_t) { return T(3, 4); });
        f.read("r", c);
        EXPECT_EQ(local_mismatches(c, promoted), 0);
        dist_matrix<T> t(grid, n, m, nb);
        f.read("r", t, true);
        EXPECT_EQ(local_mismatches(t, [&](index_t i, index_t j) { return promoted(j, i); }), 0);
        EXPECT_EQ(f.checksum<T>("r"), checksum_by_definition<T>(m, n, promoted));
      }
  }
}

// Index datasets longer than one call: written and read in pieces of three entries, and
// the same values read at the default limit.
TEST(IoIndices, SplitRoundTrip) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  std::vector<index_t> values(50);
  for (std::size_t k = 0; k < values.size(); ++k)
    values[k] = static_cast<index_t>(k * k) - 7 + (index_t{1} << 40) * static_cast<index_t>(k % 3);
  const std::string path = dir.file("indices.h5");
  {
    const limit_scope low(24);
    io::file f(grid, path, io::file::mode::create);
    f.write_indices("pivots", values);
    f.close();
  }
  const io::file f(grid, path, io::file::mode::read);
  EXPECT_EQ(f.read_indices("pivots"), values);
  const limit_scope low(24);
  EXPECT_EQ(f.read_indices("pivots"), values);
}

TYPED_TEST(Io, MissingFileOrDatasetIsAnInputError) {
  using T = TypeParam;
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  try {
    const io::file f(grid, dir.file("absent.h5"), io::file::mode::read);
    ADD_FAILURE() << "opened a file that does not exist";
  } catch (const gridlu::error& e) {
    EXPECT_EQ(e.kind(), error_kind::input);
  }
  {
    io::file f(grid, dir.file("empty.h5"), io::file::mode::create);
    f.close();
  }
  const io::file f(grid, dir.file("empty.h5"), io::file::mode::read);
  try {
    (void)f.checksum<T>("a");
    ADD_FAILURE() << "checksum of a dataset that does not exist";
  } catch (const gridlu::error& e) {
    EXPECT_EQ(e.kind(), error_kind::input);
    EXPECT_NE(std::string(e.what()).find("'a'"), std::string::npos) << e.what();
  }
}

}  // namespace
