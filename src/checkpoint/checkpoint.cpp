#include "gridlu/checkpoint.hpp"

#include <fcntl.h>
#include <sys/statvfs.h>
#include <unistd.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "instantiate.hpp"

namespace gridlu::checkpoint {
namespace fs = std::filesystem;
namespace {

constexpr std::int64_t format_version = 1;
constexpr const char* kind = "checkpoint";
const std::string partial_prefix = ".checkpoint.h5.partial-";

std::uint64_t pivots_checksum(const std::vector<index_t>& pivots, index_t count) {
  std::uint64_t sum = 0;
  for (index_t i = 0; i < count; ++i) sum ^= detail::entry_hash(i, 0, pivots[i]);
  return sum;
}

// Makes a rename durable: the directory entry itself is synced.
void sync_path(const std::string& path) {
  const int fd = open(path.c_str(), O_RDONLY);
  if (fd < 0) return;
  fsync(fd);
  close(fd);
}

struct damaged : error {
  explicit damaged(const std::string& what)
      : error(exit_code::input, "the checkpoint " + what + "; it cannot be resumed") {}
};

template <class V>
V need(const io::file& f, const std::string& key, const std::string& path) {
  const auto v = f.get_attribute_as<V>("/", key);
  if (!v) throw damaged(path + " lacks the attribute " + key);
  return *v;
}

std::uint64_t need_hex(const io::file& f, const std::string& key, const std::string& path) {
  const auto sum = io::parse_checksum(need<std::string>(f, key, path));
  if (!sum) throw damaged(path + " has a malformed " + key);
  return *sum;
}

}  // namespace

std::string state_file(const std::string& dir) {
  return (fs::path(dir) / "checkpoint.h5").string();
}

void prepare(const process_grid& grid, const std::string& dir, double bytes) {
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    std::error_code ec;
    fs::create_directories(dir, ec);
    if (ec || !fs::is_directory(dir))
      throw error(exit_code::usage,
                  "cannot use " + dir + " as checkpoint directory: " + ec.message());
    for (const auto& e : fs::directory_iterator(dir))
      if (e.path().filename().string().rfind(partial_prefix, 0) == 0) fs::remove(e.path(), ec);
    struct statvfs st {};
    if (statvfs(dir.c_str(), &st) != 0)
      throw error(exit_code::usage,
                  "cannot query free space in " + dir + ": " + std::strerror(errno));
    const double free = static_cast<double>(st.f_bavail) * static_cast<double>(st.f_frsize);
    const double existing =
        fs::exists(state_file(dir)) ? static_cast<double>(fs::file_size(state_file(dir))) : 0.0;
    if (free + existing < 2.0 * bytes)
      throw error(exit_code::usage,
                  "not enough disk space for checkpoints in " + dir + ": two copies need " +
                      std::to_string(static_cast<long long>(2.0 * bytes / 1e6)) + " MB, " +
                      std::to_string(static_cast<long long>((free + existing) / 1e6)) +
                      " MB are available");
  });
}

template <scalar T>
void save(const process_grid& grid, const std::string& dir, const dist_matrix<T>& work,
          const lu_result& state, const header& h) {
  std::int64_t pid = getpid();
  comm::broadcast(grid.all(), &pid, 1, 0);
  const std::string temporary = (fs::path(dir) / (partial_prefix + std::to_string(pid))).string();
  const std::uint64_t work_sum = content_checksum(work);
  const std::uint64_t pivot_sum = pivots_checksum(state.pivots, state.columns_done);
  {
    io::file f(grid, temporary, io::file::mode::create);
    f.write("work", work);
    f.write_indices("pivots", std::vector<index_t>(state.pivots.begin(),
                                                   state.pivots.begin() + state.columns_done));
    const auto& w = h.what;
    const std::pair<const char*, io::attribute> attrs[] = {
        {"gridlu_kind", std::string(kind)},
        {"gridlu_format", format_version},
        {"type", w.type},
        {"n", std::int64_t{w.n}},
        {"nrhs", std::int64_t{w.nrhs}},
        {"block", std::int64_t{w.block}},
        {"columns_done", std::int64_t{state.columns_done}},
        {"first_zero_pivot", std::int64_t{state.first_zero_pivot}},
        {"elapsed_seconds", h.done.elapsed_seconds},
        {"restarts", h.done.restarts},
        {"checkpoints", h.done.checkpoints},
        {"work_checksum", io::checksum_text(work_sum)},
        {"pivots_checksum", io::checksum_text(pivot_sum)},
        {"input", w.input},
        {"output", w.output},
        {"matrix_dataset", w.matrix_dataset},
        {"rhs_dataset", w.rhs_dataset},
        {"rhs_file", w.rhs_file},
        {"save_factors", w.save_factors},
        {"column_major", std::int64_t{w.column_major}},
        {"input_size", w.input_size},
        {"input_mtime", w.input_mtime},
        {"rhs_size", w.rhs_size},
        {"rhs_mtime", w.rhs_mtime},
        {"a_checksum", io::checksum_text(w.a_checksum)},
        {"b_checksum", io::checksum_text(w.b_checksum)}};
    for (const auto& [key, value] : attrs) f.set_attribute("/", key, value);
    f.flush();
    f.close();
  }
  comm::together(grid.all(), [&] {
    if (grid.rank() == 0) sync_path(temporary);
  });
  // Read back what reached the file before it may replace the previous checkpoint.
  {
    const io::file f(grid, temporary, io::file::mode::read);
    if (f.checksum<T>("work") != work_sum)
      throw error(exit_code::internal,
                  "the checkpoint written to " + temporary + " does not read back");
  }
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    if (std::rename(temporary.c_str(), state_file(dir).c_str()) != 0)
      throw error(exit_code::internal, "cannot rename " + temporary + ": " + std::strerror(errno));
    sync_path(dir);
  });
}

