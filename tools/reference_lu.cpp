// OpenBLAS's own threaded LU (LAPACK dgetrf and friends) on the matrix `gridlu bench`
// factors, in one process: the reference gridlu's factorization is measured against.
//   reference_lu N THREADS [TYPE] [REPEAT]   -> one line of JSON with the median time
#include <nlohmann/json.hpp>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <string>
#include <vector>

#include "gridlu/generate.hpp"
#include "kernels/blas.hpp"

namespace {

template <class T>
std::vector<double> time_lu(gridlu::index_t n, int repeat) {
  std::vector<T> a(static_cast<std::size_t>(n * n));
  std::vector<std::int32_t> ipiv(static_cast<std::size_t>(n));
  std::vector<double> seconds;
  for (int rep = 0; rep < repeat; ++rep) {
    for (gridlu::index_t j = 0; j < n; ++j)
      for (gridlu::index_t i = 0; i < n; ++i) a[i + j * n] = gridlu::random_entry<T>(1, i, j);
    const auto start = std::chrono::steady_clock::now();
    gridlu::blas::lapack_getrf<T>(n, n, a.data(), n, ipiv.data());
    seconds.push_back(
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count());
  }
  return seconds;
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < 3) {
    std::fprintf(stderr,
                 "usage: reference_lu N THREADS [float64|complex128|float32|complex64] [REPEAT]\n");
    return 2;
  }
  const gridlu::index_t n = std::stoll(argv[1]);
  const int threads = std::stoi(argv[2]);
  const std::string type = argc > 3 ? argv[3] : "float64";
  const int repeat = argc > 4 ? std::stoi(argv[4]) : 1;
  gridlu::blas::set_threads(threads);
  std::vector<double> seconds;
  double flops = 0;
  if (!gridlu::dispatch_scalar(type, [&]<class T>(T) {
        seconds = time_lu<T>(n, repeat);
        flops = gridlu::lu_flops<T>(static_cast<double>(n));
      })) {
    std::fprintf(stderr, "reference_lu: unknown type %s\n", type.c_str());
    return 2;
  }
  // "runs" in the order they ran: the benchmark tells the first from the warm ones.
  std::vector<double> sorted = seconds;
  std::sort(sorted.begin(), sorted.end());
  const double median = sorted[sorted.size() / 2];
  std::printf("%s\n", nlohmann::json{{"n", n},
                                     {"threads", threads},
                                     {"type", type},
                                     {"blas", gridlu::blas::library_version()},
                                     {"runs", seconds},
                                     {"seconds", median},
                                     {"gflops", flops / median * 1e-9}}
                          .dump()
                          .c_str());
  return 0;
}
