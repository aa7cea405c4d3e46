// The `gridlu` command: subcommands, options, what rank 0 prints, exit codes.
#include <unistd.h>

#include <CLI/CLI.hpp>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>

#include "gridlu/checkpoint.hpp"
#include "gridlu/io.hpp"
#include "gridlu/kernels.hpp"
#include "gridlu/version.hpp"
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

void add_lookahead(CLI::App* cmd, int& depth) {
  cmd->add_option("--lookahead", depth,
                  "panels factored and sent ahead of the trailing update (0: none)")
      ->capture_default_str()
      ->check(CLI::NonNegativeNumber);
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

// What every report carries: the grid and the versions of everything that ran.
nlohmann::json grid_json(const process_grid& g) {
  return {{"grid", {g.prows(), g.pcols()}},
          {"ranks", g.size()},
          {"version", gridlu::version},
          {"versions",
           {{"gridlu", gridlu::version},
            {"mpi", comm::library_version()},
            {"blas", blas::library_version()},
            {"hdf5", io::library_version()}}}};
}

// Where a factorization's time went, on the slowest rank for each phase.
nlohmann::json phases_json(const lu_phases& p) {
  return {{"panel", p.panel},
          {"pivot_search", p.pivot_search},
          {"interchange", p.interchange},
          {"broadcast", p.broadcast},
          {"trsm", p.trsm},
          {"gemm", p.gemm},
          {"wait", p.wait}};
}
void print_phases(const lu_phases& p) {
  std::printf(
      "  phases (s, slowest rank): panel %.3f (pivot search %.3f) | interchanges %.3f |"
      " broadcasts %.3f | trsm %.3f | gemm %.3f | waiting for panels %.3f\n",
      p.panel, p.pivot_search, p.interchange, p.broadcast, p.trsm, p.gemm, p.wait);
}

int run_read_bench(const workflows::read_bench_options& o, const common_options& c) {
  const auto grid = make_grid(c);
  const auto r = workflows::bench_read(grid, o);
  if (grid.rank() != 0) return 0;
  const double median = r.median;
  std::printf("gridlu bench --read: %s:%s (%.2f GB) into a %dx%d grid, block %lld\n",
              o.path.c_str(), o.dataset.c_str(), r.bytes * 1e-9, grid.prows(), grid.pcols(),
              static_cast<long long>(o.block));
  for (const double t : r.seconds)
    std::printf("  read %8.3f s   %6.2f GB/s\n", t, r.bytes / t * 1e-9);
  std::printf("  median %6.3f s   %6.2f GB/s\n", median, r.bytes / median * 1e-9);
  auto j = grid_json(grid);
  j.update({{"command", "bench-read"},
            {"file", o.path},
            {"dataset", o.dataset},
            {"bytes", r.bytes},
            {"block", o.block},
            {"times", {{"read", median}, {"read_runs", r.seconds}}},
            {"gbytes_per_second", r.bytes / median * 1e-9}});
  write_report(c.report, j);
  return 0;
}

int run_bench(const workflows::bench_options& o, const common_options& c) {
  const auto grid = make_grid(c);
  const auto r = workflows::bench(grid, o);
  if (grid.rank() != 0) return 0;
  const double ratio = r.gflops / r.gemm_gflops;
  std::printf(
      "gridlu bench: LU of a random %s matrix, n = %lld, block %lld, look-ahead %d, grid %dx%d\n",
      o.type.c_str(), static_cast<long long>(o.n), static_cast<long long>(o.block), o.lookahead,
      grid.prows(), grid.pcols());
  std::printf("  factor time   %10.3f s   (median of %zu)\n", r.factor_median,
              r.factor_seconds.size());
  std::printf("  factor rate   %10.2f GFLOP/s\n", r.gflops);
  std::printf("  GEMM rate     %10.2f GFLOP/s   (order %lld on all %d ranks at once)\n",
              r.gemm_gflops, static_cast<long long>(r.gemm_order), grid.size());
  std::printf("  LU / GEMM     %10.3f\n", ratio);
  const auto& ph = r.phases;
  print_phases(ph);
  auto j = grid_json(grid);
  j.update({{"command", "bench"},
            {"n", o.n},
            {"block", o.block},
            {"lookahead", o.lookahead},
            {"type", o.type},
            {"times", {{"factor", r.factor_median}, {"factor_runs", r.factor_seconds}}},
            {"gflops", r.gflops},
            {"gemm_gflops", r.gemm_gflops},
            {"gemm_order", r.gemm_order},
            {"ratio_to_gemm", ratio},
            {"phases", phases_json(ph)}});
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
      std::printf("  exactly zero pivot in column %lld (0-based, as everywhere in gridlu)\n",
                  static_cast<long long>(r.first_zero_pivot));
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
              {"status", good ? "solved" : "inaccurate"}});
    write_report(c.report, j);
  }
  return r.first_zero_pivot >= 0 ? static_cast<int>(exit_code::singular) : 0;
}

