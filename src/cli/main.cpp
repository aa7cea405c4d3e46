// The `gridlu` command: subcommands, options, what rank 0 prints, exit codes. The one
// place that maps the library's error kinds to process exit codes.
#include <sys/resource.h>
#include <unistd.h>

#include <CLI/CLI.hpp>
#include <complex>
#include <csignal>
#include <cstdio>
#include <cstdlib>
#include <exception>
#include <filesystem>
#include <fstream>
#include <functional>
#include <map>
#include <memory>
#include <new>
#include <nlohmann/json.hpp>
#include <numbers>
#include <sstream>

#include "gridlu/io.hpp"
#include "gridlu/version.hpp"
#include "io/staged.hpp"
#include "kernels/blas.hpp"
#include "workflows/calibrate.hpp"
#include "workflows/job.hpp"
#include "workflows/stop.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace {

using namespace gridlu;

int exit_code(error_kind kind) {
  switch (kind) {
    case error_kind::usage:
      return 2;
    case error_kind::input:
      return 3;
    case error_kind::numerical:
      return 4;
    case error_kind::stopped:
      return 5;
    case error_kind::output:
      return 6;
    case error_kind::internal:
      break;
  }
  return 1;
}
constexpr int stopped_code = 5;
// Not an error: X is there with its figures, but short of what --require-digits asks.
constexpr int short_of_digits_code = 7;

constexpr const char* exit_codes_help =
    "Exit codes: 0 solved, 1 internal error, 2 usage error, 3 input data error,\n"
    "            4 numerical failure (A exactly singular, or X not finite): no X written,\n"
    "            5 stopped early (with a checkpoint if asked),\n"
    "            6 output or resource failure (disk full, not writable, busy, out of memory),\n"
    "            7 X written but with fewer trusted digits than --require-digits asks.";

struct common_options {
  std::string grid;  // empty: the model's choice (make_grid)
  int blas_threads = 1;
  std::string report;
  bool quiet = false, progress = false;
  std::int64_t memory_per_rank = 0;  // solve and resume; the others keep it in their options
};

void add_common(CLI::App* cmd, common_options& o) {
  cmd->add_option("--grid", o.grid,
                  "process grid PxQ (default: the one the performance model predicts fastest "
                  "for the matrix, as gridlu plan shows; as square as possible, P <= Q, where "
                  "no matrix is factored)");
  cmd->add_option("--blas-threads", o.blas_threads,
                  "BLAS threads per rank (default 1: one rank per core)")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--report", o.report, "also write the figures as JSON to this file");
}

// --memory-per-rank SIZE, parsed into bytes.
void add_memory_limit(CLI::App* cmd, std::int64_t& bytes) {
  const CLI::Validator size(
      [](std::string& text) {
        try {
          workflows::parse_size(text);
          return std::string();
        } catch (const gridlu::error& e) {
          return std::string(e.what());
        }
      },
      "SIZE");
  cmd->add_option_function<std::string>(
         "--memory-per-rank",
         [&bytes](const std::string& text) { bytes = workflows::parse_size(text); },
         "memory each rank may use, e.g. 512M, 2G, 1.5GiB or bytes (K, M, G: powers of 1024; kB, "
         "MB, GB: of 1000); default: the node's available memory shared among its ranks, within "
         "the control group's and the process's limits. A run that would need more is refused "
         "before it starts (exit 6)")
      ->check(size);
}

// A block size: a whole number of at least 1 (at most N is checked once N is known).
const CLI::Validator positive_block(
    [](std::string& text) {
      const bool digits =
          !text.empty() && text.find_first_not_of("0123456789") == std::string::npos;
      if (digits && text.find_first_not_of('0') != std::string::npos) return std::string();
      return "the block size must be a whole number of at least 1, not " + text;
    },
    "NB");

// --block NB: a positive number, at most the order of the matrix.
void add_block(CLI::App* cmd, index_t& block) {
  cmd->add_option("--block", block,
                  "block size nb, 1 to N, and its panels must fit in memory (default " +
                      std::to_string(workflows::default_block) + ", or N if smaller)")
      ->check(positive_block);
}

void add_lookahead(CLI::App* cmd, int& depth) {
  cmd->add_option("--lookahead", depth,
                  "panels factored and sent ahead of the trailing update (0: none)")
      ->capture_default_str()
      ->check(CLI::NonNegativeNumber);
}

void add_require_digits(CLI::App* cmd, std::int64_t& digits) {
  cmd->add_option("--require-digits", digits,
                  "exit 7 when fewer significant digits of X can be trusted (X is still written)")
      ->check(CLI::Range(0, 20));
}

void add_precision(CLI::App* cmd, std::string& precision, const char* default_text) {
  cmd->add_option("--precision", precision,
                  std::string("double; mixed: factor a single-precision copy and refine X in "
                              "double (float64 and complex128; memory 1.5 times A); "
                              "mixed-krylov: the same with GMRES corrections, for worse "
                              "conditioned systems (default: ") +
                      default_text + ")")
      ->check(CLI::IsMember({"double", "mixed", "mixed-krylov"}));
}

void add_verbosity(CLI::App* cmd, common_options& o) {
  cmd->add_flag("--quiet", o.quiet, "print nothing but errors");
  cmd->add_flag("--progress", o.progress,
                "show factorization progress even when stderr is not a terminal");
}

// What the performance model needs to choose a grid: the matrix's order (0: not known)
// and type, the block and the look-ahead.
struct grid_hint {
  index_t n = 0;
  std::string type = "float64";
  index_t block = 0;
  int lookahead = workflows::default_lookahead;
};

// The grid of a run: --grid, or the one the model predicts fastest for the matrix; the
// squarest one (P <= Q) when the order is not known.
process_grid make_grid(const common_options& o, const grid_hint& h = {}) {
  blas::set_threads(o.blas_threads);
  const int ranks = comm::world_size();
  grid_shape shape = square_grid_shape(ranks);
  if (!o.grid.empty())
    shape = parse_grid_shape(o.grid);
  else if (h.n > 0 && h.n <= workflows::model_order_limit)  // above: the memory check refuses
    shape = workflows::model_grid(ranks, h.n, h.type,
                                  workflows::block_for(h.block, h.n, workflows::default_block),
                                  h.lookahead);
  return process_grid(MPI_COMM_WORLD, shape);
}

// Rank 0's reading of what `read` finds, on every rank; none where it finds nothing or
// fails (the command then says why, as it would have).
grid_hint hint_from_rank0(const std::function<grid_hint()>& read) {
  std::string text;
  if (comm::world_rank() == 0) try {
      const grid_hint h = read();
      if (h.n > 0)
        text = std::to_string(h.n) + " " + h.type + " " + std::to_string(h.block) + " " +
               std::to_string(h.lookahead);
    } catch (const std::exception&) {
    }
  const process_grid world(MPI_COMM_WORLD, {1, comm::world_size()});
  comm::broadcast(world.all(), text, 0);
  grid_hint h;
  std::istringstream(text) >> h.n >> h.type >> h.block >> h.lookahead;
  return h;
}

grid_hint hint_of_file(const workflows::solve_options& o) {
  return hint_from_rank0([&] {
    for (const auto& d : io::describe(o.input).datasets)
      if (d.path == "/" + o.matrix_dataset && d.shape.usable && d.shape.dims.size() == 2)
        return grid_hint{d.shape.dims[0], d.shape.type, o.block, o.lookahead};
    return grid_hint{};
  });
}

