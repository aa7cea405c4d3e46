#include "gridlu/checkpoint.hpp"

#include <fcntl.h>
#include <sys/file.h>
#include <sys/statvfs.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "instantiate.hpp"
#include "io/staged.hpp"

namespace gridlu::checkpoint {
namespace fs = std::filesystem;
namespace {

constexpr std::int64_t format_version = 2;
constexpr const char* kind = "checkpoint";
constexpr const char* lock_name = "lock";
constexpr const char* job_name = "job.json";
constexpr const char* state_name = "checkpoint.h5";
constexpr const char* completion_name = "complete.json";

std::uint64_t pivots_checksum(const std::vector<index_t>& pivots) {
  std::uint64_t sum = 0;
  for (std::size_t i = 0; i < pivots.size(); ++i)
    sum ^= detail::entry_hash(static_cast<index_t>(i), 0, pivots[i]);
  return sum;
}

struct damaged : error {
  explicit damaged(const std::string& what)
      : error(error_kind::input, "the checkpoint " + what + "; it cannot be resumed") {}
};

template <class V>
V need(const io::file& f, const std::string& key) {
  const auto v = f.get_attribute_as<V>("/", key);
  if (!v) throw damaged(f.path() + " lacks a valid attribute " + key);
  return *v;
}

std::uint64_t need_checksum(const io::file& f, const std::string& key) {
  const auto sum = io::parse_checksum(need<std::string>(f, key));
  if (!sum) throw damaged(f.path() + " has a malformed " + key);
  return *sum;
}

// A whole small file, read on rank 0 and shared; "" when it does not exist.
std::string read_text(const process_grid& grid, const std::string& path) {
  std::string text;
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    std::ifstream in(path, std::ios::binary);
    if (!in) return;
    std::ostringstream all;
    all << in.rdbuf();
    text = all.str();
  });
  comm::broadcast(grid.all(), text, 0);
  return text;
}

// Takes an exclusive advisory lock on DIR/lock. The kernel drops it when the process
// ends however it ends, so a killed run never leaves the directory locked.
int take_lock(const std::string& dir) {
  const std::string path = (fs::path(dir) / lock_name).string();
  const int fd = open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC | O_NOFOLLOW, 0644);
  if (fd < 0)
    throw error(error_kind::output,
                "cannot use " + dir + " as checkpoint directory: " + std::strerror(errno));
  if (flock(fd, LOCK_EX | LOCK_NB) != 0) {
    const int why = errno;
    close(fd);
    if (why != EWOULDBLOCK)
      throw error(error_kind::output, "cannot lock " + path + ": " + std::strerror(why) +
                                          " (a file system without locks cannot hold "
                                          "checkpoints safely)");
    throw error(error_kind::output, dir +
                                        " is in use by another running gridlu (its lock is "
                                        "held); wait for it to end, or use another directory");
  }
  return fd;
}

void check_state_fields(const state_summary& s, const std::string& path) {
  if (s.n < 1 || s.done.columns_done < 0 || s.done.columns_done > s.n || s.done.restarts < 0 ||
      s.done.checkpoints < 0 || !(s.done.elapsed_seconds >= 0))
    throw damaged(path + " records an impossible state");
  bool known = false;
  dispatch_scalar(s.type, [&](auto) { known = true; });
  if (!known) throw damaged(path + " records an unknown element type");
}

}  // namespace

directory::directory(const process_grid& grid, std::string path, opening how)
    : grid_(grid), path_(std::move(path)) {
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    std::error_code ec;
    if (how == opening::existing && !fs::is_directory(path_))
      throw error(error_kind::input, "no checkpoint directory " + path_);
    fs::create_directories(path_, ec);
    if (ec || !fs::is_directory(path_))
      throw error(error_kind::usage, "cannot use " + path_ + " as checkpoint directory" +
                                         (ec ? ": " + ec.message() : ": not a directory"));
    lock_fd_ = take_lock(path_);
    io::remove_stale_staging(path_);  // never throws: the lock cannot leak
  });
}

directory::~directory() {
  if (lock_fd_ >= 0) close(lock_fd_);
}

std::string directory::state_path() const { return (fs::path(path_) / state_name).string(); }

std::string directory::job() const {
  return read_text(grid_, (fs::path(path_) / job_name).string());
}

void directory::record_job(const std::string& text) const {
  comm::together(grid_.all(), [&] {
    if (grid_.rank() == 0)
      io::write_whole_file((fs::path(path_) / job_name).string(), text, io::existing::replace);
  });
}

std::string directory::completion() const {
  return read_text(grid_, (fs::path(path_) / completion_name).string());
}

void directory::record_completion(const std::string& text) const {
  comm::together(grid_.all(), [&] {
    if (grid_.rank() == 0)
      io::write_whole_file((fs::path(path_) / completion_name).string(), text,
                           io::existing::replace);
  });
}

bool directory::has_state() const {
  std::int64_t present = 0;
  comm::together(grid_.all(), [&] {
    if (grid_.rank() == 0) present = fs::exists(state_path()) ? 1 : 0;
  });
  comm::broadcast(grid_.all(), &present, 1, 0);
  return present != 0;
}

void directory::remove_state() const {
  comm::together(grid_.all(), [&] {
    if (grid_.rank() == 0 && std::remove(state_path().c_str()) != 0 && errno != ENOENT)
      throw error(error_kind::output,
                  "cannot remove " + state_path() + ": " + std::strerror(errno));
  });
}

void directory::clear() const {
  remove_state();
  comm::together(grid_.all(), [&] {
    if (grid_.rank() != 0) return;
    for (const char* name : {completion_name, job_name})
      if (std::remove((fs::path(path_) / name).c_str()) != 0 && errno != ENOENT)
        throw error(error_kind::output, "cannot remove " + (fs::path(path_) / name).string() +
                                            ": " + std::strerror(errno));
  });
}