// Progress of the factorization on stderr, from rank 0, at most once a second; on a
// terminal one line rewritten in place.
workflows::progress_callback progress_printer() {
  const bool terminal = isatty(fileno(stderr));
  auto last = std::make_shared<double>(-1.0);
  return [=](double fraction, double seconds, double gflops) {
    const bool done = fraction >= 1.0;
    if (!done && seconds - *last < 1.0) return;
    *last = seconds;
    const double left = fraction > 0 ? seconds * (1.0 - fraction) / fraction : 0.0;
    std::fprintf(stderr,
                 "%sfactorization %5.1f %%  elapsed %6.0f s  left ~%6.0f s  %7.2f GFLOP/s%s",
                 terminal ? "\r" : "", 100.0 * fraction, seconds, left, gflops,
                 terminal && !done ? "" : "\n");
    std::fflush(stderr);
  };
}

struct solve_cli {
  workflows::solve_options options;
  bool quiet = false, progress = false;
};

struct resume_cli {
  workflows::resume_options options;
  bool quiet = false, progress = false;
};

workflows::progress_callback progress_if(const process_grid& grid, bool quiet, bool forced) {
  if (grid.rank() == 0 && !quiet && (forced || isatty(fileno(stderr)))) return progress_printer();
  return {};
}

// The command that continues a stopped solve: this program, these ranks, that directory.
std::string resume_command(const process_grid& grid, const std::string& dir) {
  std::error_code ec;
  auto self = std::filesystem::read_symlink("/proc/self/exe", ec).string();
  if (ec) self = "gridlu";
  return "mpiexec -n " + std::to_string(grid.size()) + " " + self + " resume " +
         std::filesystem::absolute(dir).string();
}