grid_hint hint_of_job(const workflows::resume_options& o) {
  return hint_from_rank0([&] {
    std::ifstream in(std::filesystem::path(o.dir) / "job.json");
    const std::string text((std::istreambuf_iterator<char>(in)), {});
    const auto j = workflows::job_from_json(text, o.dir);
    return grid_hint{j.n, j.type, o.block > 0 ? o.block : j.block,
                     o.lookahead >= 0 ? o.lookahead : static_cast<int>(j.lookahead)};
  });
}

// The report: the result's own figures, the grid and the versions of everything that
// ran. Staged like every output; replaced only if the run may replace outputs.
void write_report(const process_grid& g, const std::string& path, nlohmann::json j,
                  io::existing policy = io::existing::replace) {
  if (path.empty() || g.rank() != 0) return;
  rusage usage{};
  getrusage(RUSAGE_SELF, &usage);
  j.update({{"grid", {g.prows(), g.pcols()}},
            {"ranks", g.size()},
            {"peak_resident_bytes_rank0", 1024.0 * static_cast<double>(usage.ru_maxrss)},
            {"version", gridlu::version},
            {"versions",
             {{"gridlu", gridlu::version},
              {"mpi", comm::library_version()},
              {"blas", blas::library_version()},
              {"hdf5", io::library_version()}}}});
  io::write_whole_file(path, j.dump(2) + "\n", policy);
}

void print_phases(const lu_phases& p, const char* whose = "slowest rank") {
  std::printf(
      "  phases (s, %s): panel %.3f (pivot search %.3f) | interchanges %.3f |"
      " broadcasts %.3f | trsm %.3f | gemm %.3f | waiting for panels %.3f\n",
      whose, p.panel, p.pivot_search, p.interchange, p.broadcast, p.trsm, p.gemm, p.wait);
}

// Progress of the factorization on stderr, from rank 0, at most once a second; on a
// terminal one line rewritten in place.
workflows::progress_callback progress_printer() {
  const bool terminal = isatty(fileno(stderr));
  auto last = std::make_shared<double>(-1.0);
  return [=](double fraction, double seconds, double gflops, double left) {
    const bool done = fraction >= 1.0;
    if (!done && seconds - *last < 1.0) return;
    *last = seconds;
    std::fprintf(stderr,
                 "%sfactorization %5.1f %%  elapsed %6.0f s  left ~%6.0f s  %7.2f GFLOP/s%s",
                 terminal ? "\r" : "", 100.0 * fraction, seconds, left, gflops,
                 terminal && !done ? "" : "\n");
    std::fflush(stderr);
  };
}

// What a run of a solve job needs from the command line: where to report, what to say.
workflows::run_settings run_settings_for(const process_grid& grid, const common_options& c,
                                         double started) {
  workflows::run_settings run;
  run.started = started;
  run.report = c.report;
  run.memory_per_rank = c.memory_per_rank;
  const bool speaks = grid.rank() == 0 && !c.quiet;
  if (speaks && (c.progress || isatty(fileno(stderr)))) run.progress = progress_printer();
  if (grid.rank() == 0)
    run.notice = [](const std::string& text) {
      std::printf("gridlu: %s\n", text.c_str());
      std::fflush(stdout);
    };
  return run;
}

// The launcher this rank was started by, where it can be told: the parent process's
// name, then the environment a Slurm step sets.
std::string launcher_prefix(int ranks) {
  std::ifstream comm_file("/proc/" + std::to_string(getppid()) + "/comm");
  std::string parent;
  std::getline(comm_file, parent);
  if (parent == "slurmstepd") return "srun ";
  if (parent == "mpiexec" || parent == "mpirun" || parent == "orterun" || parent == "orted" ||
      parent == "prterun" || parent == "hydra_pmi_proxy")
    return "mpiexec -n " + std::to_string(ranks) + " ";
  if (std::getenv("SLURM_STEP_ID")) return "srun ";
  return ranks > 1 ? "mpiexec -n " + std::to_string(ranks) + " " : "";
}

// The command that continues a stopped solve: this program, that directory.
std::string resume_command(const process_grid& grid, const std::string& dir) {
  std::error_code ec;
  auto self = std::filesystem::read_symlink("/proc/self/exe", ec).string();
  if (ec) self = "gridlu";
  return launcher_prefix(grid.size()) + self + " resume " + dir;
}

void print_stopped(const process_grid& grid, const workflows::solve_result& r) {
  const auto& j = r.what;
  std::printf("gridlu: stopped after column %lld of %lld with a checkpoint in %s\n",
              static_cast<long long>(r.columns_done), static_cast<long long>(j.n),
              j.checkpoint_dir.c_str());
  // Resumed with the same budget, such a run would again end after about one step.
  if (r.budget_too_short)
    std::printf(
        "gridlu: the time budget ran out at the first block step (reading %.1f s, checkpoint "
        "write %.1f s, %.1f s in all): --stop-after must allow more than that to make headway\n",
        r.read_seconds, r.write_seconds, r.total_seconds);
  std::printf("resume with: %s\n", resume_command(grid, j.checkpoint_dir).c_str());
}

// What mixed precision did, when it was asked for.
void print_precision(const workflows::precision_outcome& p, double u) {
  if (p.asked == "double") return;
  if (p.used == "double") {
    std::printf("  precision  %s gave way to a double factorization: %s", p.asked.c_str(),
                p.fallback.c_str());
    if (p.single_factor_seconds > 0)
      std::printf(" (the single-precision factorization took %.2f s)", p.single_factor_seconds);
    std::printf("\n");
    return;
  }
  const auto& m = *p.mixed;
  int inner = 0;
  for (const int k : m.inner_iterations) inner += k;
  std::printf(
      "  precision  %s: single-precision factors, %d correction(s)%s; normwise backward "
      "error %.3g u -> %.3g u\n",
      p.asked.c_str(), m.iterations,
      p.asked == "mixed-krylov" ? (" (" + std::to_string(inner) + " GMRES steps)").c_str() : "",
      m.normwise_backward_errors.front() / u, m.normwise_backward_errors.back() / u);
}

// The trust figures, the same words for every command that solves.
void print_trust(const trust_report& t, const std::optional<refinement>& refined) {
  const double u = t.unit_roundoff;
  const auto count = t.backward.normwise.size();
  std::printf("  accuracy   backward error%s: normwise %.2f u, componentwise %.2f u (u = %.1e)\n",
              count > 1 ? (", worst of " + std::to_string(count)).c_str() : "",
              t.worst_normwise() / u, t.worst_componentwise() / u, u);
  std::printf("  condition  ~%.1e (1-norm estimate); growth %.3g; smallest pivot %.1e of max|A|\n",
              t.condition_1, t.growth, t.smallest_pivot);
  if (refined)
    std::printf("  refined    %d iteration(s): componentwise backward error %.2f u -> %.2f u\n",
                refined->iterations, refined->componentwise.front() / u,
                refined->componentwise.back() / u);
  const double bound = t.worst_forward_bound();
  const char* where = count > 1 ? "every column of X" : "X";
  if (t.trusted_digits > 0)
    std::printf("  trust      about %d significant digits in %s (relative error <= %.1e)\n",
                t.trusted_digits, where, bound);
  else if (std::isfinite(bound))
    std::printf("  trust      no digit of %s is certain (relative error bound %.1e)\n", where,
                bound);
  else
    std::printf("  trust      no digit of %s is certain (condition x backward error >= 1)\n",
                where);
  if (t.entry_error > t.unit_roundoff)
    std::printf("  entries    accurate to %.1e (relative), which the bound above includes\n",
                t.entry_error);
  for (std::size_t k = 0; k < t.flags.size(); ++k)
    std::printf("  flag       %s: %s\n", t.flags[k].c_str(), t.reasons[k].c_str());
}

