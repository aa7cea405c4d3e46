// Peak memory and time of io::file::write and io::file::read per rank, against the bound
// io_buffer_bytes states. Not built by default; from the worktree, after building gridlu:
//
//   mpicxx -std=c++20 -O2 -DOMPI_SKIP_MPICXX -Iinclude -Ibuild/include tools/io_memory.cpp
//     build/libgridlu.a $(pkg-config --libs hdf5-openmpi lapacke openblas) -o build/io_memory
//   (one command)
//   tools/launch -n 4 build/io_memory 4000 250 4x1 /tmp/io_memory.h5
//
// Peak growth is the rise of VmHWM above the resident size just before each call, after
// /proc/self/clear_refs has reset the mark (Linux 4.0 and later); the matrices are
// filled, so their pages are resident before either call. Prints one line per rank.
#include <mpi.h>

#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <string>

#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"

namespace {

using namespace gridlu;

// A field of /proc/self/status, in bytes.
std::int64_t status_bytes(const std::string& key) {
  std::ifstream in("/proc/self/status");
  for (std::string line; std::getline(in, line);)
    if (line.rfind(key + ":", 0) == 0) return std::atoll(line.c_str() + key.size() + 1) * 1024;
  return -1;
}

void reset_peak() { std::ofstream("/proc/self/clear_refs") << "5"; }

// Runs f with the peak mark reset; returns {peak growth in bytes, seconds (slowest rank)}.
template <class F>
std::pair<std::int64_t, double> measure(const process_grid& grid, F&& f) {
  comm::barrier(grid.all());
  reset_peak();
  const std::int64_t before = status_bytes("VmRSS");
  const double start = comm::wtime();
  f();
  double seconds = comm::wtime() - start;
  comm::max(grid.all(), &seconds, 1);
  return {status_bytes("VmHWM") - before, seconds};
}

}  // namespace

int main(int argc, char** argv) {
  mpi_session session(argc, argv);
  if (argc != 5) {
    std::fprintf(stderr, "usage: io_memory N BLOCK PxQ FILE\n");
    return 2;
  }
  const index_t n = std::atoll(argv[1]), nb = std::atoll(argv[2]);
  const process_grid grid(MPI_COMM_WORLD, parse_grid_shape(argv[3]));
  const std::string path = argv[4];
  const auto entry = [&](index_t i, index_t j) { return random_entry<double>(n, i, j); };
  dist_matrix<double> a(grid, n, n, nb), b(grid, n, n, nb);
  a.fill(entry);
  b.fill([](index_t, index_t) { return 0.0; });
  const auto written = measure(grid, [&] {
    io::file f(grid, path, io::file::mode::create);
    f.write("a", a);
    f.close();
  });
  const auto read = measure(grid, [&] {
    const io::file f(grid, path, io::file::mode::read);
    f.read("a", b);
  });
  const bool same = content_checksum(a) == content_checksum(b);
  const std::int64_t bound =
      io::io_buffer_bytes(n, n, nb, grid.shape(), sizeof(double), comm::transfer_limit());
  for (int r = 0; r < grid.size(); ++r) {
    if (r == grid.rank())
      std::printf("%s rank %d: write +%.1f MB %.2f s, read +%.1f MB %.2f s, bound %.1f MB%s\n",
                  argv[3], r, written.first / 1e6, written.second, read.first / 1e6, read.second,
                  bound / 1e6, same ? "" : " READ BACK DIFFERS");
    std::fflush(stdout);
    comm::barrier(grid.all());
  }
  return same ? 0 : 1;
}
