// `gridlu calibrate` and `gridlu plan`: the performance model measured on these ranks,
// and an allocation planned with it.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gridlu/grid.hpp"
#include "workflows/memory.hpp"
#include "workflows/model.hpp"

namespace gridlu::workflows {

struct calibrate_options {
  std::vector<std::string> types = {"float32", "float64", "complex64", "complex128"};
  std::string checkpoint_dir = ".";                    // whose write bandwidth is measured
  std::int64_t write_bytes = std::int64_t{256} << 20;  // written by all ranks together
};

// Collective. GEMM, triangular solve and panel rates of every rank at once, the row
// interchanges' cost, point-to-point latency and bandwidth, a broadcast step along a
// process row and a column, and the checkpoint directory's write bandwidth.
calibration calibrate(const process_grid& grid, const calibrate_options& o);

struct plan_options {
  index_t n = 0, nrhs = 1;
  std::string type = "float64", precision = "double";
  int nodes = 1, cores_per_node = 1;
  double memory_per_node = 0;  // bytes
  double mtbf_hours = 0;       // 0: no failures expected, no periodic checkpoints
  std::optional<grid_shape> grid;
  index_t block = 0;  // 0: chosen by the model
  int lookahead = 1;
};

// One configuration the plan considered.
struct plan_candidate {
  grid_shape grid;
  index_t block = 0;
  prediction predicted;
  bool fits = false;  // in the memory per rank
};

struct plan_result {
  plan_options asked;
  std::string calibration_source;
  std::string factored_type;  // the type, or the single-precision one for mixed precision
  int ranks = 0;
  memory_need memory;  // per rank, of the chosen configuration
  double memory_per_rank = 0;
  bool fits = false;
  double checkpoint_bytes = 0, checkpoint_disk_bytes = 0;
  double checkpoint_write_seconds = 0;
  double checkpoint_interval = 0;          // seconds of work between checkpoints; 0: none needed
  double expected_seconds = 0;             // with checkpoints, and the work failures redo
  std::vector<plan_candidate> candidates;  // best first
  const plan_candidate& chosen() const { return candidates.front(); }
  nlohmann::json json() const;
};

// Pure: no MPI, no files.
plan_result plan(const plan_options& o, const calibration& c);

// The checkpoint interval, in seconds of work, for a checkpoint that takes `write`
// seconds and a mean time between failures `mtbf`: Young's first-order optimum
// sqrt(2 write mtbf) (Young 1974) with Daly's higher-order correction (Daly 2006).
double checkpoint_interval(double write, double mtbf);

// The expected wall time of `work` seconds of computation with a checkpoint of `write`
// seconds after every `interval` seconds of it (or once, after all of it, if shorter), `restart`
// seconds to resume after each failure, and failures at exponentially distributed times `mtbf`
// apart on average (Daly 2006; the restart is taken equal to the write here, a checkpoint being
// read as fast as it is written).
double expected_wall_time(double work, double interval, double write, double restart, double mtbf);

// The grid the model prefers for `ranks` ranks on an order-n matrix of `type`.
grid_shape model_grid(int ranks, index_t n, const std::string& type, index_t block, int lookahead);

}  // namespace gridlu::workflows