// What rank 0 says after a solve or a resume, and the exit code.
int report_solve(const process_grid& grid, const workflows::solve_result& r,
                 const std::string& checkpoint_dir, bool quiet, const common_options& c) {
  if (grid.rank() != 0) return r.stopped ? static_cast<int>(exit_code::stopped) : 0;
  auto j = grid_json(grid);
  j.update({{"command", "solve"},
            {"input", r.input},
            {"output", r.output},
            {"n", r.n},
            {"nrhs", r.nrhs},
            {"type", r.type},
            {"block", r.block}});
  if (!checkpoint_dir.empty()) {
    const double total = lu_flops<double>(static_cast<double>(r.n));
    const double left = lu_flops<double>(static_cast<double>(r.n - r.columns_done));
    j["checkpoint"] = {{"dir", checkpoint_dir},
                       {"columns_done", r.columns_done},
                       {"flops_done_percent", r.n ? 100.0 * (1.0 - left / total) : 0.0},
                       {"factor_seconds_all_runs", r.factor_seconds_total},
                       {"restarts", r.restarts},
                       {"checkpoints", r.checkpoints}};
  }
  if (r.stopped) {
    std::printf("gridlu: stopped after column %lld of %lld with a checkpoint in %s\n",
                static_cast<long long>(r.columns_done), static_cast<long long>(r.n),
                checkpoint_dir.c_str());
    // Resumed with the same budget, such a run would again end after about one step.
    if (r.budget_too_short)
      std::printf(
          "gridlu: the time budget ran out at the first block step (reading %.1f s, checkpoint "
          "write %.1f s, %.1f s in all): --stop-after must allow more than that to make headway\n",
          r.read_seconds, r.write_seconds, r.total_seconds);
    std::printf("resume with: %s\n", resume_command(grid, checkpoint_dir).c_str());
    j["checkpoint"]["budget_too_short"] = r.budget_too_short;
    j.update({{"status", "stopped"},
              {"times",
               {{"read", r.read_seconds},
                {"factor", r.factor_seconds},
                {"write", r.write_seconds},
                {"total", r.total_seconds}}},
              {"phases", phases_json(r.phases)}});
    write_report(c.report, j);
    return static_cast<int>(exit_code::stopped);
  }
  const double worst = *std::max_element(r.backward_errors.begin(), r.backward_errors.end());
  const bool accepted = worst <= r.threshold;
  if (!quiet) {
    std::printf("gridlu solve  %s -> %s\n", r.input.c_str(), r.output.c_str());
    std::printf("  system     n = %lld, %lld right-hand side(s), %s\n", static_cast<long long>(r.n),
                static_cast<long long>(r.nrhs), r.type.c_str());
    std::printf("  grid       %dx%d on %d rank(s), block %lld\n", grid.prows(), grid.pcols(),
                grid.size(), static_cast<long long>(r.block));
    std::printf(
        "  time       read %.2f s | %s %.2f s | solve %.2f s | check %.2f s | write %.2f s"
        " | total %.2f s\n",
        r.read_seconds, r.refactored ? "factor" : "factor (saved)", r.factor_seconds,
        r.solve_seconds, r.check_seconds, r.write_seconds, r.total_seconds);
    if (r.refactored) std::printf("  speed      %.2f GFLOP/s in the factorization\n", r.gflops);
    if (!checkpoint_dir.empty())
      std::printf(
          "  checkpoint %s: %lld written, %lld restart(s), %.1f s of factorization in all runs\n",
          checkpoint_dir.c_str(), static_cast<long long>(r.checkpoints),
          static_cast<long long>(r.restarts), r.factor_seconds_total);
    std::printf("  accuracy   worst backward error %.2e (accepted up to 10 n eps = %.2e): %s\n",
                worst, r.threshold, accepted ? "ACCEPTED" : "SUSPECT");
  }
  j.update({{"refactored", r.refactored},
            {"times",
             {{"read", r.read_seconds},
              {"factor", r.factor_seconds},
              {"solve", r.solve_seconds},
              {"check", r.check_seconds},
              {"write", r.write_seconds},
              {"total", r.total_seconds}}},
            {"gflops", r.gflops},
            {"phases", phases_json(r.phases)},
            {"backward_error", worst},
            {"backward_errors", r.backward_errors},
            {"threshold", r.threshold},
            {"status", accepted ? "solved" : "suspect"}});
  write_report(c.report, j);
  return 0;
}

int run_solve(solve_cli& s, const common_options& c) {
  const auto grid = make_grid(c);
  auto& o = s.options;
  o.progress = progress_if(grid, s.quiet, s.progress);
  const auto r = workflows::solve_file(grid, o);
  return report_solve(grid, r, o.checkpoint_dir, s.quiet, c);
}

int run_resume(resume_cli& s, const common_options& c) {
  const auto grid = make_grid(c);
  auto& o = s.options;
  o.progress = progress_if(grid, s.quiet, s.progress);
  const auto r = workflows::resume_dir(grid, o);
  if (r.already_complete) {
    if (grid.rank() == 0)
      std::printf("gridlu: the solve in %s is complete; X is in %s (nothing to do)\n",
                  o.dir.c_str(), r.output.c_str());
    return 0;
  }
  return report_solve(grid, r, o.dir, s.quiet, c);
}

int run_generate(const workflows::generate_options& o, const common_options& c) {
  const auto grid = make_grid(c);
  workflows::generate_file(grid, o);
  if (grid.rank() == 0)
    std::printf(
        "gridlu generate: random %s system, n = %lld, %lld right-hand side(s), seed %llu -> %s\n",
        o.type.c_str(), static_cast<long long>(o.n), static_cast<long long>(o.nrhs),
        static_cast<unsigned long long>(o.seed), o.output.c_str());
  return 0;
}

