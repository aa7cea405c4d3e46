// `gridlu plan`: memory, disk, grid, block, time and checkpoint interval of a solve on
// an allocation that is not there yet, from the performance model.
#include <algorithm>
#include <cmath>
#include <limits>

#include "gridlu/error.hpp"
#include "workflows/calibrate.hpp"
#include "workflows/dispatch.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

// Blocks the plan tries: the range where the GEMM rate is near its best on the
// machines measured, and small enough for the panels not to dominate.
constexpr index_t candidate_blocks[] = {64, 96, 128, 160, 192, 224, 256, 320, 384};

std::vector<grid_shape> grids_of(int ranks) {
  std::vector<grid_shape> g;
  for (int p = 1; p <= ranks; ++p)
    if (ranks % p == 0) g.push_back({p, ranks / p});
  return g;
}

std::vector<index_t> blocks_of(const plan_options& o) {
  if (o.block > 0) return {o.block};
  std::vector<index_t> b;
  for (const index_t nb : candidate_blocks)
    if (nb <= o.n) b.push_back(nb);
  if (b.empty()) b.push_back(o.n);
  return b;
}

memory_need memory_of(const plan_options& o, grid_shape grid, index_t block) {
  const auto bytes = static_cast<std::int64_t>(element_bytes(o.type));
  return need_per_rank(
      solve_model(grid, o.n, o.nrhs, block, bytes, o.lookahead, o.precision, false));
}

// The type the factorization runs in: mixed precision factors a single-precision copy.
std::string factored_type(const plan_options& o) {
  if (!is_mixed(o.precision)) return o.type;
  return o.type == "complex128" ? "complex64" : "float32";
}

void require_sane(const plan_options& o) {
  if (o.n < 1) throw error(error_kind::usage, "--n must be 1 or more");
  if (o.nodes < 1 || o.cores_per_node < 1)
    throw error(error_kind::usage, "--nodes and --cores-per-node must be 1 or more");
  if (!(o.memory_per_node > 0)) throw error(error_kind::usage, "--mem-per-node must be above 0");
  if (o.mtbf_hours < 0) throw error(error_kind::usage, "--mtbf must not be negative");
  if (o.grid && o.grid->p * o.grid->q != o.nodes * o.cores_per_node)
    throw error(error_kind::usage, "the grid must have nodes x cores-per-node ranks");
  block_for(o.block, o.n, default_block);
  require_precision(o.precision, o.type);
}

}  // namespace

double checkpoint_interval(double write, double mtbf) {
  if (write >= 2 * mtbf) return mtbf;
  const double x = write / (2 * mtbf);
  return std::sqrt(2 * write * mtbf) * (1 + std::sqrt(x) / 3 + x / 9) - write;
}

double expected_wall_time(double work, double interval, double write, double restart, double mtbf) {
  return mtbf * std::exp(restart / mtbf) * std::expm1((interval + write) / mtbf) * work / interval;
}

plan_result plan(const plan_options& o, const calibration& c) {
  require_sane(o);
  plan_result r;
  r.asked = o;
  r.calibration_source = c.source;
  r.ranks = o.nodes * o.cores_per_node;
  const double room = o.memory_per_node / o.cores_per_node;
  r.factored_type = factored_type(o);
  for (const grid_shape g : o.grid ? std::vector{*o.grid} : grids_of(r.ranks))
    for (const index_t nb : blocks_of(o))
      r.candidates.push_back({g, nb, predict(c, {o.n, r.factored_type, g, nb, o.lookahead})});
  // Fastest first among those that fit; all of them when none does.
  for (auto& x : r.candidates) x.fits = memory_of(o, x.grid, x.block).total() <= room;
  std::stable_sort(r.candidates.begin(), r.candidates.end(), [](const auto& x, const auto& y) {
    return std::pair(!x.fits, x.predicted.seconds) < std::pair(!y.fits, y.predicted.seconds);
  });
  const plan_candidate& best = r.chosen();
  r.memory = memory_of(o, best.grid, best.block);
  r.memory_per_rank = r.memory.total();
  r.fits = best.fits;
  // A checkpoint holds the matrix being factored.
  const double e =
      static_cast<double>(o.n) * static_cast<double>(o.n) * element_bytes(r.factored_type);
  r.checkpoint_bytes = e;
  r.checkpoint_disk_bytes = 2 * e;  // the last checkpoint stays until the next is whole
  r.checkpoint_write_seconds = e / c.write_bandwidth;
  r.expected_seconds = best.predicted.seconds;
  if (o.mtbf_hours > 0) {
    const double mtbf = o.mtbf_hours * 3600, write = r.checkpoint_write_seconds;
    r.checkpoint_interval = checkpoint_interval(write, mtbf);
    r.expected_seconds =
        expected_wall_time(best.predicted.seconds, r.checkpoint_interval, write, write, mtbf);
  }
  return r;
}

grid_shape model_grid(int ranks, index_t n, const std::string& type, index_t block, int lookahead) {
  static const calibration c = builtin_calibration();
  plan_options o;
  o.n = n;
  o.type = type;
  o.cores_per_node = ranks;
  o.memory_per_node = std::numeric_limits<double>::infinity();  // the memory check is apart
  o.block = block;
  o.lookahead = lookahead;
  return plan(o, c).chosen().grid;
}

}  // namespace gridlu::workflows
