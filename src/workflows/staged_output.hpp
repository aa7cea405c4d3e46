// An output file that appears under its final name only when complete: it is written
// under a temporary name in the same directory and renamed at the end, so an
// interrupted run never leaves a half-written file behind.
#pragma once

#include <string>

#include "gridlu/grid.hpp"

namespace gridlu::workflows {

class staged_output {
public:
  // Checks (collectively, before any real work) that `path` may be written: it must not
  // exist unless `force`, and its directory must accept a new file.
  staged_output(const process_grid& grid, const std::string& path, bool force);
  ~staged_output();  // removes the temporary file unless committed
  staged_output(const staged_output&) = delete;
  staged_output& operator=(const staged_output&) = delete;

  const std::string& temporary() const { return temporary_; }
  const std::string& final_path() const { return path_; }
  // Renames the finished temporary file over the final name (collective).
  void commit();

private:
  const process_grid& grid_;
  std::string path_, temporary_;
  bool committed_ = false;
};

}  // namespace gridlu::workflows