void print_solved(const process_grid& grid, const workflows::solve_result& r) {
  const auto& j = r.what;
  std::printf("gridlu solve  %s -> %s\n", j.input.c_str(), j.output.c_str());
  std::printf("  system     %s X = B, n = %lld, %lld right-hand side(s), %s\n",
              j.solve_with.c_str(), static_cast<long long>(j.n), static_cast<long long>(j.nrhs),
              j.type.c_str());
  std::printf("  grid       %dx%d on %d rank(s), block %lld\n", grid.prows(), grid.pcols(),
              grid.size(), static_cast<long long>(j.block));
  std::printf(
      "  time       read %.2f s | %s %.2f s | solve %.2f s | check %.2f s | write %.2f s"
      " | total %.2f s\n",
      r.read_seconds, r.refactored ? "factor" : "factor (saved)", r.factor_seconds, r.solve_seconds,
      r.check_seconds, r.write_seconds, r.total_seconds);
  if (r.refactored) std::printf("  speed      %.2f GFLOP/s in the factorization\n", r.gflops);
  if (!j.checkpoint_dir.empty())
    std::printf(
        "  checkpoint %s: %lld written, %lld restart(s), %.1f s of factorization in all runs%s\n",
        j.checkpoint_dir.c_str(), static_cast<long long>(r.checkpoints),
        static_cast<long long>(r.restarts), r.factor_seconds_total,
        r.state_removed ? "; working state removed, X is written" : "");
  print_precision(r.precision, r.trust.unit_roundoff);
  print_trust(r.trust, r.refined);
}

// Exit 7, said on one line, when X has fewer trusted digits than asked (0: nothing asked).
int digits_code(const process_grid& grid, const trust_report& t, std::int64_t required) {
  if (t.trusted_digits >= required) return 0;
  if (grid.rank() == 0)
    std::fprintf(stderr,
                 "gridlu: X has %d trusted digit(s), fewer than the %lld --require-digits asks "
                 "(this type carries at most %d); X is written\n",
                 t.trusted_digits, static_cast<long long>(required), type_digits(t.unit_roundoff));
  return short_of_digits_code;
}

// What rank 0 says after a solve or a resume, and the exit code.
int report_solve(const process_grid& grid, const workflows::solve_result& r,
                 const common_options& c) {
  const int code = r.stopped            ? stopped_code
                   : r.already_complete ? 0
                                        : digits_code(grid, r.trust, r.what.require_digits);
  if (grid.rank() != 0) return code;
  if (r.already_complete) {
    std::printf("gridlu: the job in %s is complete; its X is in %s (nothing to do)\n",
                r.what.checkpoint_dir.c_str(), r.what.output.c_str());
    return 0;
  }
  if (r.stopped)
    print_stopped(grid, r);
  else if (!c.quiet)
    print_solved(grid, r);
  std::fflush(stdout);
  write_report(grid, c.report, r.json(),
               r.what.force ? io::existing::replace : io::existing::refuse);
  return code;
}

int run_read_bench(const common_options& c, const workflows::read_bench_options& o) {
  const auto grid = make_grid(c);
  const auto r = workflows::bench_read(grid, o);
  if (grid.rank() != 0) return 0;
  std::printf("gridlu bench --read: %s:%s (%.2f GB) into a %dx%d grid, block %lld\n",
              o.path.c_str(), o.dataset.c_str(), r.bytes * 1e-9, grid.prows(), grid.pcols(),
              static_cast<long long>(r.block));
  for (const double t : r.seconds)
    std::printf("  read %8.3f s   %6.2f GB/s\n", t, r.bytes / t * 1e-9);
  std::printf("  median %6.3f s   %6.2f GB/s\n", r.median, r.bytes / r.median * 1e-9);
  write_report(grid, c.report, r.json(o));
  return 0;
}

double unit_roundoff_of(const std::string& type) {
  double u = 0;
  dispatch_scalar(type, [&]<class T>(T) { u = unit_roundoff<T>(); });
  return u;
}

// A mixed-precision bench: the time to a refined X and what the refinement did.
void print_mixed_bench(const process_grid& grid, const workflows::bench_options& o,
                       const workflows::bench_result& r) {
  std::printf(
      "gridlu bench: %s solve of a random %s system, n = %lld, one right-hand side, block %lld, "
      "grid %dx%d\n",
      o.precision.c_str(), o.type.c_str(), static_cast<long long>(o.n),
      static_cast<long long>(r.block), grid.prows(), grid.pcols());
  std::printf(
      "  time to X     %10.3f s   (median of %zu: single-precision copy, factors, "
      "refinement)\n",
      r.solve_median, r.solve_seconds.size());
  std::printf("  GEMM rate     %10.2f GFLOP/s in single precision, %.2f in double (ratio %.2f)\n",
              r.narrow_gemm_gflops, r.gemm_gflops, r.narrow_gemm_gflops / r.gemm_gflops);
  const double u = unit_roundoff_of(o.type);
  print_precision(r.precision, u);
  if (r.precision.fallback.empty())
    std::printf("  accuracy      normwise backward error %.2f u\n", r.normwise_backward_error / u);
}

int run_bench(const common_options& c, const workflows::bench_options& o) {
  const auto grid = make_grid(c, {o.n, o.type, o.block, o.lookahead});
  const auto r = workflows::bench(grid, o);
  if (grid.rank() != 0) return 0;
  if (workflows::is_mixed(o.precision)) {
    print_mixed_bench(grid, o, r);
    write_report(grid, c.report, r.json(o));
    return 0;
  }
  std::printf(
      "gridlu bench: LU of a random %s matrix, n = %lld, block %lld, look-ahead %d, grid %dx%d\n",
      o.type.c_str(), static_cast<long long>(o.n), static_cast<long long>(r.block), o.lookahead,
      grid.prows(), grid.pcols());
  std::printf("  factor time   %10.3f s   (median of %zu)\n", r.factor_median,
              r.factor_seconds.size());
  std::printf("  factor rate   %10.2f GFLOP/s\n", r.gflops);
  std::printf("  GEMM rate     %10.2f GFLOP/s   (order %lld on all %d ranks at once)\n",
              r.gemm_gflops, static_cast<long long>(r.gemm_order), grid.size());
  std::printf("  LU / GEMM     %10.3f\n", r.gflops / r.gemm_gflops);
  std::printf(
      "  time to X     %10.3f s   (median: factors and a solve with one right-hand side; "
      "normwise backward error %.2f u)\n",
      r.solve_median, r.normwise_backward_error / unit_roundoff_of(o.type));
  print_phases(r.phases);
  write_report(grid, c.report, r.json(o));
  return 0;
}

int run_demo(const common_options& c, const workflows::demo_options& o, std::int64_t digits) {
  const auto grid = make_grid(c, {o.n, o.type, o.block, o.lookahead});
  const auto r = workflows::demo(grid, o);
  const int code = digits_code(grid, r.trust, digits);
  if (grid.rank() != 0) return code;
  std::printf("gridlu demo: random %s system, n = %lld, %lld right-hand side(s)\n", o.type.c_str(),
              static_cast<long long>(o.n), static_cast<long long>(o.nrhs));
  std::printf("  grid %dx%d on %d rank(s), block %lld\n", grid.prows(), grid.pcols(), grid.size(),
              static_cast<long long>(r.block));
  std::printf("  generate  %9.3f s\n  factor    %9.3f s   %.2f GFLOP/s\n", r.generate_seconds,
              r.factor_seconds, r.gflops);
  std::printf("  solve     %9.3f s\n  check     %9.3f s\n", r.solve_seconds, r.check_seconds);
  print_precision(r.precision, r.trust.unit_roundoff);
  print_trust(r.trust, std::nullopt);
  std::fflush(stdout);
  write_report(grid, c.report, r.json(o));
  return code;
}