void directory::require_space(double bytes) const {
  comm::together(grid_.all(), [&] {
    if (grid_.rank() != 0) return;
    struct statvfs st {};
    if (statvfs(path_.c_str(), &st) != 0)
      throw error(error_kind::output,
                  "cannot query free space in " + path_ + ": " + std::strerror(errno));
    const double free = static_cast<double>(st.f_bavail) * static_cast<double>(st.f_frsize);
    std::error_code ec;
    const auto existing = fs::file_size(state_path(), ec);
    const double available = free + (ec ? 0.0 : static_cast<double>(existing));
    if (available < 2.0 * bytes)
      throw error(error_kind::output,
                  "not enough disk space for checkpoints in " + path_ + ": two copies need " +
                      std::to_string(static_cast<long long>(2.0 * bytes / 1e6)) + " MB, " +
                      std::to_string(static_cast<long long>(available / 1e6)) +
                      " MB are available");
  });
}

template <scalar T>
void directory::save(const dist_matrix<T>& work, const lu_result& state, const progress& done,
                     const std::string& job_id) const {
  const std::vector<index_t> pivots(state.pivots.begin(),
                                    state.pivots.begin() + state.columns_done);
  const std::uint64_t work_sum = content_checksum(work);
  io::staged_output out(grid_, state_path(), io::existing::replace, work.bytes());
  {
    io::file f(grid_, out.path(), io::file::mode::create);
    f.write("work", work);
    f.write_indices("pivots", pivots);
    const std::pair<const char*, io::attribute> attrs[] = {
        {"gridlu_kind", std::string(kind)},
        {"gridlu_format", format_version},
        {"job_id", job_id},
        {"type", std::string(scalar_traits<T>::name)},
        {"n", std::int64_t{work.rows()}},
        {"columns_done", std::int64_t{state.columns_done}},
        {"first_zero_pivot", std::int64_t{state.first_zero_pivot}},
        {"elapsed_seconds", done.elapsed_seconds},
        {"restarts", done.restarts},
        {"checkpoints", done.checkpoints},
        {"work_checksum", io::checksum_text(work_sum)},
        {"pivots_checksum", io::checksum_text(pivots_checksum(pivots))}};
    for (const auto& [key, value] : attrs) f.set_attribute("/", key, value);
    f.close();
  }
  // Read back what reached the file before it may replace the previous checkpoint.
  if (io::file(grid_, out.path(), io::file::mode::read).checksum<T>("work") != work_sum)
    throw error(error_kind::output,
                "the checkpoint written to " + out.path() + " does not read back as written");
  out.commit();
}

state_summary directory::summary() const {
  if (!has_state()) throw error(error_kind::input, "no checkpoint state in " + path_);
  const io::file f(grid_, state_path(), io::file::mode::read);
  if (f.get_attribute_as<std::string>("/", "gridlu_kind") != kind)
    throw error(error_kind::input, state_path() + " is not a gridlu checkpoint");
  if (f.get_attribute_as<std::int64_t>("/", "gridlu_format") != format_version)
    throw damaged(state_path() + " has another format version than this gridlu's (" +
                  std::to_string(format_version) + ")");
  state_summary s;
  s.job_id = need<std::string>(f, "job_id");
  s.type = need<std::string>(f, "type");
  s.n = need<std::int64_t>(f, "n");
  s.done = {need<std::int64_t>(f, "columns_done"), need<double>(f, "elapsed_seconds"),
            need<std::int64_t>(f, "restarts"), need<std::int64_t>(f, "checkpoints")};
  check_state_fields(s, state_path());
  return s;
}

template <scalar T>
lu_result directory::load(dist_matrix<T>& work) const {
  const state_summary s = summary();
  const std::string path = state_path();
  const io::file f(grid_, path, io::file::mode::read);
  const auto shape = f.shape("work");
  if (s.n != work.rows() || s.type != scalar_traits<T>::name || shape.dims.size() != 2 ||
      shape.dims[0] != work.rows() || shape.dims[1] != work.cols() ||
      shape.type != scalar_traits<T>::name)
    throw damaged(path + " holds a working matrix of another shape or type");
  lu_result state;
  state.columns_done = s.done.columns_done;
  state.first_zero_pivot = need<std::int64_t>(f, "first_zero_pivot");
  if (state.first_zero_pivot < -1 || state.first_zero_pivot >= state.columns_done)
    throw damaged(path + " records an impossible zero pivot");
  state.pivots = f.read_indices("pivots");
  if (static_cast<index_t>(state.pivots.size()) != state.columns_done)
    throw damaged(path + " holds " + std::to_string(state.pivots.size()) + " pivots for " +
                  std::to_string(state.columns_done) + " columns");
  for (index_t i = 0; i < state.columns_done; ++i)
    if (state.pivots[i] < i || state.pivots[i] >= s.n)
      throw damaged(path + " has pivot " + std::to_string(i) + " out of range");
  if (pivots_checksum(state.pivots) != need_checksum(f, "pivots_checksum"))
    throw damaged(path + " has damaged pivots (checksum mismatch)");
  f.read("work", work);
  if (content_checksum(work) != need_checksum(f, "work_checksum"))
    throw damaged(path + " has a damaged working matrix (checksum mismatch)");
  return state;
}

#define INSTANTIATE(T)                                                                       \
  template void directory::save<T>(const dist_matrix<T>&, const lu_result&, const progress&, \
                                   const std::string&) const;                                \
  template lu_result directory::load<T>(dist_matrix<T>&) const;
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu::checkpoint
