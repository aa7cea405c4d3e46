// The performance model: the rates `gridlu calibrate` measures, and what the blocked LU
// of any order, grid, block and look-ahead costs step by step at those rates. Pure
// arithmetic: no MPI, no files.
#pragma once

#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gridlu/grid.hpp"
#include "gridlu/lu.hpp"

namespace gridlu::workflows {

// A kernel's rate per rank, measured with every rank running it at once, at a few
// shapes: `rows` x `k` (GEMM: a rank-k update of rows x min(rows, 2048); panel: the LU of
// a rows x k panel; trsm: k x 2048 right-hand sides of a unit k x k triangle).
struct rate_sample {
  index_t rows = 0, k = 0;
  double gflops = 0;
};
class rate_table {
public:
  rate_table() = default;
  explicit rate_table(std::vector<rate_sample> samples);
  const std::vector<rate_sample>& samples() const { return samples_; }
  // Interpolated in log(rows) and log(k) between the samples, constant beyond them.
  double gflops_at(double rows, double k) const;
  double best() const;

private:
  std::vector<rate_sample> samples_;
  std::vector<double> rows_, ks_, grid_;  // the rate at each (rows, k) of the axes
};

// A message of b bytes takes latency + b / bandwidth.
struct link_cost {
  double latency = 0, bandwidth = 1e9;
  double seconds(double bytes) const { return latency + bytes / bandwidth; }
};

// A process column's costs inside a factorization against what the figures alone predict
// for them (measured / modelled): the panel over several process rows, its pivot
// reductions, the interchanges with their messages, and the U block row's scatter and
// gather. Each rank waits there for the slowest of its column and copies blocks the GEMM
// has pushed out of cache, which a ping-pong between idle ranks does not see. 1 where a
// single rank was calibrated.
struct column_factors {
  double panel = 1, pivot_search = 1, interchange = 1, broadcast = 1;
};

struct kernel_rates {
  rate_table gemm, trsm, panel;
  double swap_seconds = 0;  // per entry a row interchange moves within a rank
  // The trailing update's GEMM rate inside a factorization, as a share of the table's:
  // between the chunks of an update the interchanges and the triangular solve take the
  // caches, which GEMM alone keeps.
  double gemm_in_factorization = 1;
  column_factors column;
};

struct calibration {
  // The JSON's "format"; files of any other are refused.
  static constexpr const char* format = "gridlu calibration 2";
  std::string source;  // where and when it was measured
  int ranks = 1;
  std::vector<std::pair<std::string, kernel_rates>> types;  // by type name: "float64", ...
  link_cost point_to_point;
  link_cost row_broadcast, column_broadcast;  // one step of a broadcast tree
  double write_bandwidth = 0;                 // checkpoint directory, bytes/s, all ranks
  const kernel_rates& rates(const std::string& type) const;  // a usage error if absent
  nlohmann::json json() const;
  static calibration from_json(const nlohmann::json& j);  // an input error if malformed
};

// Rates measured on the development machines (docs/model.md); `plan` uses them when no
// calibration is given, the progress line always (it scales them to the run's own pace).
calibration builtin_calibration();

// The largest order the model walks, its cost growing with the panel steps: no memory
// holds a larger matrix (2^24 squared float32 entries are a petabyte).
inline constexpr index_t model_order_limit = index_t{1} << 24;

struct model_case {
  index_t n = 0;
  std::string type = "float64";
  grid_shape grid;
  index_t block = 224;
  int lookahead = 1;
};

struct prediction {
  double seconds = 0;
  lu_phases phases;  // busy time of a typical rank per phase; wait: the rest
  double gflops = 0;
  double efficiency = 0;        // against every rank at its best measured GEMM rate
  std::vector<double> columns;  // columns done after each step
  std::vector<double> elapsed;  // seconds after each step
  // Predicted seconds from `done` columns to the end.
  double remaining(index_t done) const;
};

// The factorization's time, summed over its panel steps: per step the panel (its flops
// at the panel rate, and with more than one process row one pivot reduction per column),
// its broadcast along the process rows, the interchanges, the U block row (triangular
// solve, and its scatter and gather down a process column) and the trailing GEMM. With
// look-ahead and more than one process column a panel overlaps the previous update.
// A usage error above model_order_limit.
prediction predict(const calibration& c, const model_case& m);

}  // namespace gridlu::workflows
