#include "workflows/staged_output.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>

namespace gridlu::workflows {

staged_output::staged_output(const process_grid& grid, const std::string& path, bool force)
    : grid_(grid), path_(path) {
  // One name for all ranks: rank 0's process id makes it unique on the node.
  std::int64_t pid = getpid();
  comm::broadcast(grid.all(), &pid, 1, 0);
  const std::filesystem::path p(path);
  std::string name = p.filename().string();  // built in steps: GCC 12 misfires on "." + s
  name.insert(0, 1, '.');
  name += ".partial-" + std::to_string(pid);
  temporary_ = (p.parent_path() / name).string();
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    if (!force && std::filesystem::exists(p))
      throw error(exit_code::usage, path + " exists; pass --force to replace it");
    const int fd = open(temporary_.c_str(), O_CREAT | O_EXCL | O_WRONLY, 0644);
    if (fd < 0) throw error(exit_code::usage, "cannot write " + path + ": " + std::strerror(errno));
    close(fd);
    unlink(temporary_.c_str());
  });
}

staged_output::~staged_output() {
  if (!committed_ && grid_.rank() == 0) unlink(temporary_.c_str());
}

void staged_output::commit() {
  comm::together(grid_.all(), [&] {
    if (grid_.rank() != 0) return;
    if (std::rename(temporary_.c_str(), path_.c_str()) != 0)
      throw error(exit_code::usage,
                  "cannot rename the finished output to " + path_ + ": " + std::strerror(errno));
  });
  committed_ = true;
}

}  // namespace gridlu::workflows
