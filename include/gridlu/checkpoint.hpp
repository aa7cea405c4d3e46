// Checkpoints of a factorization: the state after k eliminated columns, stored in its
// global layout so that any grid and block size can take it up again, written so that a
// crash at any moment leaves either the previous checkpoint or the new one whole.
#pragma once

#include <cstdint>
#include <optional>
#include <string>

#include "gridlu/lu.hpp"
#include "gridlu/matrix.hpp"

namespace gridlu::checkpoint {

// What was asked, so that `resume` can finish it, and the identity of its inputs.
struct job {
  std::string input, output, matrix_dataset, rhs_dataset, rhs_file, save_factors;
  bool column_major = false;
  std::string type;
  index_t n = 0, nrhs = 0;
  index_t block = 0;  // of the run that wrote the checkpoint: resume's default
  std::int64_t input_size = 0, rhs_size = 0;
  double input_mtime = 0, rhs_mtime = 0;
  std::uint64_t a_checksum = 0, b_checksum = 0;  // content_checksum of A and B
};

struct progress {
  index_t columns_done = 0;
  double elapsed_seconds = 0;  // factorization time over all allocations
  std::int64_t restarts = 0;   // resumes so far
  std::int64_t checkpoints = 0;
};

struct header {
  job what;
  progress done;
};

std::string state_file(const std::string& dir);

// Makes the directory if needed, removes temporaries a killed run left, and refuses
// (usage error) when the disk cannot hold two checkpoints of `bytes` each.
void prepare(const process_grid& grid, const std::string& dir, double bytes);

// Writes the state: a new file under a temporary name, flushed and synced, read back
// and checksummed, then renamed over the previous checkpoint. Collective.
template <scalar T>
void save(const process_grid& grid, const std::string& dir, const dist_matrix<T>& work,
          const lu_result& state, const header& h);

// Reads the header of DIR's checkpoint; input error if there is none, or it is damaged
// or not a gridlu checkpoint.
header load_header(const process_grid& grid, const std::string& dir);

// Reads the working matrix and pivots into `work` (n x n, any block size) and verifies
// their checksums.
template <scalar T>
lu_result load(const process_grid& grid, const std::string& dir, dist_matrix<T>& work);

// After X is written: records that DIR's solve is finished and where X went.
void mark_complete(const process_grid& grid, const std::string& dir, const std::string& output);
// X's path if DIR's solve is finished.
std::optional<std::string> completed(const std::string& dir);

}  // namespace gridlu::checkpoint
