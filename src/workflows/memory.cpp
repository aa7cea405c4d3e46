#include "workflows/memory.hpp"

#include <sys/resource.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <limits>
#include <string>

#include "gridlu/io.hpp"
#include "gridlu/lu.hpp"
#include "workflows/job.hpp"

namespace gridlu::workflows {
namespace {

// The interchange messages: two buffers, each of at most 2^17 entries (the column groups
// of factor/interchange.cpp keep the moving entries of a group within that) and of at most
// the 2 nb rows a panel moves across the local columns.
constexpr double interchange_entries = 1 << 17;

// GMRES in mixed-krylov: a basis of at most 50 steps (accuracy/mixed.cpp), with the
// vectors it starts from and adds.
constexpr double krylov_columns = 52;

// The least number of bytes this process may still take, and what sets it.
struct allowance {
  double bytes = std::numeric_limits<double>::infinity();
  std::string source;
  void at_most(double b, const std::string& why) {
    if (b < bytes) bytes = std::max(0.0, b), source = why;
  }
};

// A "Key: value kB" line of a /proc file, in bytes (negative when absent).
double proc_field(const char* path, const std::string& key) {
  std::ifstream in(path);
  for (std::string line; std::getline(in, line);)
    if (line.rfind(key, 0) == 0) return std::atof(line.c_str() + key.size()) * 1024;
  return -1;
}

double number_in(const std::filesystem::path& p) {
  std::ifstream in(p);
  double v = -1;
  return in >> v ? v : -1;  // "max" (no limit) reads as none
}

// The tightest room left under the memory limits of this process's control group and
// its ancestors (cgroup v2); infinite without any.
double cgroup_room() {
  std::ifstream self("/proc/self/cgroup");
  std::string line, path;
  while (std::getline(self, line))
    if (line.rfind("0::", 0) == 0) path = line.substr(3);
  double room = std::numeric_limits<double>::infinity();
  if (path.empty()) return room;
  for (std::filesystem::path p = "/sys/fs/cgroup" + path;; p = p.parent_path()) {
    const double max = number_in(p / "memory.max"), current = number_in(p / "memory.current");
    if (max >= 0 && current >= 0) room = std::min(room, max - current);
    if (p == "/sys/fs/cgroup" || !p.has_parent_path() || p == p.parent_path()) break;
  }
  return room;
}

// Address space the libraries reserve at their first use, beyond what the model counts:
// OpenBLAS's buffer (128 MiB, seen at its first TRSM) and a new malloc arena (64 MiB).
// Reserved, not touched: it counts against ulimit -v and -d, not against the node's memory.
constexpr double library_reserve = 192.0 * (1 << 20);

// A soft resource limit minus what the process already uses of it and will reserve.
void process_limit(allowance& a, int resource, const char* field, const std::string& why) {
  rlimit r{};
  if (getrlimit(resource, &r) != 0 || r.rlim_cur == RLIM_INFINITY) return;
  const double used = std::max(0.0, proc_field("/proc/self/status", field));
  a.at_most(static_cast<double>(r.rlim_cur) - used - library_reserve, why);
}

allowance allowed(std::int64_t limit, int sharing) {
  allowance a;
  if (limit > 0) {
    a.at_most(static_cast<double>(limit), "--memory-per-rank");
    return a;
  }
  const std::string shared = " shared by " + std::to_string(sharing) + " rank(s) on the node";
  const double available = proc_field("/proc/meminfo", "MemAvailable:");
  if (available >= 0) a.at_most(available / sharing, "the node's available memory" + shared);
  a.at_most(cgroup_room() / sharing, "the control group's limit" + shared);
  process_limit(a, RLIMIT_AS, "VmSize:", "its address-space limit (ulimit -v)");
  process_limit(a, RLIMIT_DATA, "VmData:", "its data-size limit (ulimit -d)");
  return a;
}

std::string megabytes(double bytes) {
  char text[64];
  std::snprintf(text, sizeof text, "%.1f", bytes / 1e6);
  return text;
}

// The least number of ranks, on the grid gridlu would choose, whose need per rank fits
// `bytes`; 0 when none up to 2^24 ranks does.
index_t ranks_that_fit(memory_model m, double bytes, int from) {
  const auto fits = [&](index_t ranks) {
    m.grid = square_grid_shape(static_cast<int>(ranks));
    return need_per_rank(m).total() <= bytes;
  };
  index_t high = std::max(from, 1);
  while (!fits(high))
    if ((high *= 2) > (index_t{1} << 24)) return 0;
  index_t low = high == from ? from - 1 : high / 2;  // does not fit, or is below `from`
  while (high - low > 1) (fits((low + high) / 2) ? high : low) = (low + high) / 2;
  return high;
}

// The largest smaller block with which everything fits `bytes`, or 0.
index_t block_that_fits(memory_model m, double bytes) {
  index_t low = 0, high = m.block;
  while (high - low > 1) {
    m.block = (low + high) / 2;
    (need_per_rank(m).total() <= bytes ? low : high) = m.block;
  }
  return low;
}

std::string what_fits(const memory_model& m, double bytes, int ranks) {
  const index_t k = ranks_that_fit(m, bytes, ranks + 1);
  if (k == 0) return "no number of ranks would fit with this much per rank";
  const grid_shape g = square_grid_shape(static_cast<int>(k));
  return "about " + std::to_string(k) + " ranks (grid " + std::to_string(g.p) + "x" +
         std::to_string(g.q) + ") with as much each would fit";
}

}  // namespace

index_t block_for(index_t asked, index_t n, index_t fallback) {
  if (asked == 0) return std::min(fallback, std::max<index_t>(n, 1));
  if (asked < 1 || asked > n)
    throw error(error_kind::usage, "the block size must be between 1 and the order " +
                                       std::to_string(n) + ", not " + std::to_string(asked));
  return asked;
}

memory_model solve_model(grid_shape grid, index_t n, index_t nrhs, index_t block,
                         std::int64_t element_bytes, int lookahead, const std::string& precision,
                         bool refine, bool factoring) {
  memory_model m;
  m.n = n;
  m.nrhs = nrhs;
  m.block = block;
  m.grid = grid;
  m.element_bytes = element_bytes;
  m.lookahead = factoring ? lookahead : -1;
  const bool mixed = is_mixed(precision);
  m.matrix_copies = mixed ? 1.5 : refine ? 2 : 1;
  m.vectors = mixed || refine ? 4 : 3;
  m.columns = precision == "mixed-krylov" ? krylov_columns : 0;
  return m;
}

double memory_need::total() const { return std::max(gemm, matrices + panels + io); }

memory_need need_per_rank(const memory_model& m) {
  const index_t b = std::min(m.block, m.n);
  const index_t a_cols = m.cols > 0 ? m.cols : m.n;
  const cyclic_map rows(m.n, b, m.grid.p), cols(a_cols, b, m.grid.q), rhs(m.nrhs, b, m.grid.q);
  // Process row and column 0 hold the most rows and columns: rank 0 has the largest share.
  const double e = static_cast<double>(m.element_bytes);
  const double mr = static_cast<double>(rows.local_extent(0));
  const double nc = static_cast<double>(cols.local_extent(0));
  const double kc = static_cast<double>(rhs.local_extent(0));
  memory_need need;
  need.matrices = e * (m.matrix_copies * mr * nc + m.vectors * mr * kc + m.columns * mr);
  need.a_share = e * mr * nc;
  need.a_copies = (m.matrix_copies - 1) * need.a_share;
  if (m.lookahead >= 0) {
    const double in_flight =
        static_cast<double>(std::min<index_t>(m.lookahead + 1, rows.block_count()));
    const double u_rows =
        static_cast<double>(b) * std::min(nc, double(lu_options{}.update_columns));
    const double interchange = 2 * std::min(interchange_entries, 2 * b * nc);
    need.panels = e * (in_flight * (mr + b) * b + 2 * u_rows + interchange);
  }
  need.io = static_cast<double>(
      io::io_buffer_bytes(m.n, a_cols, b, m.grid, m.element_bytes, comm::transfer_limit()));
  need.gemm = 3 * e * static_cast<double>(m.gemm_order) * static_cast<double>(m.gemm_order);
  return need;
}

std::int64_t parse_size(std::string_view text) {
  double value = 0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), value);
  std::string unit(end, text.data() + text.size());
  std::transform(unit.begin(), unit.end(), unit.begin(),
                 [](unsigned char c) { return std::tolower(c); });
  double scale = 0;
  if (unit.empty() || unit == "b") scale = 1;
  const std::string prefixes = "kmgt";
  if (const auto p = prefixes.find(unit.empty() ? ' ' : unit[0]); p != std::string::npos) {
    const std::string rest = unit.substr(1);
    const double power = static_cast<double>(p + 1);
    if (rest.empty() || rest == "ib") scale = std::pow(1024.0, power);
    if (rest == "b") scale = std::pow(1000.0, power);
  }
  const double bytes = value * scale;
  if (ec != std::errc() || scale == 0 || !(bytes >= 1) || bytes > 9e18)
    throw error(error_kind::usage, "not a memory size: '" + std::string(text) +
                                       "' (a positive number of bytes, or with K, M, G, T "
                                       "(powers of 1024) or kB, MB, GB, TB)");
  return static_cast<std::int64_t>(bytes);
}