// The known answer of a conductor problem, and where it comes from.
void print_conductor_answer(const workflows::conductor_options& o,
                            const workflows::conductor_result& r) {
  const double off = std::abs(r.computed - r.expected) / std::abs(r.expected);
  if (o.problem == "sphere-helmholtz") {
    std::printf(
        "  answer     mean density %.6g%+.6gi against k / (exp(ikR) sin kR) = %.6g%+.6gi: "
        "off by %.2f %%\n",
        r.computed.real(), r.computed.imag(), r.expected.real(), r.expected.imag(), 100 * off);
    std::printf(
        "             kR = %.4g; the interior resonances sin kR = 0 lie at kR = %.4g, %.4g, ...\n",
        o.wavenumber * o.size, std::numbers::pi, 2 * std::numbers::pi);
    return;
  }
  const char* source = o.problem == "cube" ? "4 pi a x 0.66067813 (Hwang & Mascagni 2004)"
                                           : "4 pi R (textbook electrostatics)";
  std::printf("  answer     capacitance %.8g against %s = %.8g: %+.2f %%\n", r.computed.real(),
              source, r.expected.real(), 100 * (r.computed.real() / r.expected.real() - 1));
}

int run_conductor_demo(const common_options& c, const workflows::conductor_options& o,
                       std::int64_t digits) {
  const auto problem = workflows::conductor_problem(o);
  const std::string type = !o.type.empty()        ? o.type
                           : problem.is_complex() ? "complex128"
                                                  : "float64";
  const auto grid = make_grid(c, {problem.size(), type, o.block, o.lookahead});
  const auto r = workflows::conductor_demo(grid, o);
  const int code = digits_code(grid, r.trust, digits);
  if (grid.rank() != 0) return code;
  std::printf("gridlu demo: a conductor held at potential 1 (eps0 = 1), %s\n", r.surface.c_str());
  std::printf("  system     %s, collocation at the panel centroids, %s, n = %lld\n",
              r.kernel.c_str(), r.type.c_str(), static_cast<long long>(r.n));
  std::printf("  grid       %dx%d on %d rank(s), block %lld\n", grid.prows(), grid.pcols(),
              grid.size(), static_cast<long long>(r.block));
  std::printf("  time       assemble %.2f s | factor %.2f s | solve %.2f s | check %.2f s\n",
              r.assemble_seconds, r.factor_seconds, r.solve_seconds, r.check_seconds);
  std::printf("  speed      %.2f GFLOP/s in the factorization\n", r.gflops);
  if (r.corrections >= 0)
    std::printf("  precision  %s: single-precision factors, %d correction(s)\n",
                o.precision.c_str(), r.corrections);
  print_conductor_answer(o, r);
  print_trust(r.trust, std::nullopt);
  std::printf(
      "  note       these figures judge the linear solve; the gap to the known value is the "
      "discretisation's\n");
  std::fflush(stdout);
  write_report(grid, c.report, r.json(o));
  return code;
}

// Each subcommand: its options, bound to values that live as long as the program, and
// what runs when it is chosen.
struct subcommand {
  CLI::App* app;
  std::function<int()> run;
};

