// Glue between the command line and the library: each workflow runs one job on a grid
// and returns its figures; printing is the CLI's business.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "gridlu/grid.hpp"
#include "gridlu/lu.hpp"

namespace gridlu::workflows {

// Default block size; see DEVELOPERS.md for the measurements behind it.
inline constexpr index_t default_block = 224;

// Default look-ahead depth: one panel ahead hides the panel and its broadcast; deeper
// only adds memory here (see DEVELOPERS.md).
inline constexpr int default_lookahead = 1;

inline void require_block(index_t block) {
  if (block < 1) throw error(exit_code::usage, "the block size must be at least 1");
}

struct bench_options {
  index_t n = 4096;
  index_t block = default_block;
  int lookahead = default_lookahead;
  std::string type = "float64";
  std::uint64_t seed = 1;
  int repeat = 1;
};

struct bench_result {
  std::vector<double> factor_seconds;  // one per repetition
  double factor_median = 0;
  double gflops = 0;       // factorization, from the median time
  double gemm_gflops = 0;  // the same ranks running GEMM at once, median of three
  lu_phases phases;        // of the median run: the largest over the ranks, per phase
  index_t gemm_order = 0;
};

// Factors a generated matrix in memory (no files) and measures the GEMM rate of the
// same ranks in the same run.
bench_result bench(const process_grid& grid, const bench_options& options);

struct read_bench_options {
  std::string path, dataset = "A";
  index_t block = default_block;
  bool column_major = false;
  int repeat = 3;
};

struct read_bench_result {
  std::vector<double> seconds;  // one per repetition
  double median = 0;
  double bytes = 0;  // size of the dataset in memory
};

// Reads one dataset of an HDF5 file into a distributed matrix, `repeat` times.
read_bench_result bench_read(const process_grid& grid, const read_bench_options& options);

struct demo_options {
  index_t n = 3000;
  index_t nrhs = 4;
  index_t block = default_block;
  int lookahead = default_lookahead;
  std::string type = "float64";
  std::uint64_t seed = 1;
};

struct demo_result {
  double generate_seconds = 0, factor_seconds = 0, solve_seconds = 0, check_seconds = 0;
  double gflops = 0;
  std::vector<double> backward_errors;  // one per right-hand side
  double threshold = 0;                 // acceptable backward error for the type
  index_t first_zero_pivot = -1;
};

// Generates a random system A X = B, factors, solves and checks the backward error.
demo_result demo(const process_grid& grid, const demo_options& options);

// Progress of a factorization: fraction of its flops done, seconds so far, GFLOP/s so far.
using progress_callback = std::function<void(double fraction, double seconds, double gflops)>;

struct solve_options {
  std::string input, output;
  std::string matrix_dataset = "A", rhs_dataset = "B", rhs_file;  // rhs_file empty: input
  index_t block = default_block;
  int lookahead = default_lookahead;
  bool column_major = false;  // the file holds the transpose of A
  bool force = false;
  std::string save_factors, factors;  // paths, or empty
  progress_callback progress;
  // Checkpointing: a directory (empty: none), the period and the time budget of this
  // run in seconds (0: none), and when the run started (comm::wtime()).
  std::string checkpoint_dir;
  double checkpoint_every = 0, stop_after = 0, started = 0;
};

struct solve_result {
  index_t n = 0, nrhs = 0, block = 0;
  std::string type;
  bool refactored = true;  // false when saved factors were used
  double read_seconds = 0, factor_seconds = 0, solve_seconds = 0, check_seconds = 0,
         write_seconds = 0, total_seconds = 0;
  double gflops = 0;
  lu_phases phases;  // of this run's factorization: the largest over the ranks, per phase
  std::vector<double> backward_errors;
  double threshold = 0;  // accepted backward error for the type: 10 n eps
  // Checkpointing: stopped early (by a signal or the time budget) with a checkpoint.
  bool stopped = false;
  // The time budget ran out at this run's first block step: the fixed costs of a run
  // (start-up, reading, a checkpoint write) left it no room to make headway.
  bool budget_too_short = false;
  bool already_complete = false;  // resume of a finished solve: nothing was done
  std::string input, output;      // where A came from, where X is (or will be) written
  index_t columns_done = 0;
  double factor_seconds_total = 0;  // over all runs of a checkpointed solve
  std::int64_t restarts = 0, checkpoints = 0;
};

// Reads A and B from HDF5, factors (or loads saved factors), solves, checks the backward
// error against A re-read from its file, writes X. Throws gridlu::error, agreed by all
// ranks; no output file is left behind on failure.
solve_result solve_file(const process_grid& grid, const solve_options& options);

struct resume_options {
  std::string dir;
  index_t block = 0;  // 0: the block size the checkpoint was made with
  int lookahead = default_lookahead;
  std::string output;  // empty: the one recorded in the checkpoint
  bool force = false;
  double checkpoint_every = 0, stop_after = 0, started = 0;
  progress_callback progress;
};

// Continues the checkpointed solve in options.dir on this grid, possibly another one.
solve_result resume_dir(const process_grid& grid, const resume_options& options);

struct generate_options {
  index_t n = 0, nrhs = 1;
  std::string type = "float64";
  std::uint64_t seed = 1;
  std::string output;
  bool force = false;
};

// Writes the random system of generate_options to an HDF5 file, in parallel.
void generate_file(const process_grid& grid, const generate_options& options);

}  // namespace gridlu::workflows
