// Checkpoints of a factorization: the state after k eliminated columns, stored in its
// global layout so that any grid and block size can take it up again, written so that a
// crash at any moment leaves either the previous checkpoint or the new one whole.
//
// A checkpoint directory belongs to one job at a time. It holds
//   lock           locked (flock) by the run using the directory, for its whole life
//   job.json       the job: what was asked, its inputs' fingerprints, its identity
//   checkpoint.h5  the factorization's state, tagged with the job's identity
//   complete.json  written once the job's X is safely stored, tagged alike
// and nothing else but staging directories of runs killed outright.
#pragma once

#include <cstdint>
#include <string>

#include "gridlu/lu.hpp"
#include "gridlu/matrix.hpp"

namespace gridlu::checkpoint {

// How far a job has come, over all its runs.
struct progress {
  index_t columns_done = 0;
  double elapsed_seconds = 0;  // factorization time over all runs
  std::int64_t restarts = 0;   // resumes so far
  std::int64_t checkpoints = 0;
};

// What a saved state says about itself, read without the matrix.
struct state_summary {
  std::string job_id;
  std::string type;  // scalar_traits<T>::name
  index_t n = 0;
  progress done;
};

// A checkpoint directory in use by this run. Collective calls throughout; every rank
// sees the same answers.
class directory {
public:
  enum class opening { create, existing };
  // Locks the directory for the life of the object (creating it first if asked): another
  // run holding it is an output error naming the directory. Staging left by runs killed
  // outright is removed.
  directory(const process_grid& grid, std::string path, opening how = opening::create);
  ~directory();  // releases the lock
  directory(const directory&) = delete;
  directory& operator=(const directory&) = delete;

  const std::string& path() const { return path_; }
  std::string state_path() const;

  // job.json's text ("" if absent); replaced whole.
  std::string job() const;
  void record_job(const std::string& text) const;
  // complete.json's text ("" if absent); replaced whole.
  std::string completion() const;
  void record_completion(const std::string& text) const;

  bool has_state() const;
  // Removes the saved state (once the job's X is safely written).
  void remove_state() const;
  // Removes everything the previous job left: state, job and completion.
  void clear() const;

  // Output error when the disk cannot hold two states of `bytes` each (the new one is
  // written before the previous one is replaced).
  void require_space(double bytes) const;

  // Writes the state: staged, synced, read back against its checksum, renamed over the
  // previous state.
  template <scalar T>
  void save(const dist_matrix<T>& work, const lu_result& state, const progress& done,
            const std::string& job_id) const;
  // Reads the saved state's summary; input error when it is damaged or not a checkpoint.
  state_summary summary() const;
  // Reads the working matrix and pivots into `work` (n x n, any grid and block size),
  // checking every field and both checksums; input error when anything is off.
  template <scalar T>
  lu_result load(dist_matrix<T>& work) const;

private:
  const process_grid& grid_;
  std::string path_;
  int lock_fd_ = -1;  // rank 0's
};

}  // namespace gridlu::checkpoint