subcommand add_bench(CLI::App& app, double) {
  auto c = std::make_shared<common_options>();
  auto o = std::make_shared<workflows::bench_options>();
  auto read = std::make_shared<workflows::read_bench_options>();
  auto* cmd = app.add_subcommand(
      "bench",
      "time the LU of a generated matrix in memory against the GEMM rate of the same ranks");
  cmd->add_option("--n", o->n, "order of the matrix")->capture_default_str();
  add_block(cmd, o->block);
  add_lookahead(cmd, o->lookahead);
  cmd->add_option("--type", o->type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  cmd->add_option("--seed", o->seed, "seed of the generated matrix")->capture_default_str();
  cmd->add_option("--repeat", o->repeat, "factorizations to time (median is reported)")
      ->capture_default_str();
  add_precision(cmd, o->precision, "double");
  add_memory_limit(cmd, o->memory_per_rank);
  cmd->add_option("--read", read->path,
                  "instead: time reading a dataset of this HDF5 file into the grid");
  cmd->add_option("--dataset", read->dataset, "with --read: the dataset")->capture_default_str();
  cmd->add_flag("--column-major", read->column_major,
                "with --read: the dataset holds the transpose");
  add_common(cmd, *c);
  cmd->footer(
      "Examples:\n  mpiexec -n 2 gridlu bench --n 8192 --grid 1x2 --repeat 3\n"
      "  mpiexec -n 2 gridlu bench --read system.h5 --repeat 3");
  return {cmd, [=] {
            if (read->path.empty()) return run_bench(*c, *o);
            read->block = o->block;
            read->repeat = o->repeat;
            read->memory_per_rank = o->memory_per_rank;
            return run_read_bench(*c, *read);
          }};
}

// The mesh and kernel options of the conductor problems (`which`: the problem, or "" for
// all of them, as demo takes them before it knows its problem).
void add_conductor_options(CLI::App* cmd, workflows::conductor_options& o,
                           const std::string& which) {
  if (which != "cube") {
    cmd->add_option("--subdivisions", o.subdivisions,
                    "sphere: times the icosahedron's triangles are split in four (20 x 4^S "
                    "panels)")
        ->capture_default_str();
    cmd->add_option("--radius", o.size, "sphere: its radius")->capture_default_str();
  }
  if (which.empty() || which == "cube") {
    cmd->add_option("--divisions", o.divisions, "cube: squares along each edge (12 x M^2 panels)")
        ->capture_default_str();
    cmd->add_option("--side", o.size, "cube: its side")->capture_default_str();
  }
  if (which.empty() || which == "sphere-helmholtz")
    cmd->add_option("--wavenumber", o.wavenumber, "sphere-helmholtz: k of exp(ikr) / (4 pi r)")
        ->capture_default_str();
}

// Options demo takes that its problem does not use.
void refuse_foreign_options(const CLI::App* cmd, const std::string& problem) {
  const std::pair<const char*, bool> used[] = {{"--n", problem == "random"},
                                               {"--rhs", problem == "random"},
                                               {"--seed", problem == "random"},
                                               {"--subdivisions", problem.starts_with("sphere")},
                                               {"--radius", problem.starts_with("sphere")},
                                               {"--divisions", problem == "cube"},
                                               {"--side", problem == "cube"},
                                               {"--wavenumber", problem == "sphere-helmholtz"}};
  for (const auto& [name, fits] : used)
    if (!fits && cmd->count(name) > 0)
      throw error(error_kind::usage,
                  std::string(name) + " does not apply to the " + problem + " problem");
}

subcommand add_demo(CLI::App& app, double) {
  auto c = std::make_shared<common_options>();
  auto o = std::make_shared<workflows::demo_options>();
  auto conductor = std::make_shared<workflows::conductor_options>();
  auto problem = std::make_shared<std::string>("sphere");
  auto type = std::make_shared<std::string>();
  auto* cmd = app.add_subcommand(
      "demo",
      "solve a built-in problem in memory: a charged conductor whose answer is known, or a "
      "random system, and say how far the answer can be trusted");
  cmd->add_option("problem", *problem, "sphere, cube, sphere-helmholtz or random")
      ->check(CLI::IsMember({"sphere", "cube", "sphere-helmholtz", "random"}))
      ->capture_default_str();
  add_conductor_options(cmd, *conductor, "");
  cmd->add_option("--n", o->n, "random: number of unknowns")->capture_default_str();
  cmd->add_option("--rhs", o->nrhs, "random: number of right-hand sides")->capture_default_str();
  cmd->add_option("--seed", o->seed, "random: seed of the generated system")->capture_default_str();
  add_block(cmd, o->block);
  add_lookahead(cmd, o->lookahead);
  cmd->add_option("--type", *type,
                  "float32, float64, complex64 or complex128 (default: float64, complex128 for "
                  "sphere-helmholtz)");
  add_precision(cmd, o->precision, "double");
  add_memory_limit(cmd, o->memory_per_rank);
  auto digits = std::make_shared<std::int64_t>(0);
  add_require_digits(cmd, *digits);
  add_common(cmd, *c);
  cmd->footer(
      "Examples:\n  mpiexec -n 2 gridlu demo\n  mpiexec -n 2 gridlu demo cube --divisions 20\n"
      "  mpiexec -n 2 gridlu demo sphere-helmholtz --subdivisions 3 --wavenumber 3.1\n"
      "  mpiexec -n 2 gridlu demo random --n 3000 --rhs 4\n\n" +
      std::string(exit_codes_help));
  return {cmd, [=] {
            refuse_foreign_options(cmd, *problem);
            if (*problem == "random") {
              if (!type->empty()) o->type = *type;
              return run_demo(*c, *o, *digits);
            }
            conductor->problem = *problem;
            conductor->type = *type;
            conductor->block = o->block;
            conductor->lookahead = o->lookahead;
            conductor->precision = o->precision;
            conductor->memory_per_rank = o->memory_per_rank;
            return run_conductor_demo(*c, *conductor, *digits);
          }};
}

subcommand add_solve(CLI::App& app, double started) {
  auto c = std::make_shared<common_options>();
  auto o = std::make_shared<workflows::solve_options>();
  auto* cmd = app.add_subcommand("solve", "solve A X = B read from an HDF5 file, write X");
  cmd->add_option("input", o->input, "HDF5 file with A (and B)")->required();
  cmd->add_option("--out", o->output, "HDF5 file to write X to")->required();
  cmd->add_option("--matrix-dataset", o->matrix_dataset, "name of A in INPUT")
      ->capture_default_str();
  cmd->add_option("--rhs-dataset", o->rhs_dataset, "name of B")->capture_default_str();
  cmd->add_option("--rhs-file", o->rhs_file, "read B from this file instead of INPUT");
  add_block(cmd, o->block);
  add_lookahead(cmd, o->lookahead);
  cmd->add_flag("--column-major", o->column_major,
                "A's dataset holds the transpose (element [i][j] is A(j, i)), as column-major "
                "writers store it");
  auto* transpose = cmd->add_flag_callback(
      "--transpose", [=] { o->solve_with = "A^T"; }, "solve A^T X = B (with A's factors)");
  cmd->add_flag_callback(
         "--adjoint", [=] { o->solve_with = "A^H"; },
         "solve A^H X = B, A^H the conjugate transpose (A^T for real A)")
      ->excludes(transpose);
  cmd->add_flag("--refine", o->refine,
                "refine X iteratively in the working precision (keeps a second copy of A)");
  add_precision(cmd, o->precision, "double");
  add_memory_limit(cmd, c->memory_per_rank);
  add_require_digits(cmd, o->require_digits);
  cmd->add_option("--entry-error", o->entry_error,
                  "relative accuracy of A's entries (quadrature, measurement), which the trust "
                  "figures then include (default: A's file's `entry_error` attribute, else 0)")
      ->check(CLI::NonNegativeNumber);
  cmd->add_option("--save-factors", o->save_factors, "also write the LU factors to this file");
  cmd->add_option("--factors", o->factors, "solve with factors saved earlier instead of factoring");
  cmd->add_flag("--force", o->force,
                "replace existing outputs (OUTPUT, --save-factors, --report), and discard "
                "another job's checkpoint in the --checkpoint directory; never an input");
  add_verbosity(cmd, *c);
  cmd->add_option("--checkpoint", o->checkpoint_dir,
                  "keep checkpoints in this directory (locked while the run lasts); SIGTERM, "
                  "SIGUSR1 and SIGINT reaching the ranks then stop with a checkpoint (exit 5): "
                  "plain mpiexec kills the ranks 1 s after its own SIGINT or SIGTERM, "
                  "tools/launch passes them on as SIGUSR1 (README, Signals)");
  cmd->add_option("--checkpoint-every", o->checkpoint_every, "minutes between checkpoints")
      ->check(CLI::NonNegativeNumber);
  cmd->add_option("--stop-after", o->stop_after,
                  "time budget in minutes: stop with a checkpoint early enough to end inside it")
      ->check(CLI::NonNegativeNumber);
  add_common(cmd, *c);
  cmd->footer(
      "Examples:\n"
      "  mpiexec -n 4 gridlu solve sphere.h5 --out charges.h5\n"
      "  mpiexec -n 4 gridlu solve sphere.h5 --out x.h5 --save-factors sphere-lu.h5\n"
      "  mpiexec -n 4 gridlu solve body.h5 --out x.h5 --precision mixed\n"
      "  mpiexec -n 4 gridlu solve sphere.h5 --rhs-file loads2.h5 --factors sphere-lu.h5 --out "
      "x2.h5\n"
      "  mpiexec -n 64 gridlu solve big.h5 --out x.h5 --checkpoint ckpt --checkpoint-every 30 "
      "--stop-after 710\n\n" +
      std::string(exit_codes_help));
  return {cmd, [=] {
            const auto grid = make_grid(*c, c->grid.empty() ? hint_of_file(*o) : grid_hint{});
            auto options = *o;
            options.checkpoint_every *= 60;
            options.stop_after *= 60;
            options.report = c->report;
            auto run = run_settings_for(grid, *c, started);
            run.stop_after = options.stop_after;
            return report_solve(grid, workflows::solve_file(grid, options, run), *c);
          }};
}

subcommand add_resume(CLI::App& app, double started) {
  auto c = std::make_shared<common_options>();
  auto o = std::make_shared<workflows::resume_options>();
  auto stop_after = std::make_shared<double>(0);
  auto every = std::make_shared<double>(-1);
  auto* cmd = app.add_subcommand(
      "resume", "continue (or finish) a checkpointed solve, on any number of ranks");
  cmd->add_option("dir", o->dir, "the solve's checkpoint directory")->required();
  cmd->add_option("--block", o->block,
                  "block size nb, 1 to N (default: the one the job was started with; any works)")
      ->check(positive_block);
  cmd->add_option("--lookahead", o->lookahead,
                  "panels factored ahead of the trailing update (default: the job's)")
      ->check(CLI::NonNegativeNumber);
  cmd->add_option("--out", o->output, "write X here instead of the job's OUTPUT");
  cmd->add_flag("--force", o->force, "replace existing outputs even if the job did not ask to");
  cmd->add_option("--checkpoint-every", *every, "minutes between checkpoints (default: the job's)")
      ->check(CLI::NonNegativeNumber);
  cmd->add_option("--stop-after", *stop_after, "time budget in minutes")
      ->check(CLI::NonNegativeNumber);
  add_precision(cmd, o->precision, "the job's");
  add_memory_limit(cmd, c->memory_per_rank);
  add_require_digits(cmd, o->require_digits);
  add_verbosity(cmd, *c);
  add_common(cmd, *c);
  cmd->footer(
      "The job (inputs, outputs, options, --force included) is recorded in DIR: resume needs\n"
      "none of the first run's options.\n\n"
      "Example:\n  mpiexec -n 128 gridlu resume ckpt --stop-after 710\n\n" +
      std::string(exit_codes_help));
  return {cmd, [=] {
            const auto grid = make_grid(*c, c->grid.empty() ? hint_of_job(*o) : grid_hint{});
            auto options = *o;
            options.checkpoint_every = *every < 0 ? -1 : *every * 60;
            auto run = run_settings_for(grid, *c, started);
            run.stop_after = *stop_after * 60;
            return report_solve(grid, workflows::resume_dir(grid, options, run), *c);
          }};
}

// A subcommand of `generate`: the options every kind takes.
CLI::App* add_generate_kind(CLI::App* generate, const std::string& name, const std::string& what,
                            workflows::generate_options& o, common_options& c) {
  auto* cmd = generate->add_subcommand(name, what);
  cmd->add_option("--n", o.n, "number of unknowns")->required();
  cmd->add_option("--out", o.output, "HDF5 file to write")->required();
  cmd->add_option("--type", o.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  cmd->add_flag("--force", o.force, "replace the file if it exists");
  add_memory_limit(cmd, o.memory_per_rank);
  add_common(cmd, c);
  return cmd;
}

void print_generated(const workflows::generate_options& o) {
  const auto n = static_cast<long long>(o.n);
  if (o.kind)
    std::printf("gridlu generate: %s %s system, n = %lld, B = A times ones -> %s\n",
                std::string(name_of(*o.kind)).c_str(), o.type.c_str(), n, o.output.c_str());
  else
    std::printf(
        "gridlu generate: random %s system, n = %lld, %lld right-hand side(s), seed %llu -> %s\n",
        o.type.c_str(), n, static_cast<long long>(o.nrhs), static_cast<unsigned long long>(o.seed),
        o.output.c_str());
}

void print_generated_conductor(const workflows::conductor_options& o) {
  const auto p = workflows::conductor_problem(o);
  std::printf("gridlu generate: %s, %s -> %s\n", o.problem.c_str(), p.mesh.name().c_str(),
              o.output.c_str());
}

// generate sphere, cube and sphere-helmholtz: one set of options, the problem named by
// the subcommand chosen.
std::shared_ptr<workflows::conductor_options> add_generate_conductors(CLI::App* generate,
                                                                      common_options& c) {
  auto o = std::make_shared<workflows::conductor_options>();
  o->problem.clear();
  const std::pair<const char*, const char*> kinds[] = {
      {"sphere", "a charged sphere (Laplace single layer): capacitance 4 pi R"},
      {"cube", "a charged cube (Laplace single layer): capacitance 4 pi a x 0.66067813"},
      {"sphere-helmholtz",
       "a sphere at unit boundary data, Helmholtz single layer: complex, density "
       "k / (exp(ikR) sin kR)"}};
  for (const auto& [name, what] : kinds) {
    auto* cmd = generate->add_subcommand(name, what);
    add_conductor_options(cmd, *o, name);
    cmd->add_option("--out", o->output, "HDF5 file to write")->required();
    cmd->add_option("--type", o->type,
                    "float32, float64, complex64 or complex128 (default: float64, complex128 "
                    "for sphere-helmholtz)");
    cmd->add_flag("--force", o->force, "replace the file if it exists");
    add_memory_limit(cmd, o->memory_per_rank);
    add_common(cmd, c);
    cmd->parse_complete_callback([o, name = std::string(name)] { o->problem = name; });
    cmd->footer(
        "Writes A, B (all ones: potential 1 on the surface), `areas` and `centroids` of the "
        "panels; X is the charge density per panel, and sum(X * areas) the total charge.");
  }
  return o;
}

subcommand add_generate(CLI::App& app, double) {
  auto c = std::make_shared<common_options>();
  auto o = std::make_shared<workflows::generate_options>();
  auto* cmd = app.add_subcommand("generate", "write a test system to an HDF5 file");
  cmd->require_subcommand(1);
  auto* random = add_generate_kind(
      cmd, "random", "random A and B, entries uniform in [-1, 1), the same on any number of ranks",
      *o, *c);
  random->add_option("--rhs", o->nrhs, "number of right-hand sides")->capture_default_str();
  random->add_option("--seed", o->seed, "seed")->capture_default_str();
  const std::pair<classical, const char*> kinds[] = {
      {classical::wilkinson, "Wilkinson's matrix: growth 2^(n-1) under partial pivoting"},
      {classical::hilbert, "the Hilbert matrix 1/(i+j+1): very ill-conditioned, known determinant"},
      {classical::frank, "Frank's upper Hessenberg matrix: determinant 1"},
      {classical::second_difference, "tridiagonal 2 and -1: determinant n+1, known inverse"}};
  for (const auto& [kind, what] : kinds)
    add_generate_kind(cmd, std::string(name_of(kind)), what, *o, *c)
        ->parse_complete_callback([o, kind = kind] { o->kind = kind; })
        ->footer("B is A times a vector of ones: the exact solution is all ones.");
  auto conductor = add_generate_conductors(cmd, *c);
  cmd->footer(
      "Examples:\n  mpiexec -n 2 gridlu generate random --n 4000 --rhs 2 --out system.h5\n"
      "  mpiexec -n 2 gridlu generate wilkinson --n 40 --out wilkinson.h5\n"
      "  mpiexec -n 2 gridlu generate sphere --subdivisions 4 --out sphere.h5");
  return {cmd, [=] {
            const auto grid = make_grid(*c);
            if (workflows::is_conductor(conductor->problem)) {
              workflows::generate_conductor_file(grid, *conductor);
              if (grid.rank() == 0) print_generated_conductor(*conductor);
              return 0;
            }
            workflows::generate_file(grid, *o);
            if (grid.rank() == 0) print_generated(*o);
            return 0;
          }};
}

std::string file_text(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  return in ? std::string(std::istreambuf_iterator<char>(in), {}) : std::string();
}

// A checkpoint directory: its job, how far it has come, whether it is finished. Read
// without its lock, so a running job can be looked at.
void checkpoint_summary(const std::string& dir) {
  const auto job_path = std::filesystem::path(dir) / "job.json";
  const std::string text = file_text(job_path);
  if (text.empty()) throw error(error_kind::input, "no gridlu job in " + dir);
  const auto j = workflows::job_from_json(text, job_path.string());
  std::printf("checkpoint %s\n", dir.c_str());
  std::printf("job        %s\n", j.id.c_str());
  std::printf("solve      %s -> %s (%s, n = %lld, %lld right-hand side(s))\n", j.input.c_str(),
              j.output.c_str(), j.type.c_str(), static_cast<long long>(j.n),
              static_cast<long long>(j.nrhs));
  if (j.precision != "double")
    std::printf("precision  %s%s%s\n", j.precision.c_str(),
                j.fallback.empty() ? "" : ", gave way to double: ", j.fallback.c_str());
  const auto state = std::filesystem::path(dir) / "checkpoint.h5";
  const bool finished =
      workflows::marks_completion(file_text(std::filesystem::path(dir) / "complete.json"), j);
  if (std::filesystem::exists(state)) {
    std::map<std::string, std::string> a;
    for (const auto& [k, v] : io::describe(state.string()).attributes) a[k] = v;
    if (a["gridlu_kind"] != "checkpoint" || a["job_id"] != j.id)
      throw error(error_kind::input, state.string() + " is not this job's checkpoint");
    char* end = nullptr;
    const long long k = std::strtoll(a["columns_done"].c_str(), &end, 10);
    if (end == a["columns_done"].c_str() || k < 0 || k > j.n)
      throw error(error_kind::input, state.string() + " is damaged: no valid columns_done");
    std::printf("progress   %lld of %lld columns eliminated, %.1f %% of the flops\n", k,
                static_cast<long long>(j.n), workflows::percent_of_flops(j.n, k));
    std::printf("time       %s s of factorization over all runs\n", a["elapsed_seconds"].c_str());
    std::printf("restarts   %s\ncheckpoints %s written\n", a["restarts"].c_str(),
                a["checkpoints"].c_str());
  } else if (!finished) {
    std::printf("progress   no checkpoint yet (a resume starts from column 0)\n");
  }
  std::printf("status     %s\n", finished ? ("complete, X in " + j.output).c_str() : "in progress");
}

void file_summary(const std::string& path) {
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
    std::printf("dataset    %s  %s  %s\n", item.path.c_str(),
                io::shape_text(item.shape.dims).c_str(), item.shape.type.c_str());
    attributes_of(item);
  }
}

subcommand add_info(CLI::App& app, double) {
  auto path = std::make_shared<std::string>();
  auto* cmd = app.add_subcommand("info", "show what an HDF5 file or a checkpoint directory holds");
  cmd->add_option("file", *path, "any HDF5 file, or a checkpoint directory")->required();
  cmd->footer("Examples:\n  gridlu info charges.h5\n  gridlu info ckpt");
  return {cmd, [=] {
            // Rank 0 reads alone and the others wait for its outcome.
            const process_grid grid(MPI_COMM_WORLD, {1, comm::world_size()});
            comm::together(grid.all(), [&] {
              if (grid.rank() != 0) return;
              if (std::filesystem::is_directory(*path))
                checkpoint_summary(*path);
              else
                file_summary(*path);
            });
            return 0;
          }};
}

void print_calibration(const workflows::calibration& cal) {
  std::printf("gridlu calibrate: %s\n", cal.source.c_str());
  for (const auto& [type, r] : cal.types) {
    std::printf(
        "  %-10s  GEMM %7.2f GFLOP/s per rank (best), %7.2f at 4096 x 224, %3.0f %% of that "
        "inside LU | panel LU %6.2f at 4096 x 224 | triangular solve %6.2f at k = 224 | "
        "interchanges %.2f ns per entry\n",
        type.c_str(), r.gemm.best(), r.gemm.gflops_at(4096, 224), 100 * r.gemm_in_factorization,
        r.panel.gflops_at(4096, 224), r.trsm.gflops_at(2048, 224), r.swap_seconds * 1e9);
    const auto& f = r.column;
    std::printf(
        "  %-10s  a process column costs, against the figures alone: panel x %.2f, pivot "
        "search x %.2f, interchanges x %.2f, U rows' scatter and gather x %.2f\n",
        "", f.panel, f.pivot_search, f.interchange, f.broadcast);
  }
  const auto link = [](const char* what, const workflows::link_cost& l) {
    std::printf("  %-17s latency %8.2f us, bandwidth %8.2f GB/s\n", what, l.latency * 1e6,
                l.bandwidth * 1e-9);
  };
  link("point to point", cal.point_to_point);
  link("row broadcast", cal.row_broadcast);
  link("column broadcast", cal.column_broadcast);
  std::printf("  checkpoint writes %8.1f MB/s (all ranks together, synced to disk)\n",
              cal.write_bandwidth * 1e-6);
}

struct calibrate_command {
  workflows::calibrate_options options;
  std::string out;
  bool force = false;
};

subcommand add_calibrate(CLI::App& app, double) {
  auto c = std::make_shared<common_options>();
  auto o = std::make_shared<calibrate_command>();
  auto* cmd = app.add_subcommand(
      "calibrate", "measure the rates of the performance model on these ranks (for gridlu plan)");
  cmd->add_option("--type", o->options.types, "element types to measure (default: all four)")
      ->check(CLI::IsMember({"float32", "float64", "complex64", "complex128"}));
  cmd->add_option("--checkpoint-dir", o->options.checkpoint_dir,
                  "directory whose write bandwidth is measured (a scratch file, removed)")
      ->capture_default_str();
  cmd->add_option_function<std::string>(
      "--write-size",
      [o](const std::string& text) { o->options.write_bytes = workflows::parse_size(text); },
      "bytes written to measure it, all ranks together (default 256M)");
  cmd->add_option("--out", o->out, "write the calibration as JSON to this file");
  cmd->add_flag("--force", o->force, "replace --out if it exists");
  add_common(cmd, *c);
  cmd->footer(
      "Run it with one rank per core on the nodes a solve will use, then pass the file to\n"
      "gridlu plan --calibration. Example:\n  mpiexec -n 2 gridlu calibrate --out rates.json");
  return {cmd, [=] {
            const auto policy = o->force ? io::existing::replace : io::existing::refuse;
            if (!o->out.empty()) io::check_output_target(o->out, policy);
            const auto grid = make_grid(*c);
            const auto cal = workflows::calibrate(grid, o->options);
            if (grid.rank() != 0) return 0;
            if (!c->quiet) print_calibration(cal);
            if (!o->out.empty()) io::write_whole_file(o->out, cal.json().dump(2) + "\n", policy);
            return 0;
          }};
}

std::string gigabytes(double bytes) {
  char text[32];
  std::snprintf(text, sizeof text, "%.2f GB", bytes * 1e-9);
  return text;
}

std::string hours(double seconds) {
  char text[48];
  std::snprintf(text, sizeof text, "%.0f s (%.2f h)", seconds, seconds / 3600);
  return text;
}

void print_plan(const workflows::plan_result& r) {
  const auto& o = r.asked;
  const auto& best = r.chosen();
  std::printf("gridlu plan: LU of a %s matrix, n = %lld, on %d node(s) x %d core(s) = %d ranks\n",
              o.type.c_str(), static_cast<long long>(o.n), o.nodes, o.cores_per_node, r.ranks);
  std::printf("  rates        %s\n", r.calibration_source.c_str());
  const auto& m = r.memory;
  std::printf("  memory       %s per rank of %s: %s\n", gigabytes(r.memory_per_rank).c_str(),
              gigabytes(o.memory_per_node / o.cores_per_node).c_str(),
              r.fits ? "fits" : "does NOT fit");
  std::printf(
      "               A's share %s, its copies %s (refinement, mixed precision), B, X "
      "and work %s, panels %s, I/O buffers %s\n",
      gigabytes(m.a_share).c_str(), gigabytes(m.a_copies).c_str(),
      gigabytes(m.matrices - m.a_share - m.a_copies).c_str(), gigabytes(m.panels).c_str(),
      gigabytes(m.io).c_str());
  std::printf("  checkpoint   %s each, %s of disk while the next is written, %.0f s to write\n",
              gigabytes(r.checkpoint_bytes).c_str(), gigabytes(r.checkpoint_disk_bytes).c_str(),
              r.checkpoint_write_seconds);
  std::printf(
      "  choice       grid %dx%d, block %lld, look-ahead %d: %s, %.2f GFLOP/s, %.0f %% of "
      "the GEMM rate\n",
      best.grid.p, best.grid.q, static_cast<long long>(best.block), o.lookahead,
      hours(best.predicted.seconds).c_str(), best.predicted.gflops,
      100 * best.predicted.efficiency);
  print_phases(best.predicted.phases, "predicted, a typical rank");
  if (r.checkpoint_interval > 0)
    std::printf(
        "  interval     a checkpoint every %s of work for an MTBF of %.4g h (Young 1974, "
        "Daly 2006): expected wall time %s\n",
        hours(r.checkpoint_interval).c_str(), o.mtbf_hours, hours(r.expected_seconds).c_str());
  else
    std::printf(
        "  interval     no --mtbf given: checkpoint only before the time limit; "
        "expected wall time %s\n",
        hours(r.expected_seconds).c_str());
  std::printf("  considered   (fastest first that fit)\n");
  const std::size_t shown = std::min<std::size_t>(r.candidates.size(), 8);
  for (std::size_t i = 0; i < shown; ++i) {
    const auto& x = r.candidates[i];
    std::printf("    grid %5dx%-5d block %4lld  %12.1f s  %5.1f %%\n", x.grid.p, x.grid.q,
                static_cast<long long>(x.block), x.predicted.seconds, 100 * x.predicted.efficiency);
  }
  if (r.candidates.size() > shown)
    std::printf("    ... and %zu more (--json lists all)\n", r.candidates.size() - shown);
  std::printf(
      "  note         a model's estimate: the time of the factorization alone, without reading "
      "A or writing X\n");
}

workflows::calibration calibration_from(const std::string& path) {
  if (path.empty()) return workflows::builtin_calibration();
  std::ifstream in(path);
  if (!in) throw error(error_kind::input, "cannot read the calibration " + path);
  try {
    auto c = workflows::calibration::from_json(nlohmann::json::parse(in));
    c.source = "from " + path + ", " + c.source;
    return c;
  } catch (const nlohmann::json::exception& e) {
    throw error(error_kind::input, path + " is not JSON: " + e.what());
  } catch (const gridlu::error& e) {
    throw error(error_kind::input, path + ": " + e.what());
  }
}

struct plan_command {
  workflows::plan_options options;
  std::string grid, calibration;
  bool json = false;
};

subcommand add_plan(CLI::App& app, double) {
  auto o = std::make_shared<plan_command>();
  auto& p = o->options;
  auto* cmd = app.add_subcommand(
      "plan", "predict memory, disk, grid, block size, time and checkpoint interval of a solve");
  cmd->add_option("--n", p.n, "order of the matrix")->required();
  cmd->add_option("--type", p.type, "float32, float64, complex64 or complex128")
      ->capture_default_str();
  cmd->add_option("--nodes", p.nodes, "nodes of the allocation")->required();
  cmd->add_option("--cores-per-node", p.cores_per_node, "cores per node: one rank each")
      ->required();
  cmd->add_option_function<std::string>(
         "--mem-per-node",
         [o](const std::string& text) {
           const bool plain = text.find_first_not_of("0123456789.") == std::string::npos;
           o->options.memory_per_node =
               static_cast<double>(workflows::parse_size(plain ? text + "GiB" : text));
         },
         "memory per node: GiB, or a size such as 256G or 180GB")
      ->required();
  cmd->add_option("--rhs", p.nrhs, "number of right-hand sides")->capture_default_str();
  add_precision(cmd, p.precision, "double");
  cmd->add_option("--calibration", o->calibration,
                  "rates from gridlu calibrate (default: built-in, measured on the development "
                  "machines)");
  cmd->add_option("--mtbf", p.mtbf_hours, "mean time between failures of the allocation, hours");
  cmd->add_option("--grid", o->grid, "only this grid PxQ (default: every grid of the ranks)");
  cmd->add_option("--block", p.block, "only this block size (default: several)")
      ->check(positive_block);
  add_lookahead(cmd, p.lookahead);
  cmd->add_flag("--json", o->json, "print the plan as JSON instead");
  cmd->footer(
      "Example:\n  gridlu plan --n 200000 --type complex128 --nodes 16 "
      "--cores-per-node 64 --mem-per-node 256 --mtbf 24");
  return {cmd, [=] {
            auto options = o->options;
            if (!o->grid.empty()) options.grid = parse_grid_shape(o->grid);
            const auto r = workflows::plan(options, calibration_from(o->calibration));
            if (comm::world_rank() != 0) return 0;
            if (o->json)
              std::printf("%s\n", r.json().dump(2).c_str());
            else
              print_plan(r);
            return 0;
          }};
}

}  // namespace

