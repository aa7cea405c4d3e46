// `gridlu calibrate`: the rates of the performance model, measured on the ranks of the
// run, every rank at once where the factorization would run them at once.
#include <unistd.h>

#include <algorithm>
#include <ctime>
#include <limits>
#include <random>

#include "comm/collectives.hpp"
#include "factor/interchange.hpp"
#include "factor/unit_lower.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/lu.hpp"
#include "io/staged.hpp"
#include "kernels/blas.hpp"
#include "workflows/calibrate.hpp"
#include "workflows/dispatch.hpp"
#include "workflows/timing.hpp"

namespace gridlu::workflows {
namespace {

// The shapes measured: rows and k span the blocks and local sizes of real runs; beyond
// them the model holds the rate of the nearest sample.
constexpr index_t sample_rows[] = {128, 256, 512, 1024, 2048, 4096};
constexpr index_t panel_rows[] = {256, 1024, 4096, 16384};
constexpr index_t sample_k[] = {32, 64, 128, 256, 384};
constexpr index_t trsm_columns = 2048, trsm_ld = 2048;

// The slowest rank's rate of `call` (flops each): the best of three batches of calls,
// each at least 30 ms long, after a warm-up call; `prepare` runs untimed before each call.
// Another process taking the core only ever slows a batch, so the best batch is the
// kernel's own rate (here and in every measurement below).
template <class Prepare, class Call>
double rate_of(const process_grid& grid, double flops, Prepare&& prepare, Call&& call) {
  prepare();
  call();
  comm::barrier(grid.all());
  std::vector<double> rates;
  for (int batch = 0; batch < 3; ++batch) {
    double busy = 0;
    int calls = 0;
    while (busy < 0.03) {
      prepare();
      const double start = comm::wtime();
      call();
      busy += comm::wtime() - start;
      ++calls;
    }
    rates.push_back(flops * calls / busy * 1e-9);
  }
  double gflops = *std::max_element(rates.begin(), rates.end());
  comm::min(grid.all(), &gflops, 1);
  return gflops;
}

template <scalar T>
std::vector<T> random_entries(index_t count, std::uint64_t seed) {
  std::vector<T> v(static_cast<std::size_t>(count));
  for (index_t i = 0; i < count; ++i) v[static_cast<std::size_t>(i)] = random_entry<T>(seed, i, 0);
  return v;
}

template <scalar T>
double flops_of(double real_flops) {
  return scalar_traits<T>::is_complex ? 4 * real_flops : real_flops;
}

template <scalar T>
rate_table gemm_rates(const process_grid& grid) {
  std::vector<rate_sample> t;
  for (const index_t k : sample_k)
    for (const index_t m : sample_rows) {
      const index_t n = std::min(m, trsm_columns);
      const auto a = random_entries<T>(m * k, 1), b = random_entries<T>(k * n, 2);
      auto c = random_entries<T>(m * n, 3);
      const double f = flops_of<T>(2.0 * m * n * k);
      t.push_back({m, k,
                   rate_of(
                       grid, f, [] {},
                       [&] {
                         blas::gemm(blas::op::none, blas::op::none, m, n, k, T(-1), a.data(), m,
                                    b.data(), k, T(1), c.data(), m);
                       })});
    }
  return rate_table(std::move(t));
}

template <scalar T>
rate_table trsm_rates(const process_grid& grid) {
  std::vector<rate_sample> t;
  for (const index_t k : sample_k) {
    auto l = random_entries<T>(k * k, 4);
    for (index_t i = 0; i < k; ++i) l[static_cast<std::size_t>(i * k + i)] = T(k);
    // The block row lies in a tall local matrix: its columns are trsm_ld entries apart.
    const auto b0 = random_entries<T>(trsm_ld * trsm_columns, 5);
    auto b = b0;
    const auto restore = [&] {
      for (index_t c = 0; c < trsm_columns; ++c)
        std::copy_n(b0.begin() + c * trsm_ld, k, b.begin() + c * trsm_ld);
    };
    const double f = flops_of<T>(1.0 * k * k * trsm_columns);
    t.push_back({trsm_columns, k, rate_of(grid, f, restore, [&] {
                   detail::solve_unit_lower(k, trsm_columns, l.data(), k, b.data(), trsm_ld);
                 })});
  }
  return rate_table(std::move(t));
}

template <scalar T>
rate_table panel_rates(const process_grid& grid) {
  std::vector<rate_sample> t;
  for (const index_t k : sample_k)
    for (const index_t m : panel_rows) {
      const auto a0 = random_entries<T>(m * k, 6);
      auto a = a0;
      std::vector<std::int32_t> ipiv(static_cast<std::size_t>(k));
      const double f = flops_of<T>(1.0 * m * k * k - k * k * k / 3.0);
      t.push_back({m, k,
                   rate_of(
                       grid, f, [&] { a = a0; },
                       [&] { blas::lapack_getrf(m, k, a.data(), m, ipiv.data()); })});
    }
  return rate_table(std::move(t));
}

// Seconds per entry moved by the row interchanges of one panel, within a rank: the
// factorization's own interchange code on a matrix of this rank alone.
template <scalar T>
double swap_seconds(const process_grid& grid) {
  constexpr index_t rows = 4096, cols = 2048, jb = 224;
  const process_grid self(MPI_COMM_SELF, {1, 1});
  dist_matrix<T> a(self, rows, cols, jb);
  std::mt19937_64 g(7);
  std::vector<index_t> pivots(jb);
  for (index_t t = 0; t < jb; ++t)
    pivots[t] = std::uniform_int_distribution<index_t>(t, rows - 1)(g);
  const auto plan = detail::plan_interchanges(a.layout().rows, 0, 0, pivots);
  detail::interchange_buffers<T> buffers;
  const detail::column_range all{0, cols};
  const double entries = 2.0 * jb * cols;
  const double gflops = rate_of(
      grid, entries, [] {},
      [&] { detail::interchange_rows(a, plan, std::span(&all, 1), buffers); });
  return 1e-9 / gflops;
}

// The share of the GEMM table's rate the trailing update gets inside a factorization: a
// factorization of order 3072 on every rank at once, each on a grid of its own, its GEMM
// phase (the faster of two) against the table's time for the same updates.
template <scalar T>
double gemm_in_factorization(const process_grid& grid, const rate_table& gemm) {
  constexpr index_t n = 3072, nb = 224;
  const process_grid self(MPI_COMM_SELF, {1, 1});
  double measured = std::numeric_limits<double>::infinity();
  for (int run = 0; run < 2; ++run) {
    dist_matrix<T> a(self, n, n, nb);
    a.fill([](index_t i, index_t j) { return random_entry<T>(8, i, j); });
    comm::barrier(grid.all());
    measured = std::min(measured, factor(a).phases.gemm);
  }
  comm::max(grid.all(), &measured, 1);
  double table = 0;
  for (index_t j0 = 0; j0 < n; j0 += nb) {
    const double jb = static_cast<double>(std::min(nb, n - j0)), t = double(n - j0) - jb;
    table += flops_of<T>(2 * t * t * jb) / (1e9 * gemm.gflops_at(std::max(t, 1.0), jb));
  }
  return table / measured;
}

// The ranks of a process row (or column, whichever is longer) stood up as one process
// column, every row of them at once: where a process column's costs are measured even
// when the grid calibrated has a single process row.
process_grid column_of(const process_grid& grid) {
  return grid.pcols() >= grid.prows() ? process_grid(grid.row().get(), {grid.pcols(), 1})
                                      : process_grid(grid.col().get(), {grid.prows(), 1});
}

// A process column's costs inside a factorization against the model's (from the figures
// measured before): one of order 1024 per rank of the column (3072 at least) with block
// 160, each phase its least over three runs on the slowest rank. Not at a block or order
// the model is validated at, so that the validation tests the model, not the fit.
template <scalar T>
column_factors column_factors_of(const process_grid& grid, const process_grid& column,
                                 const calibration& c, const std::string& type) {
  if (column.size() < 2) return {};
  const index_t n = std::max<index_t>(3072, 1024 * column.size()), nb = 160;
  constexpr double never = std::numeric_limits<double>::infinity();
  lu_phases least{never, never, never, never};  // the phases a process column adds
  for (int run = 0; run < 3; ++run) {
    dist_matrix<T> a(column, n, n, nb);
    a.fill([](index_t i, index_t j) { return random_entry<T>(9, i, j); });
    comm::barrier(grid.all());
    const lu_phases p = slowest(grid, factor(a).phases);
    least = {std::min(least.panel, p.panel), std::min(least.pivot_search, p.pivot_search),
             std::min(least.interchange, p.interchange), std::min(least.broadcast, p.broadcast)};
  }
  const lu_phases model = predict(c, {n, type, column.shape(), nb, lu_options{}.lookahead}).phases;
  return {least.panel / model.panel, least.pivot_search / model.pivot_search,
          least.interchange / model.interchange, least.broadcast / model.broadcast};
}

// One step of a broadcast tree over c from the times of a small and a large broadcast,
// each closed by a barrier whose own time is taken off; the point-to-point figures when
// c has a single rank.
link_cost tree_step(const process_grid& grid, const communicator& c, const link_cost& fallback) {
  double size = c.size();
  comm::max(grid.all(), &size, 1);  // every rank measures where any can
  if (size < 2) return fallback;
  constexpr index_t large = index_t{1} << 22;
  std::vector<std::int64_t> data(large / 8);
  const auto time_of = [&](index_t bytes) {  // the fastest of five batches
    const int rounds = bytes > 1024 ? 4 : 100;
    std::vector<double> t;
    for (int batch = 0; batch < 5; ++batch) {
      comm::barrier(grid.all());
      const double start = comm::wtime();
      for (int r = 0; r < rounds; ++r) {
        if (bytes > 0) comm::broadcast(c, data.data(), bytes / 8, 0);
        comm::barrier(c);
      }
      double seconds = (comm::wtime() - start) / rounds;
      comm::max(grid.all(), &seconds, 1);
      t.push_back(seconds);
    }
    return *std::min_element(t.begin(), t.end());
  };
  const double hops = std::ceil(std::log2(size)), barrier = time_of(0);
  const double small = std::max(time_of(8) - barrier, 0.0), big = time_of(large) - barrier;
  return {small / hops, static_cast<double>(large) * hops / std::max(big - small, 1e-9)};
}

// The fastest of five ping-pong batches.
double trip_seconds(const process_grid& grid, index_t bytes, int rounds) {
  std::vector<double> t;
  for (int batch = 0; batch < 5; ++batch) {
    double s = comm::ping_pong(grid.all(), 0, 1, bytes, rounds);
    comm::max(grid.all(), &s, 1);
    t.push_back(s);
  }
  return *std::min_element(t.begin(), t.end());
}

link_cost point_to_point(const process_grid& grid) {
  if (grid.size() < 2) return {};
  constexpr index_t large = index_t{1} << 22;
  const double small = trip_seconds(grid, 8, 200), big = trip_seconds(grid, large, 4);
  return {small, static_cast<double>(large) / std::max(big - small, 1e-9)};
}

double write_bandwidth(const process_grid& grid, const std::string& directory, std::int64_t bytes) {
  const std::int64_t mine = bytes / grid.size();
  double seconds = 0;
  comm::together(grid.all(), [&] { seconds = io::timed_write(directory, mine); });
  comm::max(grid.all(), &seconds, 1);
  return static_cast<double>(mine * grid.size()) / seconds;
}

std::string source_of(const process_grid& grid) {
  char host[256] = {};
  gethostname(host, sizeof host - 1);
  char date[32] = {};
  const std::time_t now = std::time(nullptr);
  std::strftime(date, sizeof date, "%Y-%m-%d %H:%M UTC", std::gmtime(&now));
  return std::string("measured on ") + host + ", " + date + ", " + std::to_string(grid.size()) +
         " rank(s), grid " + std::to_string(grid.prows()) + "x" + std::to_string(grid.pcols());
}

}  // namespace

calibration calibrate(const process_grid& grid, const calibrate_options& o) {
  calibration c;
  c.source = source_of(grid);
  c.ranks = grid.size();
  const process_grid column = column_of(grid);
  c.point_to_point = point_to_point(grid);
  c.row_broadcast = tree_step(grid, grid.row(), c.point_to_point);
  c.column_broadcast = tree_step(grid, column.col(), c.point_to_point);
  for (const auto& type : o.types)
    with_type(type, [&]<class T>(T) {
      const rate_table gemm = gemm_rates<T>(grid);
      c.types.push_back({type,
                         {gemm, trsm_rates<T>(grid), panel_rates<T>(grid), swap_seconds<T>(grid),
                          gemm_in_factorization<T>(grid, gemm), column_factors{}}});
      c.types.back().second.column = column_factors_of<T>(grid, column, c, type);
    });
  c.write_bandwidth = write_bandwidth(grid, o.checkpoint_dir, o.write_bytes);
  return c;
}

}  // namespace gridlu::workflows
