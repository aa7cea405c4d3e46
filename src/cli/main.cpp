// The `gridlu` command: subcommands, options, what rank 0 prints, exit codes.
#include <CLI/CLI.hpp>
#include <nlohmann/json.hpp>

#include <cstdio>
#include <fstream>
#include <iostream>
#include <optional>

#include "gridlu/kernels.hpp"
#include "workflows/workflows.hpp"

namespace {

using namespace gridlu;

constexpr const char* exit_codes_help =
    "Exit codes: 0 solved, 1 internal error, 2 usage error, 3 input data error,\n"
    "            4 numerically singular, 5 stopped early with a checkpoint.";

struct common_options {
  std::string grid;  // empty: as square as possible
  int blas_threads = 1;
  std::string report;
};

void add_common(CLI::App* cmd, common_options& o) {
  cmd->add_option("--grid", o.grid, "process grid PxQ (default: as square as possible, P <= Q)");
  cmd->add_option("--blas-threads", o.blas_threads,
                  "BLAS threads per rank (default 1: one rank per core)")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--report", o.report, "also write the figures as JSON to this file");
}

process_grid make_grid(const common_options& o) {
  int ranks = 0;
  MPI_Comm_size(MPI_COMM_WORLD, &ranks);
  blas::set_threads(o.blas_threads);
  return process_grid(MPI_COMM_WORLD,
                      o.grid.empty() ? square_grid_shape(ranks) : parse_grid_shape(o.grid));
}

void write_report(const std::string& path, const nlohmann::json& j) {
  if (path.empty()) return;
  std::ofstream out(path);
  out << j.dump(2) << '\n';
  if (!out) throw error(exit_code::usage, "cannot write the report " + path);
}

nlohmann::json grid_json(const process_grid& g) {
  return {{"grid", {g.prows(), g.pcols()}}, {"ranks", g.size()}};
}

int run_bench(const workflows::bench_options& o, const common_options& c) {
  const auto grid = make_grid(c);
  const auto r = workflows::bench(grid, o);
  if (grid.rank() != 0) return 0;
  const double ratio = r.gflops / r.gemm_gflops;
  std::printf("gridlu bench: LU of a random %s matrix, n = %lld, block %lld, grid %dx%d\n",
              o.type.c_str(), static_cast<long long>(o.n), static_cast<long long>(o.block),
              grid.prows(), grid.pcols());
  std::printf("  factor time   %10.3f s   (median of %zu)\n", r.factor_median,
              r.factor_seconds.size());
  std::printf("  factor rate   %10.2f GFLOP/s\n", r.gflops);
  std::printf("  GEMM rate     %10.2f GFLOP/s   (order %lld on all %d ranks at once)\n",
              r.gemm_gflops, static_cast<long long>(r.gemm_order), grid.size());
  std::printf("  LU / GEMM     %10.3f\n", ratio);
  auto j = grid_json(grid);
  j.update({{"command", "bench"},
            {"n", o.n},
            {"block", o.block},
            {"type", o.type},
            {"times", {{"factor", r.factor_median}, {"factor_runs", r.factor_seconds}}},
            {"gflops", r.gflops},
            {"gemm_gflops", r.gemm_gflops},
            {"gemm_order", r.gemm_order},
            {"ratio_to_gemm", ratio},
            {"version", GRIDLU_VERSION}});
  write_report(c.report, j);
  return 0;
}

int run_demo(const workflows::demo_options& o, const common_options& c) {
  const auto grid = make_grid(c);
  const auto r = workflows::demo(grid, o);
  const double worst = *std::max_element(r.backward_errors.begin(), r.backward_errors.end());
  const bool good = worst <= r.threshold && r.first_zero_pivot < 0;
  if (grid.rank() == 0) {
    std::printf("gridlu demo: random %s system, n = %lld, %lld right-hand side(s)\n",
                o.type.c_str(), static_cast<long long>(o.n), static_cast<long long>(o.nrhs));
    std::printf("  grid %dx%d on %d rank(s), block %lld\n", grid.prows(), grid.pcols(), grid.size(),
                static_cast<long long>(o.block));
    std::printf("  generate  %9.3f s\n  factor    %9.3f s   %.2f GFLOP/s\n", r.generate_seconds,
                r.factor_seconds, r.gflops);
    std::printf("  solve     %9.3f s\n  check     %9.3f s\n", r.solve_seconds, r.check_seconds);
    if (r.first_zero_pivot >= 0)
      std::printf("  exactly zero pivot in column %lld (1-based)\n",
                  static_cast<long long>(r.first_zero_pivot + 1));
    std::printf("  backward error, worst of %zu: %.2e (accepted up to 10 n eps = %.2e): %s\n",
                r.backward_errors.size(), worst, r.threshold, good ? "GOOD" : "POOR");
    auto j = grid_json(grid);
    j.update({{"command", "demo"},
              {"n", o.n},
              {"nrhs", o.nrhs},
              {"block", o.block},
              {"type", o.type},
              {"times",
               {{"generate", r.generate_seconds},
                {"factor", r.factor_seconds},
                {"solve", r.solve_seconds},
                {"check", r.check_seconds}}},
              {"gflops", r.gflops},
              {"backward_error", worst},
              {"backward_errors", r.backward_errors},
              {"status", good ? "solved" : "inaccurate"},
              {"version", GRIDLU_VERSION}});
    write_report(c.report, j);
  }
  return r.first_zero_pivot >= 0 ? static_cast<int>(exit_code::singular) : 0;
}

}  // namespace