// Runs in place of unwinding for an exception that only this rank has (nothing catches
// it, see lone_failure): the other ranks may wait in a collective for ever, and unwinding
// could enter one (a file's collective close), so the whole job ends here. Formats into a
// fixed buffer: the failure may be the lack of memory.
[[noreturn]] void end_job_alone() {
  int code = exit_code(error_kind::internal);
  char line[512];
  const auto say = [&](const char* what, const char* detail) {
    std::snprintf(line, sizeof line, "gridlu: error: %s%s on rank %d\n", what, detail,
                  comm::world_rank());
  };
  try {
    if (const auto e = std::current_exception()) std::rethrow_exception(e);
    say("internal failure", "");
  } catch (const std::bad_alloc&) {
    code = exit_code(error_kind::output);
    say("out of memory", "");
  } catch (const lone_failure& e) {
    code = exit_code(e.kind());
    say(e.what(), "");
  } catch (const error& e) {
    code = exit_code(e.kind());
    say(e.what(), "");
  } catch (const std::exception& e) {
    say("internal failure: ", e.what());
  } catch (...) {
    say("internal failure", "");
  }
  std::fputs(line, stderr);
  comm::abort_job(code);
}

int main(int argc, char** argv) {
  std::set_terminate(end_job_alone);
  // Before MPI starts, while the parent is still the launcher; it outlives MPI_Finalize.
  const workflows::launcher_watch watch(exit_code(error_kind::output));
  gridlu::mpi_session mpi(argc, argv);
  const double started = comm::wtime();
  const int rank = comm::world_rank();
  // A file-size limit then fails the write (an output error) instead of killing the rank.
  std::signal(SIGXFSZ, SIG_IGN);

  CLI::App app{"gridlu: dense LU with partial pivoting on a block-cyclic grid of MPI ranks."};
  app.footer(exit_codes_help);
  // Option errors read like every other error: one line, exit 2.
  app.failure_message([](const CLI::App*, const CLI::Error& e) {
    return "gridlu: error: " + std::string(e.what()) + " (see --help)\n";
  });
  app.require_subcommand(1);
  const subcommand commands[] = {add_bench(app, started),     add_demo(app, started),
                                 add_solve(app, started),     add_generate(app, started),
                                 add_resume(app, started),    add_info(app, started),
                                 add_calibrate(app, started), add_plan(app, started)};
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // Every rank parses the same arguments; only rank 0 speaks.
    if (rank == 0) app.exit(e);
    return e.get_exit_code() == 0 ? 0 : exit_code(error_kind::usage);
  }

  try {
    comm::transfer_limit_from_environment();
    for (const auto& c : commands)
      if (*c.app) return c.run();
    return exit_code(error_kind::usage);
  } catch (const gridlu::error& e) {
    // Errors reaching here were agreed by all ranks (or raised by all alike). Any other
    // exception is one rank's alone and has no handler: end_job_alone, without unwinding.
    if (rank == 0) std::fprintf(stderr, "gridlu: error: %s\n", e.what());
    if (comm::any_rank(io::left_unclosed())) comm::end_without_finalize(exit_code(e.kind()));
    return exit_code(e.kind());
  }
}