header load_header(const process_grid& grid, const std::string& dir) {
  const std::string path = state_file(dir);
  bool present = false;
  comm::together(grid.all(), [&] { present = fs::exists(path); });
  if (!present) throw error(exit_code::input, "no checkpoint in " + dir);
  const io::file f(grid, path, io::file::mode::read);
  if (f.get_attribute_as<std::string>("/", "gridlu_kind") != kind)
    throw error(exit_code::input, path + " is not a gridlu checkpoint");
  header h;
  auto& w = h.what;
  w.type = need<std::string>(f, "type", path);
  w.n = need<std::int64_t>(f, "n", path);
  w.nrhs = need<std::int64_t>(f, "nrhs", path);
  w.block = need<std::int64_t>(f, "block", path);
  w.input = need<std::string>(f, "input", path);
  w.output = need<std::string>(f, "output", path);
  w.matrix_dataset = need<std::string>(f, "matrix_dataset", path);
  w.rhs_dataset = need<std::string>(f, "rhs_dataset", path);
  w.rhs_file = need<std::string>(f, "rhs_file", path);
  w.save_factors = need<std::string>(f, "save_factors", path);
  w.column_major = need<std::int64_t>(f, "column_major", path) != 0;
  w.input_size = need<std::int64_t>(f, "input_size", path);
  w.rhs_size = need<std::int64_t>(f, "rhs_size", path);
  w.input_mtime = need<double>(f, "input_mtime", path);
  w.rhs_mtime = need<double>(f, "rhs_mtime", path);
  w.a_checksum = need_hex(f, "a_checksum", path);
  w.b_checksum = need_hex(f, "b_checksum", path);
  h.done.columns_done = need<std::int64_t>(f, "columns_done", path);
  h.done.elapsed_seconds = need<double>(f, "elapsed_seconds", path);
  h.done.restarts = need<std::int64_t>(f, "restarts", path);
  h.done.checkpoints = need<std::int64_t>(f, "checkpoints", path);
  if (w.n < 1 || w.block < 1 || h.done.columns_done < 0 || h.done.columns_done > w.n)
    throw damaged(path + " records an impossible state");
  return h;
}

template <scalar T>
lu_result load(const process_grid& grid, const std::string& dir, dist_matrix<T>& work) {
  const std::string path = state_file(dir);
  const io::file f(grid, path, io::file::mode::read);
  const auto shape = f.shape("work");
  if (shape.dims.size() != 2 || shape.dims[0] != work.rows() || shape.dims[1] != work.cols() ||
      shape.type != scalar_traits<T>::name)
    throw damaged(path + " holds a working matrix of the wrong shape or type");
  lu_result state;
  state.columns_done = need<std::int64_t>(f, "columns_done", path);
  state.first_zero_pivot = need<std::int64_t>(f, "first_zero_pivot", path);
  state.pivots = f.read_indices("pivots");
  if (static_cast<index_t>(state.pivots.size()) != state.columns_done ||
      pivots_checksum(state.pivots, state.columns_done) != need_hex(f, "pivots_checksum", path))
    throw damaged(path + " has damaged pivots");
  f.read("work", work);
  if (content_checksum(work) != need_hex(f, "work_checksum", path))
    throw damaged(path + " has a damaged working matrix (checksum mismatch)");
  return state;
}

void mark_complete(const process_grid& grid, const std::string& dir, const std::string& output) {
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    const auto final_path = fs::path(dir) / "complete.json";
    const auto temporary = fs::path(dir) / ".complete.json.partial";
    {
      std::ofstream out(temporary);
      out << nlohmann::json{{"output", fs::absolute(output).string()}}.dump() << '\n';
      if (!out) throw error(exit_code::usage, "cannot write " + temporary.string());
    }
    fs::rename(temporary, final_path);
    sync_path(dir);
  });
}

std::optional<std::string> completed(const std::string& dir) {
  std::ifstream in(fs::path(dir) / "complete.json");
  if (!in) return std::nullopt;
  try {
    return nlohmann::json::parse(in).at("output").get<std::string>();
  } catch (const std::exception&) {
    return std::nullopt;
  }
}

#define INSTANTIATE(T)                                                                  \
  template void save<T>(const process_grid&, const std::string&, const dist_matrix<T>&, \
                        const lu_result&, const header&);                               \
  template lu_result load<T>(const process_grid&, const std::string&, dist_matrix<T>&);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu::checkpoint
