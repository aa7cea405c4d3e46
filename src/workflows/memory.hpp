// What a command needs in memory per rank, what a rank may use, and the check that
// refuses a run up front instead of failing an allocation half-way.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>

#include "gridlu/grid.hpp"

namespace gridlu::workflows {

// The block size of a run on a matrix of order n: an explicit one (asked > 0) must lie in
// 1..n; 0 asks for `fallback`, or n if smaller. A usage error otherwise.
index_t block_for(index_t asked, index_t n, index_t fallback);

// The peak of a command, described by what it holds at once.
struct memory_model {
  index_t n = 1, nrhs = 1, block = 1;
  index_t cols = 0;  // A's columns where A is not square (bench --read); 0: n
  grid_shape grid;
  std::int64_t element_bytes = 8;
  double matrix_copies = 1;  // of A: 2 with --refine, 1.5 with mixed precision
  double vectors = 0;        // n x nrhs matrices: B, X, a residual, ...
  double columns = 0;        // n x 1 vectors besides (a GMRES basis)
  int lookahead = -1;        // panels in flight are lookahead + 1; negative: no factorization
  index_t gemm_order = 0;    // bench: three square GEMM operands, freed before A exists
};

// A system of order n with nrhs right-hand sides solved in memory: A (a second copy to
// refine in the working precision, half of one more for mixed precision's single-precision
// factors), B, X, a residual (and a correction with refinement or mixed precision, a GMRES
// basis with mixed-krylov), and the panels of the factorization unless `factoring` is false.
memory_model solve_model(grid_shape grid, index_t n, index_t nrhs, index_t block,
                         std::int64_t element_bytes, int lookahead, const std::string& precision,
                         bool refine, bool factoring = true);

// Bytes per rank, the largest share of any rank, by part.
struct memory_need {
  double matrices = 0;  // A's copies and the n x nrhs and n x 1 matrices
  double a_share = 0;   // of which one copy of A
  double a_copies = 0;  // and the rest of A's copies (--refine, mixed precision)
  double panels = 0;    // panels in flight, U block rows, interchange messages
  double io = 0;        // the slabs of a matrix read or written
  double gemm = 0;      // bench's GEMM operands (not held with the rest)
  double total() const;
};
memory_need need_per_rank(const memory_model& m);

// "512M", "2G", "1.5GiB", "4096": K, M, G, T, KiB, MiB, GiB, TiB are powers of 1024;
// kB, MB, GB, TB powers of 1000; no suffix or B is bytes. A usage error otherwise.
std::int64_t parse_size(std::string_view text);

// Refuses, on every rank together, a run whose model does not fit what a rank may use:
// `limit` bytes (--memory-per-rank) or, when 0, the least of the node's available memory,
// the control group's room (both shared among the ranks on the node) and this process's
// address-space and data limits. When a smaller block would let the run fit, the block
// is at fault (a usage error); otherwise it is an output (resource) error. Collective.
void require_memory(const process_grid& grid, const memory_model& m, std::int64_t limit,
                    const std::string& what);

}  // namespace gridlu::workflows
