#include "io/staged.hpp"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <vector>

namespace gridlu::io {
namespace fs = std::filesystem;
namespace {

std::string reason() { return std::strerror(errno); }

std::string directory_of(const std::string& target) {
  const auto parent = fs::path(target).parent_path();
  return parent.empty() ? "." : parent.string();
}

// Flushes a file or a directory entry to stable storage.
void sync_path(const std::string& path, const std::string& what) {
  const int fd = open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0 || fsync(fd) != 0) {
    const std::string why = reason();
    if (fd >= 0) close(fd);
    throw error(error_kind::output, "cannot sync " + what + ": " + why);
  }
  close(fd);
}

// A fresh directory beside the target, made by this call alone (mkdtemp: an
// unpredictable name, created exclusively, mode 0700).
std::string make_private_directory(const std::string& target, error_kind kind) {
  std::string name = (fs::path(directory_of(target)) / staging_prefix).string() + "XXXXXX";
  if (!mkdtemp(name.data()))
    throw error(kind, "cannot write " + target + ": cannot create a file in " +
                          directory_of(target) + ": " + reason());
  return name;
}

// Moves the staged file over the target; never replaces what may not be replaced, even
// if it appeared after the checks.
void move_into_place(const std::string& from, const std::string& target, existing policy) {
  if (policy == existing::replace) {
    if (std::rename(from.c_str(), target.c_str()) != 0)
      throw error(error_kind::output,
                  "cannot move the finished " + target + " into place: " + reason());
    return;
  }
  if (renameat2(AT_FDCWD, from.c_str(), AT_FDCWD, target.c_str(), RENAME_NOREPLACE) == 0) return;
  if (errno == EEXIST)
    throw error(error_kind::output, target +
                                        " appeared while gridlu was writing it; the new "
                                        "one was not put in its place");
  // File systems without RENAME_NOREPLACE: a hard link fails just the same on a name.
  if (errno != EINVAL || link(from.c_str(), target.c_str()) != 0)
    throw error(error_kind::output,
                "cannot move the finished " + target + " into place: " + reason());
  unlink(from.c_str());
}

// Reserves `bytes` in a scratch file of the private directory and frees them again:
// where the file system can reserve (fallocate), a write that would not fit fails here.
void probe_space(const std::string& directory, const std::string& target, double bytes) {
  const std::string scratch = (fs::path(directory) / "space").string();
  const int fd = open(scratch.c_str(), O_CREAT | O_EXCL | O_WRONLY | O_CLOEXEC, 0600);
  if (fd < 0) throw error(error_kind::output, "cannot write " + target + ": " + reason());
  const bool reserved = fallocate(fd, 0, 0, static_cast<off_t>(bytes)) == 0;
  const int why = errno;
  close(fd);
  unlink(scratch.c_str());
  if (!reserved && why != EOPNOTSUPP && why != ENOSYS)
    throw error(error_kind::output, "cannot write " + target + ": " +
                                        std::to_string(std::llround(bytes / 1e6)) +
                                        " MB do not fit (" + std::strerror(why) + ")");
}

void remove_staged(const std::string& directory, const std::string& path) noexcept {
  unlink(path.c_str());
  rmdir(directory.c_str());
}

}  // namespace

void check_output_target(const std::string& target, existing policy) {
  const std::string dir = directory_of(target);
  struct stat st {};
  if (stat(dir.c_str(), &st) != 0 || !S_ISDIR(st.st_mode))
    throw error(error_kind::usage,
                "cannot write " + target + ": the directory " + dir + " does not exist");
  if (stat(target.c_str(), &st) == 0 && S_ISDIR(st.st_mode))
    throw error(error_kind::usage, target + " is a directory; name a file to write");
  if (policy == existing::refuse && lstat(target.c_str(), &st) == 0)
    throw error(error_kind::usage, target + " exists; pass --force to replace it");
  // Probe with what writing will do: make (and remove) a private directory there.
  rmdir(make_private_directory(target, error_kind::usage).c_str());
}

staged_output::staged_output(const process_grid& grid, std::string target, existing policy,
                             double bytes)
    : grid_(grid), target_(std::move(target)), policy_(policy) {
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    directory_ = make_private_directory(target_, error_kind::output);
    try {
      if (bytes > 0) probe_space(directory_, target_, bytes);
    } catch (...) {
      rmdir(directory_.c_str());
      throw;
    }
  });
  comm::broadcast(grid.all(), directory_, 0);
  path_ = (fs::path(directory_) / fs::path(target_).filename()).string();
}

staged_output::~staged_output() {
  if (!committed_ && grid_.rank() == 0) remove_staged(directory_, path_);
}

void staged_output::commit() {
  comm::together(grid_.all(), [&] {
    if (grid_.rank() != 0) return;
    sync_path(path_, target_);
    move_into_place(path_, target_, policy_);
    rmdir(directory_.c_str());
    sync_path(directory_of(target_), "the directory of " + target_);
  });
  committed_ = true;
}

void write_whole_file(const std::string& target, const std::string& content, existing policy) {
  const std::string directory = make_private_directory(target, error_kind::output);
  const std::string path = (fs::path(directory) / fs::path(target).filename()).string();
  try {
    const int fd = open(path.c_str(), O_CREAT | O_EXCL | O_WRONLY | O_CLOEXEC, 0644);
    if (fd < 0) throw error(error_kind::output, "cannot write " + target + ": " + reason());
    std::size_t done = 0;
    while (done < content.size()) {
      const ssize_t n = write(fd, content.data() + done, content.size() - done);
      if (n < 0 && errno == EINTR) continue;
      if (n <= 0) {
        const std::string why = reason();
        close(fd);
        throw error(error_kind::output, "cannot write " + target + ": " + why);
      }
      done += static_cast<std::size_t>(n);
    }
    const bool synced = fsync(fd) == 0;
    const std::string why = reason();
    if (close(fd) != 0 || !synced)
      throw error(error_kind::output, "cannot write " + target + ": " + why);
    move_into_place(path, target, policy);
    rmdir(directory.c_str());
    sync_path(directory_of(target), "the directory of " + target);
  } catch (...) {
    remove_staged(directory, path);
    throw;
  }
}

double timed_write(const std::string& directory, std::int64_t bytes) {
  const std::string dir =
      make_private_directory((fs::path(directory) / "x").string(), error_kind::output);
  const std::string path = (fs::path(dir) / "scratch").string();
  std::vector<char> chunk(std::size_t{1} << 22, 1);
  const double start = comm::wtime();
  const int fd = open(path.c_str(), O_CREAT | O_EXCL | O_WRONLY | O_CLOEXEC, 0600);
  bool written = fd >= 0;
  for (std::int64_t left = bytes; written && left > 0;) {
    const auto n = static_cast<std::size_t>(std::min<std::int64_t>(left, chunk.size()));
    written = write(fd, chunk.data(), n) == static_cast<ssize_t>(n);
    left -= static_cast<std::int64_t>(n);
  }
  written = written && fsync(fd) == 0;
  const std::string why = reason();
  const double seconds = comm::wtime() - start;
  if (fd >= 0) close(fd);
  remove_staged(dir, path);
  if (!written) throw error(error_kind::output, "cannot write in " + directory + ": " + why);
  return seconds;
}

void remove_stale_staging(const std::string& directory) noexcept {
  std::error_code ec;
  for (auto it = fs::directory_iterator(directory, ec); !ec && it != fs::directory_iterator();
       it.increment(ec))
    if (it->path().filename().string().rfind(staging_prefix, 0) == 0)
      fs::remove_all(it->path(), ec);
}

}  // namespace gridlu::io