int main(int argc, char** argv) {
  gridlu::mpi_session mpi(argc, argv);
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);

  CLI::App app{"gridlu: dense LU with partial pivoting on a block-cyclic grid of MPI ranks."};
  app.footer(exit_codes_help);
  app.require_subcommand(1);

  common_options common;
  workflows::bench_options bench;
  auto* bench_cmd = app.add_subcommand(
      "bench",
      "time the LU of a generated matrix in memory against the GEMM rate of the same ranks");
  bench_cmd->add_option("--n", bench.n, "order of the matrix")->capture_default_str();
  bench_cmd->add_option("--block", bench.block, "block size nb")->capture_default_str();
  bench_cmd->add_option("--type", bench.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  bench_cmd->add_option("--seed", bench.seed, "seed of the generated matrix")
      ->capture_default_str();
  bench_cmd->add_option("--repeat", bench.repeat, "factorizations to time (median is reported)")
      ->capture_default_str();
  add_common(bench_cmd, common);
  bench_cmd->footer("Example:\n  mpiexec -n 2 gridlu bench --n 8192 --grid 1x2 --repeat 3");

  workflows::demo_options demo;
  auto* demo_cmd =
      app.add_subcommand("demo", "solve a generated random system and report its backward error");
  demo_cmd->add_option("--n", demo.n, "number of unknowns")->capture_default_str();
  demo_cmd->add_option("--rhs", demo.nrhs, "number of right-hand sides")->capture_default_str();
  demo_cmd->add_option("--block", demo.block, "block size nb")->capture_default_str();
  demo_cmd->add_option("--type", demo.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  demo_cmd->add_option("--seed", demo.seed, "seed of the generated system")->capture_default_str();
  add_common(demo_cmd, common);
  demo_cmd->footer("Example:\n  mpiexec -n 2 gridlu demo --n 3000 --rhs 4\n\n" +
                   std::string(exit_codes_help));

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // Every rank parses the same arguments; only rank 0 speaks.
    if (rank == 0) app.exit(e);
    return e.get_exit_code() == 0 ? 0 : static_cast<int>(exit_code::usage);
  }

  try {
    if (*bench_cmd) return run_bench(bench, common);
    return run_demo(demo, common);
  } catch (const gridlu::error& e) {
    // Errors reaching here were agreed by all ranks (or raised by all alike).
    if (rank == 0) std::fprintf(stderr, "gridlu: %s\n", e.what());
    return static_cast<int>(e.code());
  }
}