void require_memory(const process_grid& grid, const memory_model& m, std::int64_t limit,
                    const std::string& what) {
  const int sharing = comm::ranks_on_node(grid.all());
  const memory_need need = need_per_rank(m);
  comm::together(grid.all(), [&] {
    const allowance a = allowed(limit, sharing);
    const std::string available = megabytes(a.bytes) + " MB available per rank (rank " +
                                  std::to_string(grid.rank()) + ": " + a.source + ")";
    // Only the block is at fault when a smaller one would let everything fit.
    const index_t smaller =
        need.total() > a.bytes && m.lookahead >= 0 ? block_that_fits(m, a.bytes) : 0;
    if (smaller > 0)
      throw error(error_kind::usage,
                  "the block size " + std::to_string(m.block) + " is too large for " + what +
                      ": about " + megabytes(need.total()) + " MB per rank needed, its panels " +
                      megabytes(need.panels) + " MB of it, " + available + "; --block " +
                      std::to_string(smaller) + " or less would fit");
    if (need.total() > a.bytes)
      throw error(error_kind::output,
                  "not enough memory for " + what + ": about " + megabytes(need.total()) +
                      " MB per rank needed (matrices " + megabytes(need.matrices) + ", panels " +
                      megabytes(need.panels) + " with block " + std::to_string(m.block) + ", I/O " +
                      megabytes(need.io) +
                      (need.gemm > 0 ? ", GEMM operands " + megabytes(need.gemm) : "") + "), " +
                      available + "; " + what_fits(m, a.bytes, grid.size()));
  });
}

}  // namespace gridlu::workflows