std::string dims_text(const std::vector<index_t>& dims) {
  if (dims.empty()) return "scalar";
  std::string t;
  for (std::size_t k = 0; k < dims.size(); ++k) t += (k ? " x " : "") + std::to_string(dims[k]);
  return t;
}

// Progress of a checkpointed solve, from its directory.
void checkpoint_summary(const std::string& dir) {
  const auto state = checkpoint::state_file(dir);
  if (!std::filesystem::exists(state)) throw error(exit_code::input, "no checkpoint in " + dir);
  std::map<std::string, std::string> a;
  for (const auto& [k, v] : io::describe(state).attributes) a[k] = v;
  if (a["gridlu_kind"] != "checkpoint")
    throw error(exit_code::input, state + " is not a gridlu checkpoint");
  const auto number = [&](const std::string& key) {
    try {
      return std::stod(a.at(key));
    } catch (const std::exception&) {
      throw error(exit_code::input, state + " is damaged: no valid " + key);
    }
  };
  const double n = number("n"), k = number("columns_done");
  const double percent = 100.0 * (1.0 - lu_flops<double>(n - k) / lu_flops<double>(n));
  std::printf("checkpoint %s\n", dir.c_str());
  std::printf("solve      %s -> %s (%s, n = %s)\n", a["input"].c_str(), a["output"].c_str(),
              a["type"].c_str(), a["n"].c_str());
  std::printf("progress   %s of %s columns eliminated, %.1f %% of the flops\n",
              a["columns_done"].c_str(), a["n"].c_str(), percent);
  std::printf("time       %s s of factorization over all runs\n", a["elapsed_seconds"].c_str());
  std::printf("restarts   %s\ncheckpoints %s written\n", a["restarts"].c_str(),
              a["checkpoints"].c_str());
  const auto done = checkpoint::completed(dir);
  std::printf("status     %s\n", done ? ("complete, X in " + *done).c_str() : "in progress");
}

