// Glue between the command line and the library: each workflow runs one job on a grid
// and returns its figures; printing is the CLI's business.
#pragma once

#include <complex>
#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "gridlu/accuracy.hpp"
#include "gridlu/bem.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/grid.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/mixed.hpp"
#include "workflows/job.hpp"
#include "workflows/memory.hpp"

namespace gridlu::workflows {

// Default block size; see DEVELOPERS.md for the measurements behind it.
inline constexpr index_t default_block = 224;

// Default look-ahead depth: one panel ahead hides the panel and its broadcast; deeper
// only adds memory here (see DEVELOPERS.md).
inline constexpr int default_lookahead = 1;

// "double", "mixed" or "mixed-krylov": a usage error otherwise, or when mixed precision
// meets a type it cannot refine (float32 and complex64 have no narrower type; an empty
// type is not known yet).
void require_precision(const std::string& precision, const std::string& type = "");

// What produced X: the precision asked, the one used, and the mixed-precision refinement
// (its history, or why it gave way to a double factorization).
struct precision_outcome {
  std::string asked = "double", used = "double";
  std::optional<mixed_outcome> mixed;  // when a mixed-precision refinement ran
  std::string fallback;                // why mixed precision gave way to double, if it did
  // The single-precision factorization in this run of a solve (0: not timed apart);
  // after a fallback the factor time is the double one's.
  double single_factor_seconds = 0;
};
// Its report keys; a classical refinement in double (--refine) counts as its iterations.
nlohmann::json precision_json(const precision_outcome& p,
                              const std::optional<refinement>& refined = std::nullopt);

struct bench_options {
  index_t n = 4096;
  index_t block = 0;  // 0: default_block, or n if smaller (block_for)
  int lookahead = default_lookahead;
  std::string type = "float64";
  std::uint64_t seed = 1;
  int repeat = 1;
  std::string precision = "double";  // mixed kinds: time to a refined X, against double's
  std::int64_t memory_per_rank = 0;  // bytes a rank may use; 0: what the system allows
};

struct bench_result {
  index_t block = 0;                   // the block size used
  std::vector<double> factor_seconds;  // one per repetition
  double factor_median = 0;
  double gflops = 0;       // factorization, from the median time
  double gemm_gflops = 0;  // the same ranks running GEMM at once, median of three
  lu_phases phases;        // of the median run: the largest over the ranks, per phase
  index_t gemm_order = 0;
  // With mixed precision: the single-precision GEMM rate of the same ranks, the time to
  // a refined X (median; the factorization is part of it) and the last run's outcome.
  double narrow_gemm_gflops = 0;
  std::vector<double> solve_seconds;
  double solve_median = 0;
  precision_outcome precision;
  double normwise_backward_error = 0;  // of the last run's X
  nlohmann::json json(const bench_options& asked) const;
};

// Factors a generated matrix in memory (no files) and measures the GEMM rate of the
// same ranks in the same run.
bench_result bench(const process_grid& grid, const bench_options& options);

struct read_bench_options {
  std::string path, dataset = "A";
  index_t block = 0;  // 0: default_block, or the larger dimension if smaller
  bool column_major = false;
  int repeat = 3;
  std::int64_t memory_per_rank = 0;
};

struct read_bench_result {
  index_t block = 0;            // the block size used
  std::vector<double> seconds;  // one per repetition
  double median = 0;
  double bytes = 0;  // size of the dataset in memory
  nlohmann::json json(const read_bench_options& asked) const;
};

// Reads one dataset of an HDF5 file into a distributed matrix, `repeat` times.
read_bench_result bench_read(const process_grid& grid, const read_bench_options& options);

struct demo_options {
  index_t n = 3000;
  index_t nrhs = 4;
  index_t block = 0;  // 0: default_block, or n if smaller
  int lookahead = default_lookahead;
  std::string type = "float64";
  std::uint64_t seed = 1;
  std::string precision = "double";
  std::int64_t memory_per_rank = 0;
};

struct demo_result {
  index_t block = 0;  // the block size used
  // With mixed precision, factor_seconds is the single-precision factorization (and the
  // double one after a fallback) and solve_seconds the refinement.
  double generate_seconds = 0, factor_seconds = 0, solve_seconds = 0, check_seconds = 0;
  double gflops = 0;
  precision_outcome precision;
  trust_report trust;
  nlohmann::json json(const demo_options& asked) const;
};

// Generates a random system A X = B, factors, solves and measures how far X can be
// trusted. Throws gridlu::error (numerical) for an exactly singular A or a non-finite X.
demo_result demo(const process_grid& grid, const demo_options& options);

// A conductor held at potential 1 (gridlu/bem.hpp): assembled in memory by every rank,
// or written to a file.
struct conductor_options {
  std::string problem = "sphere";  // "sphere", "cube" or "sphere-helmholtz"
  int subdivisions = 4;            // sphere: 20 * 4^s panels
  int divisions = 16;              // cube: 12 * m^2 panels
  double size = 1;                 // the sphere's radius or the cube's side
  double wavenumber = 2;           // sphere-helmholtz
  std::string type;                // empty: float64, or complex128 for Helmholtz
  index_t block = 0;               // 0: default_block, or n if smaller
  int lookahead = default_lookahead;
  std::string precision = "double";
  std::int64_t memory_per_rank = 0;
  std::string output;  // generate: the file, replaced only with `force`
  bool force = false;
};

// The names of the conductor problems, and whether `name` is one.
bool is_conductor(const std::string& name);
bem::problem conductor_problem(const conductor_options& options);
// The known answer: the capacitance (Laplace) or the constant density (Helmholtz).
std::complex<double> conductor_expected(const conductor_options& options);

struct conductor_result {
  std::string surface, kernel, type;
  index_t n = 0, block = 0;
  double assemble_seconds = 0, factor_seconds = 0, solve_seconds = 0, check_seconds = 0;
  double gflops = 0;
  // The capacitance (Laplace) or the mean density (Helmholtz), and its known value.
  std::string quantity;
  std::complex<double> computed, expected;
  int corrections = -1;  // of a mixed-precision refinement; -1: none ran
  trust_report trust;    // with the quadrature's entry error in its rules
  nlohmann::json json(const conductor_options& asked) const;
};

// Assembles the conductor's system on the grid, factors, solves for unit potential and
// measures how far the density can be trusted, the entries' quadrature error included.
conductor_result conductor_demo(const process_grid& grid, const conductor_options& options);
// Writes the conductor's system to an HDF5 file: A, B (ones), the panels' areas and
// centroids, and what the system is (attributes, the entry error among them).
void generate_conductor_file(const process_grid& grid, const conductor_options& options);

// Progress of a factorization: fraction of its flops done, seconds so far, GFLOP/s so far,
// and an estimate of the seconds left.
using progress_callback =
    std::function<void(double fraction, double seconds, double gflops, double left)>;
// Something the user should know at once (what --force discards, for instance).
using notice_callback = std::function<void(const std::string&)>;

// What the command line asks of a solve; the workflow turns it into a job.
struct solve_options {
  std::string input, output;
  std::string matrix_dataset = "A", rhs_dataset = "B", rhs_file;  // rhs_file empty: input
  index_t block = 0;  // 0: default_block, or n if smaller
  int lookahead = default_lookahead;
  bool column_major = false;          // the file holds the transpose of A
  std::string solve_with = "A";       // "A", "A^T" or "A^H": the system's matrix
  bool refine = false;                // iterative refinement in the working precision
  std::int64_t require_digits = 0;    // recorded in the job; the command line judges it
  double entry_error = -1;            // A's entries' relative accuracy; negative: the file's
  std::string precision = "double";   // or "mixed", "mixed-krylov"
  bool force = false;                 // replace existing outputs; discard another job's checkpoint
  std::string save_factors, factors;  // paths, or empty
  std::string report;                 // this run's report: checked with the other outputs
  // Checkpointing: a directory (empty: none), the period and the time budget of this
  // run in seconds (0: none).
  std::string checkpoint_dir;
  double checkpoint_every = 0, stop_after = 0;
};

// What a run of a solve job must know beyond the job itself.
struct run_settings {
  double started = 0;                // comm::wtime() when the program started
  double stop_after = 0;             // seconds; 0: no budget
  std::string report;                // this run's report file, or empty
  std::int64_t memory_per_rank = 0;  // bytes a rank may use; 0: what the system allows
  progress_callback progress;
  notice_callback notice;
};

struct solve_result {
  job what;                // the job as run
  bool refactored = true;  // false when saved factors were used
  double read_seconds = 0, factor_seconds = 0, solve_seconds = 0, check_seconds = 0,
         write_seconds = 0, total_seconds = 0;
  double gflops = 0;
  lu_phases phases;  // of this run's factorization: the largest over the ranks, per phase
  trust_report trust;
  std::optional<refinement> refined;  // with --refine
  precision_outcome precision;
  // Stopped early (by a signal or the time budget) with a checkpoint.
  bool stopped = false;
  // The time budget ran out at this run's first block step: the fixed costs of a run
  // (start-up, reading, a checkpoint write) left it no room to make headway.
  bool budget_too_short = false;
  bool already_complete = false;  // resume of a finished job whose X is in place
  bool state_removed = false;     // the checkpoint's working state, once X was written
  index_t columns_done = 0;
  double factor_seconds_total = 0;  // over all runs of a checkpointed job
  std::int64_t restarts = 0, checkpoints = 0;

