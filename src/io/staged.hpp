// Outputs that appear whole or not at all, written where nobody else can reach them
// first. Every output gridlu writes (X, factors, reports, checkpoints and their markers)
// goes through here: a private directory is created exclusively, with an unpredictable
// name and mode 0700, beside the target; the file is written inside it, synced, and
// renamed over the target last. No existing name or link is ever opened for writing.
#pragma once

#include <string>
#include <vector>

#include "gridlu/grid.hpp"

namespace gridlu::io {

// Prefix of the private staging directories; a run killed outright can leave one.
inline constexpr const char* staging_prefix = ".gridlu-stage-";

// How an output may treat an existing file of its name.
enum class existing { refuse, replace };

// Checks on one process, before any work, that `target` can be written: its directory
// exists and accepts new entries, the target is not a directory, and it does not exist
// unless `replace`. Usage error otherwise.
void check_output_target(const std::string& target, existing policy);

// A file of any size written by every rank of a grid (HDF5 through MPI-IO).
class staged_output {
public:
  // Collective: rank 0 creates the private directory, all ranks learn its name. With
  // `bytes`, the space for them is reserved there and released at once, so a full disk
  // or a file-size limit is an output error before anything is written.
  staged_output(const process_grid& grid, std::string target, existing policy, double bytes = 0);
  ~staged_output();  // removes what was staged unless committed
  staged_output(const staged_output&) = delete;
  staged_output& operator=(const staged_output&) = delete;

  // Where to write: a name inside the private directory, not yet existing.
  const std::string& path() const { return path_; }
  const std::string& target() const { return target_; }
  // Collective, after the file is closed: syncs it, renames it over the target (or
  // fails if the target appeared meanwhile and may not be replaced), syncs the
  // directory. Output error when any of it fails.
  void commit();

private:
  const process_grid& grid_;
  std::string target_, directory_, path_;
  existing policy_;
  bool committed_ = false;
};

// A small file written by the calling process alone (reports, markers), staged alike.
void write_whole_file(const std::string& target, const std::string& content, existing policy);

// Removes staging directories left in `directory` by runs killed outright. Only safe
// where no other run can be writing, such as a locked checkpoint directory.
void remove_stale_staging(const std::string& directory) noexcept;

// Seconds this process takes to write `bytes` into a private scratch file in `directory`
// and sync it to stable storage; the scratch file is removed. Output error if it cannot.
double timed_write(const std::string& directory, std::int64_t bytes);

}  // namespace gridlu::io