int run_info(const std::string& path) {
  // Rank 0 reads the file alone; the others only learn the outcome.
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  if (rank != 0) return 0;
  if (std::filesystem::is_directory(path)) {
    checkpoint_summary(path);
    return 0;
  }
  const auto d = io::describe(path);
  std::error_code ec;
  const auto bytes = std::filesystem::file_size(path, ec);
  const char* units[] = {"B", "kB", "MB", "GB", "TB"};
  double size = static_cast<double>(bytes);
  int unit = 0;
  for (; size >= 1000 && unit < 4; ++unit) size /= 1000;
  std::printf("file       %s (%.*f %s)\n", path.c_str(), unit ? 1 : 0, size, units[unit]);
  std::string kind, format;
  for (const auto& [k, v] : d.attributes) {
    if (k == "gridlu_kind") kind = v;
    if (k == "gridlu_format") format = v;
  }
  if (kind.empty())
    std::printf("kind       foreign (not written by gridlu)\n");
  else
    std::printf("kind       gridlu %s, format %s\n", kind.c_str(), format.c_str());
  for (const auto& [k, v] : d.attributes) std::printf("attribute  %s = %s\n", k.c_str(), v.c_str());
  const auto attributes_of = [](const io::description::item& item) {
    for (const auto& [k, v] : item.attributes)
      std::printf("attribute  %s:%s = %s\n", item.path.c_str(), k.c_str(), v.c_str());
  };
  for (const auto& group : d.groups) attributes_of(group);
  for (const auto& item : d.datasets) {
    std::printf("dataset    %s  %s  %s\n", item.path.c_str(), dims_text(item.shape.dims).c_str(),
                item.shape.type.c_str());
    attributes_of(item);
  }
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  gridlu::mpi_session mpi(argc, argv);
  const double started = MPI_Wtime();
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
  add_lookahead(bench_cmd, bench.lookahead);
  bench_cmd->add_option("--type", bench.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  bench_cmd->add_option("--seed", bench.seed, "seed of the generated matrix")
      ->capture_default_str();
  bench_cmd->add_option("--repeat", bench.repeat, "factorizations to time (median is reported)")
      ->capture_default_str();
  workflows::read_bench_options read_bench;
  bench_cmd->add_option("--read", read_bench.path,
                        "instead: time reading a dataset of this HDF5 file into the grid");
  bench_cmd->add_option("--dataset", read_bench.dataset, "with --read: the dataset")
      ->capture_default_str();
  bench_cmd->add_flag("--column-major", read_bench.column_major,
                      "with --read: the dataset holds the transpose");
  add_common(bench_cmd, common);
  bench_cmd->footer(
      "Examples:\n  mpiexec -n 2 gridlu bench --n 8192 --grid 1x2 --repeat 3\n"
      "  mpiexec -n 2 gridlu bench --read system.h5 --repeat 3");

  workflows::demo_options demo;
  auto* demo_cmd =
      app.add_subcommand("demo", "solve a generated random system and report its backward error");
  demo_cmd->add_option("--n", demo.n, "number of unknowns")->capture_default_str();
  demo_cmd->add_option("--rhs", demo.nrhs, "number of right-hand sides")->capture_default_str();
  demo_cmd->add_option("--block", demo.block, "block size nb")->capture_default_str();
  add_lookahead(demo_cmd, demo.lookahead);
  demo_cmd->add_option("--type", demo.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  demo_cmd->add_option("--seed", demo.seed, "seed of the generated system")->capture_default_str();
  add_common(demo_cmd, common);
  demo_cmd->footer("Example:\n  mpiexec -n 2 gridlu demo --n 3000 --rhs 4\n\n" +
                   std::string(exit_codes_help));

  solve_cli solve;
  auto& so = solve.options;
  auto* solve_cmd = app.add_subcommand("solve", "solve A X = B read from an HDF5 file, write X");
  solve_cmd->add_option("input", so.input, "HDF5 file with A (and B)")->required();
  solve_cmd->add_option("--out", so.output, "HDF5 file to write X to")->required();
  solve_cmd->add_option("--matrix-dataset", so.matrix_dataset, "name of A in INPUT")
      ->capture_default_str();
  solve_cmd->add_option("--rhs-dataset", so.rhs_dataset, "name of B")->capture_default_str();
  solve_cmd->add_option("--rhs-file", so.rhs_file, "read B from this file instead of INPUT");
  solve_cmd->add_option("--block", so.block, "block size nb")->capture_default_str();
  add_lookahead(solve_cmd, so.lookahead);
  solve_cmd->add_flag("--column-major", so.column_major,
                      "A's dataset holds the transpose (element [i][j] is A(j, i)), as "
                      "column-major writers store it");
  solve_cmd->add_option("--save-factors", so.save_factors,
                        "also write the LU factors to this file");
  solve_cmd->add_option("--factors", so.factors,
                        "solve with factors saved earlier instead of factoring");
  solve_cmd->add_flag("--force", so.force,
                      "replace OUTPUT (and the --save-factors file) if it exists");
  solve_cmd->add_flag("--quiet", solve.quiet, "print nothing but errors");
  solve_cmd->add_flag("--progress", solve.progress,
                      "show factorization progress even when stderr is not a terminal");
  solve_cmd->add_option("--checkpoint", so.checkpoint_dir,
                        "keep checkpoints in this directory; SIGTERM, SIGUSR1 and SIGINT then stop "
                        "with a checkpoint (exit 5)");
  solve_cmd->add_option("--checkpoint-every", so.checkpoint_every, "minutes between checkpoints")
      ->check(CLI::NonNegativeNumber);
  solve_cmd
      ->add_option("--stop-after", so.stop_after,
                   "time budget in minutes: stop with a checkpoint early enough to end inside it")
      ->check(CLI::NonNegativeNumber);
  add_common(solve_cmd, common);
  solve_cmd->footer(
      "Examples:\n"
      "  mpiexec -n 4 gridlu solve plate.h5 --out charges.h5\n"
      "  mpiexec -n 4 gridlu solve plate.h5 --out x.h5 --save-factors plate-lu.h5\n"
      "  mpiexec -n 4 gridlu solve plate.h5 --rhs-file loads2.h5 --factors plate-lu.h5 --out "
      "x2.h5\n"
      "  mpiexec -n 64 gridlu solve big.h5 --out x.h5 --checkpoint ckpt --checkpoint-every 30 "
      "--stop-after 710\n\n" +
      std::string(exit_codes_help));

  workflows::generate_options gen;
  auto* gen_cmd = app.add_subcommand("generate", "write a test system to an HDF5 file");
  gen_cmd->require_subcommand(1);
  auto* random_cmd = gen_cmd->add_subcommand(
      "random", "random A and B, entries uniform in [-1, 1), the same on any number of ranks");
  random_cmd->add_option("--n", gen.n, "number of unknowns")->required();
  random_cmd->add_option("--out", gen.output, "HDF5 file to write")->required();
  random_cmd->add_option("--rhs", gen.nrhs, "number of right-hand sides")->capture_default_str();
  random_cmd->add_option("--type", gen.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  random_cmd->add_option("--seed", gen.seed, "seed")->capture_default_str();
  random_cmd->add_flag("--force", gen.force, "replace the file if it exists");
  add_common(random_cmd, common);
  random_cmd->footer(
      "Example:\n  mpiexec -n 2 gridlu generate random --n 4000 --rhs 2 --out system.h5");

  resume_cli resume;
  auto* resume_cmd =
      app.add_subcommand("resume", "finish a checkpointed solve, on any number of ranks");
  resume_cmd->add_option("dir", resume.options.dir, "the solve's checkpoint directory")->required();
  resume_cmd->add_option(
      "--block", resume.options.block,
      "block size nb (default: the one the checkpoint was made with; any works)");
  add_lookahead(resume_cmd, resume.options.lookahead);
  resume_cmd->add_option("--out", resume.options.output,
                         "write X here instead of the recorded OUTPUT");
  resume_cmd->add_flag("--force", resume.options.force, "replace OUTPUT if it exists");
  resume_cmd
      ->add_option("--checkpoint-every", resume.options.checkpoint_every,
                   "minutes between checkpoints")
      ->check(CLI::NonNegativeNumber);
  resume_cmd->add_option("--stop-after", resume.options.stop_after, "time budget in minutes")
      ->check(CLI::NonNegativeNumber);
  resume_cmd->add_flag("--quiet", resume.quiet, "print nothing but errors");
  resume_cmd->add_flag("--progress", resume.progress,
                       "show progress even when stderr is not a terminal");
  add_common(resume_cmd, common);
  resume_cmd->footer("Example:\n  mpiexec -n 128 gridlu resume ckpt --stop-after 710\n\n" +
                     std::string(exit_codes_help));

  std::string info_path;
  auto* info_cmd = app.add_subcommand("info", "show what an HDF5 file holds");
  info_cmd->add_option("file", info_path, "any HDF5 file, or a checkpoint directory")->required();
  info_cmd->footer("Examples:\n  gridlu info charges.h5\n  gridlu info ckpt");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // Every rank parses the same arguments; only rank 0 speaks.
    if (rank == 0) app.exit(e);
    return e.get_exit_code() == 0 ? 0 : static_cast<int>(exit_code::usage);
  }

  try {
    if (*bench_cmd && !read_bench.path.empty()) {
      read_bench.block = bench.block;
      read_bench.repeat = bench.repeat;
      return run_read_bench(read_bench, common);
    }
    if (*bench_cmd) return run_bench(bench, common);
    if (*demo_cmd) return run_demo(demo, common);
    if (*solve_cmd) {
      so.checkpoint_every *= 60;
      so.stop_after *= 60;
      so.started = started;
      return run_solve(solve, common);
    }
    if (*gen_cmd) return run_generate(gen, common);
    if (*resume_cmd) {
      resume.options.checkpoint_every *= 60;
      resume.options.stop_after *= 60;
      resume.options.started = started;
      return run_resume(resume, common);
    }
    return run_info(info_path);
  } catch (const gridlu::error& e) {
    // Errors reaching here were agreed by all ranks (or raised by all alike).
    if (rank == 0) std::fprintf(stderr, "gridlu: error: %s\n", e.what());
    return static_cast<int>(e.code());
  } catch (const std::exception& e) {
    std::fprintf(stderr, "gridlu: error: internal failure on rank %d: %s\n", rank, e.what());
    MPI_Abort(MPI_COMM_WORLD, static_cast<int>(exit_code::internal));
  }
}