  nlohmann::json json() const;  // the report's figures
};

// Reads A and B from HDF5, factors (or loads saved factors), solves, measures how far X
// can be trusted (against A re-read from its file), writes X; a non-finite X is refused. Every
// output is checked against every input before any work; all are written whole or not at all.
// Throws gridlu::error, agreed by all ranks.
solve_result solve_file(const process_grid& grid, const solve_options& options,
                        const run_settings& run);

struct resume_options {
  std::string dir;
  index_t block = 0;                 // 0: the job's own; else 1..n
  int lookahead = -1;                // negative: the job's own
  std::string output;                // empty: the job's own
  bool force = false;                // replace existing outputs even if the job did not ask to
  double checkpoint_every = -1;      // seconds; negative: the job's own
  std::int64_t require_digits = -1;  // negative: the job's own
  std::string precision;             // empty: the job's own
};

// Continues (or finishes) the checkpointed job in options.dir on this grid, possibly
// another one; needs nothing the first run was given.
solve_result resume_dir(const process_grid& grid, const resume_options& options,
                        const run_settings& run);

struct generate_options {
  std::optional<classical> kind;  // nothing: the random system of `seed`
  index_t n = 0, nrhs = 1;
  std::string type = "float64";
  std::uint64_t seed = 1;
  std::string output;
  bool force = false;
  std::int64_t memory_per_rank = 0;  // bytes a rank may use; 0: what the system allows
};

// Writes a generated system to an HDF5 file, in parallel: random A and B, or a classical
// A with every column of B equal to A times ones, so that X is all ones.
void generate_file(const process_grid& grid, const generate_options& options);

}  // namespace gridlu::workflows
