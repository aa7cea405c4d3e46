// The solve job: checks before any work, reading, factoring with checkpoints, solving,
// checking and writing — each a small stage of run_job.
#include <algorithm>
#include <cmath>
#include <filesystem>
#include <optional>
#include <utility>

#include "factor/numerical.hpp"
#include "gridlu/accuracy.hpp"
#include "gridlu/checkpoint.hpp"
#include "gridlu/io.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/version.hpp"
#include "io/staged.hpp"
#include "workflows/budget.hpp"
#include "workflows/dispatch.hpp"
#include "workflows/model.hpp"
#include "workflows/stop.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

constexpr std::int64_t format_version = 2;

std::string absolute(const std::string& p) {
  return p.empty() ? p : std::filesystem::absolute(p).lexically_normal().string();
}

trust_rules rules_of(const job& j) {
  trust_rules rules;
  rules.entry_error = std::max(0.0, j.entry_error);
  return rules;
}

solve_with system_of(const job& j) {
  if (j.solve_with == "A^T") return solve_with::transpose;
  if (j.solve_with == "A^H") return solve_with::adjoint;
  return solve_with::a;
}

std::string text_attribute(const io::file& f, const std::string& key) {
  return f.get_attribute_as<std::string>("/", key).value_or("");
}
std::int64_t integer_attribute(const io::file& f, const std::string& key) {
  return f.get_attribute_as<std::int64_t>("/", key).value_or(-1);
}

// ---------------------------------------------------------------------------------------
// Before any work: options, and outputs against inputs.

void check_options(const solve_options& o) {
  if (o.block < 0) throw error(error_kind::usage, "the block size must be at least 1");
  if (!o.factors.empty() && !o.save_factors.empty())
    throw error(error_kind::usage, "--factors and --save-factors do not go together");
  if (!o.factors.empty() && !o.checkpoint_dir.empty())
    throw error(error_kind::usage, "--factors needs no factorization and so no --checkpoint");
  if (o.solve_with != "A" && o.solve_with != "A^T" && o.solve_with != "A^H")
    throw error(error_kind::usage, "the system must be A, A^T or A^H, not " + o.solve_with);
  if ((o.checkpoint_every > 0 || o.stop_after > 0) && o.checkpoint_dir.empty())
    throw error(error_kind::usage, "--checkpoint-every and --stop-after need --checkpoint DIR");
  require_precision(o.precision);
  if (is_mixed(o.precision) && (!o.factors.empty() || !o.save_factors.empty()))
    throw error(error_kind::usage, "--precision " + o.precision +
                                       " keeps its single-precision factors in memory only; "
                                       "--factors and --save-factors go with --precision double");
  if (is_mixed(o.precision) && o.refine)
    throw error(error_kind::usage, "--precision " + o.precision +
                                       " refines X already; --refine goes with --precision double");
}

job job_of(const solve_options& o) {
  job j;
  j.id = new_job_id();
  j.input = absolute(o.input);
  j.matrix_dataset = o.matrix_dataset;
  j.rhs_file = absolute(o.rhs_file);
  j.rhs_dataset = o.rhs_dataset;
  j.factors = absolute(o.factors);
  j.column_major = o.column_major;
  j.solve_with = o.solve_with;
  j.refine = o.refine;
  j.require_digits = o.require_digits;
  j.entry_error = o.entry_error;
  j.precision = o.precision;
  j.block = o.block;
  j.lookahead = o.lookahead;
  j.force = o.force;
  j.checkpoint_every = o.checkpoint_every;
  j.output = absolute(o.output);
  j.save_factors = absolute(o.save_factors);
  j.checkpoint_dir = absolute(o.checkpoint_dir);
  return j;
}

struct named_path {
  std::string what, path;
};

// The files a run of the job writes, each with the words that name it to the user.
std::vector<named_path> outputs_of(const job& j, const std::string& report) {
  std::vector<named_path> out{{"--out", j.output}};
  if (!j.save_factors.empty()) out.push_back({"--save-factors", j.save_factors});
  if (!report.empty()) out.push_back({"--report", report});
  if (!j.checkpoint_dir.empty())
    for (const char* name : {"job.json", "checkpoint.h5", "complete.json", "lock"})
      out.push_back({"the checkpoint directory's " + std::string(name),
                     (std::filesystem::path(j.checkpoint_dir) / name).string()});
  return out;
}

std::vector<named_path> inputs_of(const job& j) {
  std::vector<named_path> in{{"the input " + j.input, j.input}};
  if (!j.rhs_file.empty()) in.push_back({"--rhs-file " + j.rhs_file, j.rhs_file});
  if (!j.factors.empty()) in.push_back({"--factors " + j.factors, j.factors});
  return in;
}

// No output may be an input or another output, whatever --force says; each output's
// directory must accept it. Checked by rank 0 before anything is read or written.
void check_paths(const process_grid& grid, const job& j, const std::string& report) {
  comm::together(grid.all(), [&] {
    if (grid.rank() != 0) return;
    const auto outputs = outputs_of(j, report);
    const auto inputs = inputs_of(j);
    std::vector<io::file_identity> ids;
    for (const auto& o : outputs) ids.push_back(io::identify(o.path));
    for (std::size_t k = 0; k < outputs.size(); ++k) {
      for (const auto& in : inputs)
        if (io::same_file(ids[k], io::identify(in.path)))
          throw error(error_kind::usage, outputs[k].what + " (" + outputs[k].path + ") is " +
                                             in.what + "; gridlu never writes over an input");
      for (std::size_t m = 0; m < k; ++m)
        if (io::same_file(ids[k], ids[m]))
          throw error(error_kind::usage, outputs[m].what + " and " + outputs[k].what +
                                             " name the same file " + outputs[k].path);
    }
    const auto policy = j.force ? io::existing::replace : io::existing::refuse;
    io::check_output_target(j.output, policy);
    if (!j.save_factors.empty()) io::check_output_target(j.save_factors, policy);
    if (!report.empty()) io::check_output_target(report, policy);
  });
}

// ---------------------------------------------------------------------------------------
// Inputs.

// Shape checks of a dataset that must hold numbers gridlu can solve with.
void require_numbers(const io::dataset_shape& s, const std::string& name, const std::string& path) {
  if (!s.usable)
    throw error(error_kind::input, name + " in " + path + " holds " + s.type +
                                       "; gridlu reads float32, float64 and complex (compound of "
                                       "floats named r and i)");
}

// The input files of a solve, opened and checked.
struct inputs {
  io::file input;
  std::optional<io::file> other;  // B's own file, with --rhs-file
  io::dataset_shape a_shape, b_shape;
  const io::file& rhs() const { return other ? *other : input; }
  bool rhs_1d() const { return b_shape.dims.size() == 1; }
};

void check_matrix_shape(const io::dataset_shape& a, const std::string& a_name) {
  if (a.dims.size() != 2)
    throw error(error_kind::input, a_name + " has " + std::to_string(a.dims.size()) +
                                       " dimensions; the matrix must be 2-D");
  if (a.dims[0] != a.dims[1])
    throw error(error_kind::input, a_name + " is " + std::to_string(a.dims[0]) + " x " +
                                       std::to_string(a.dims[1]) + "; the matrix must be square");
  if (a.dims[0] < 1) throw error(error_kind::input, a_name + " is empty");
}

void check_rhs_shape(const io::dataset_shape& b, const io::dataset_shape& a,
                     const std::string& b_name) {
  const std::string n = std::to_string(a.dims[0]);
  if (b.dims.empty() || b.dims.size() > 2 || b.dims[0] != a.dims[0])
    throw error(error_kind::input, b_name + " must have " + n + " rows (A is " + n + " x " + n +
                                       ") and one or two dimensions");
  if (b.dims.size() == 2 && b.dims[1] < 1)
    throw error(error_kind::input, b_name + " has no columns");
  if (b.is_complex && !a.is_complex)
    throw error(error_kind::input, b_name + " is complex but A is real");
}

// Opens and checks the inputs and records what they are in the job.
inputs open_inputs(const process_grid& grid, job& j) {
  inputs in{io::file(grid, j.input, io::file::mode::read), std::nullopt, {}, {}};
  if (!j.rhs_file.empty()) in.other.emplace(grid, j.rhs_file, io::file::mode::read);
  in.a_shape = in.input.shape(j.matrix_dataset);
  check_matrix_shape(in.a_shape, j.matrix_dataset + " in " + j.input);
  require_numbers(in.a_shape, j.matrix_dataset, j.input);
  in.b_shape = in.rhs().shape(j.rhs_dataset);
  require_numbers(in.b_shape, j.rhs_dataset, in.rhs().path());
  check_rhs_shape(in.b_shape, in.a_shape, j.rhs_dataset + " in " + in.rhs().path());
  const auto a_id = io::identify(j.input);
  const auto b_id = io::identify(in.rhs().path());
  j.type = in.a_shape.type;
  j.n = in.a_shape.dims[0];
  j.nrhs = in.rhs_1d() ? 1 : in.b_shape.dims[1];
  j.input_size = a_id.size;
  j.input_mtime = a_id.mtime;
  j.rhs_size = b_id.size;
  j.rhs_mtime = b_id.mtime;
  require_precision(j.precision, j.type);
  if (j.entry_error < 0)
    j.entry_error = in.input.get_attribute_as<double>("/", "entry_error").value_or(0);
  return in;
}

template <scalar T>
void refuse_nonfinite(const dist_matrix<T>& m, const std::string& dataset, const std::string& path,
                      bool one_d, bool transposed) {
  if (auto at = first_nonfinite(m)) {
    // Name the entry as the file's reader sees it.
    if (transposed) std::swap(at->first, at->second);
    throw error(error_kind::input, entry_name(dataset, *at, one_d) + " in " + path +
                                       " is not a finite number (NaN or Inf)");
  }
}

error changed(const std::string& dataset, const std::string& path) {
  return error(error_kind::input, dataset + " in " + path +
                                      " changed since the checkpoint was made; it cannot be "
                                      "resumed");
}

// ---------------------------------------------------------------------------------------
// Saved factors.

// Checks a factors file against the job before its data is read.
void check_factors_file(const io::file& f, const job& j) {
  const std::string& path = j.factors;
  if (text_attribute(f, "gridlu_kind") != "factors")
    throw error(error_kind::input, path + " is not a gridlu factors file");
  if (integer_attribute(f, "gridlu_format") != format_version)
    throw error(error_kind::input, path + " was written in another format than this gridlu's (" +
                                       std::to_string(format_version) + ")");
  if (integer_attribute(f, "n") != j.n || text_attribute(f, "type") != j.type)
    throw error(error_kind::input, "the factors in " + path + " are not of a " +
                                       std::to_string(j.n) + " x " + std::to_string(j.n) + " " +
                                       j.type + " matrix like " + j.input);
  const std::int64_t column_major = integer_attribute(f, "column_major");
  if (column_major != 0 && column_major != 1)
    throw error(error_kind::input, path + " lacks a valid attribute column_major");
  if ((column_major != 0) != j.column_major)
    throw error(error_kind::usage, "the factors in " + path + " were made from A read " +
                                       (column_major ? "with" : "without") +
                                       " --column-major; solve " +
                                       (column_major ? "with" : "without") + " it too");
  if (integer_attribute(f, "input_size") != j.input_size)
    throw error(error_kind::input, "the factors in " + path + " were made from another A (" +
                                       j.input + " has a different size)");
  const auto lu = f.shape("LU");
  if (lu.dims.size() != 2 || lu.dims[0] != j.n || lu.dims[1] != j.n || lu.type != j.type)
    throw error(error_kind::input, "the dataset LU in " + path + " is not " + std::to_string(j.n) +
                                       " x " + std::to_string(j.n) + " " + j.type);
}

std::vector<index_t> checked_pivots(const io::file& f, index_t n) {
  auto pivots = f.read_indices("pivots");
  bool valid = static_cast<index_t>(pivots.size()) == n;
  for (index_t i = 0; valid && i < n; ++i) valid = pivots[i] >= i && pivots[i] < n;
  if (!valid) throw error(error_kind::input, "the pivots in " + f.path() + " are damaged");
  return pivots;
}

template <scalar T>
void write_factors(const process_grid& grid, const job& j, const dist_matrix<T>& lu,
                   const std::vector<index_t>& pivots) {
  io::staged_output out(grid, j.save_factors,
                        j.force ? io::existing::replace : io::existing::refuse, lu.bytes());
  {
    io::file f(grid, out.path(), io::file::mode::create);
    f.write("LU", lu);
    f.write_indices("pivots", pivots);
    write_attributes(f, "/", j);
    f.set_attribute("/", "gridlu_kind", std::string("factors"));
    f.set_attribute("/", "gridlu_format", format_version);
    f.set_attribute("/", "gridlu_version", std::string(version));
    f.close();
  }
  out.commit();
}

// ---------------------------------------------------------------------------------------
// The factorization, with checkpoints when the job has a directory: periodic ones, and
// a last one before stopping on a signal or when the time budget would run out.

// The seconds a factorization has left: the model's time for the remaining steps, scaled
// by how this run's steps so far compare with the model's time for them.
class pace {
public:
  pace(grid_shape grid, const job& j, index_t start)
      : model_(predict(builtin_calibration(),
                       {j.n, j.type, grid, j.block, static_cast<int>(j.lookahead)})),
        start_(model_.remaining(start)) {}
  double left(index_t done, double seconds) const {
    const double rest = model_.remaining(done), modelled = start_ - rest;
    return modelled > 0 ? rest * seconds / modelled : rest;
  }

private:
  prediction model_;
  double start_;
};

struct checkpointing {
  const checkpoint::directory& dir;
  checkpoint::progress done;  // of the earlier runs, then updated
};

template <scalar T>
class checkpointed_factor {
public:
  checkpointed_factor(const process_grid& grid, const job& j, const run_settings& run,
                      dist_matrix<T>& a, checkpointing* ck, solve_result& r)
      : grid_(grid), job_(j), run_(run), a_(a), ck_(ck), r_(r) {}

  // Returns false when the run stopped early with a checkpoint.
  bool operator()(lu_result& lu) {
    const index_t n = a_.rows();
    done_before_ = total_ - remaining(lu.columns_done);
    before_ = ck_ ? ck_->done.elapsed_seconds : 0.0;
    save_estimate_ = budget::first_save_estimate(static_cast<double>(n) * n * sizeof(T));
    start_ = last_save_ = comm::wtime();
    if (run_.progress) pace_.emplace(grid_.shape(), job_, lu.columns_done);
    lu_options lo;
    lo.lookahead = static_cast<int>(job_.lookahead);
    lo.after_step = [&](const lu_result& state) { return after_step(state); };
    const double seconds = timed(grid_, [&] { lu = factor(a_, std::move(lu), lo); });
    r_.factor_seconds = seconds;
    r_.phases = slowest(grid_, lu.phases);
    r_.gflops = (total_ - done_before_) / seconds * 1e-9;
    r_.columns_done = lu.columns_done;
    // With everything eliminated, one last checkpoint covers the solve phase too.
    if (ck_ && !r_.stopped && saved_at_ != n) save(lu);
    r_.factor_seconds_total = before_ + seconds;
    if (ck_) r_.checkpoints = ck_->done.checkpoints;
    return !r_.stopped;
  }

private:
  static constexpr std::int64_t signal_flag = 1, periodic_flag = 2, budget_flag = 4;

  double remaining(index_t done) const {
    return lu_flops<T>(static_cast<double>(a_.rows() - done));
  }

  void save(const lu_result& state) {
    ck_->done.columns_done = state.columns_done;
    ck_->done.elapsed_seconds = before_ + (comm::wtime() - start_);
    ++ck_->done.checkpoints;
    save_estimate_ = timed(grid_, [&] { ck_->dir.save(a_, state, ck_->done, job_.id); });
    r_.write_seconds += save_estimate_;
    last_save_ = comm::wtime();
    saved_at_ = state.columns_done;
  }

  std::int64_t requests(const lu_result& state, double now) {
    std::int64_t flags = stop_requests::pending() ? signal_flag : 0;
    if (job_.checkpoint_every > 0 && now - last_save_ >= job_.checkpoint_every)
      flags |= periodic_flag;
    const double seconds = now - start_;
    const index_t done = state.columns_done;
    const index_t next = std::min(a_.rows(), done + (1 + job_.lookahead) * a_.block());
    budget::step_view v;
    v.elapsed = now - run_.started;
    v.budget = run_.stop_after;
    v.next_flops = remaining(done) - remaining(next);
    v.rate = seconds > 0 ? (total_ - remaining(done) - done_before_) / seconds : 0.0;
    v.save_seconds = save_estimate_;
    v.finished = done == a_.rows();
    v.read_seconds = r_.read_seconds;
    if (budget::must_stop(v)) flags |= budget_flag;
    comm::max(grid_.all(), &flags, 1);
    return flags;
  }

  step_request after_step(const lu_result& state) {
    const double now = comm::wtime(), seconds = now - start_;
    if (run_.progress) {
      const double flops = total_ - remaining(state.columns_done) - done_before_;
      run_.progress(1.0 - remaining(state.columns_done) / total_, seconds,
                    seconds > 0 ? flops / seconds * 1e-9 : 0.0,
                    pace_->left(state.columns_done, seconds));
    }
    const std::int64_t flags = requests(state, now);
    if (!over_at_first_step_) over_at_first_step_ = (flags & budget_flag) != 0;
    if (flags == 0) return step_request::go_on;
    if (!state.settled) return step_request::settle;  // a checkpoint needs a settled state
    if (ck_) save(state);
    if (!(flags & (signal_flag | budget_flag))) return step_request::go_on;
    r_.stopped = true;
    r_.budget_too_short = (flags & budget_flag) && *over_at_first_step_;
    return step_request::stop;
  }

  const process_grid& grid_;
  const job& job_;
  const run_settings& run_;
  dist_matrix<T>& a_;
  checkpointing* ck_;
  solve_result& r_;
  const double total_ = lu_flops<T>(static_cast<double>(a_.rows()));
  double done_before_ = 0, before_ = 0, save_estimate_ = 0, start_ = 0, last_save_ = 0;
  index_t saved_at_ = -1;
  std::optional<bool> over_at_first_step_;  // the budget was exceeded at the first step
  std::optional<pace> pace_;                // for the progress line's estimate
};

// What asked this rank to stop, if it was this rank that was asked.
std::string stopped_by() {
  const std::string why = stop_requests::reason();
  return why.empty() ? "a signal to another rank" : why;
}

// ---------------------------------------------------------------------------------------
// One run of a job, stage by stage.

template <scalar T>
class job_run {
public:
  job_run(const process_grid& grid, job& j, const run_settings& run, const inputs& in,
          checkpointing* ck)
      : grid_(grid),
        j_(j),
        run_(run),
        in_(in),
        ck_(ck),
        a_(grid, j.n, j.n, j.block),
        b_(grid, j.n, j.nrhs, j.block) {
    r_.what = j;
    r_.precision.asked = j.precision;
    r_.precision.fallback = j.fallback;  // an earlier run's, continued
  }

  solve_result operator()() {
    const double start = comm::wtime();
    std::optional<io::file> factors;
    if (!j_.factors.empty()) factors.emplace(grid_, j_.factors, io::file::mode::read);
    if (factors) check_factors_file(*factors, j_);
    const saved state = saved_state();
    r_.read_seconds = timed(grid_, [&] { read(factors ? &*factors : nullptr, state); });
    std::optional<dist_matrix<T>> x;
    if (is_mixed(j_.precision) && state != saved::working)
      if (!try_mixed(state == saved::single, x)) return stopped(start);
    if (!x) {
      if (!factors) {
        if (!checkpointed_factor<T>(grid_, j_, run_, a_, ck_, r_)(lu_)) return stopped(start);
        refuse_singular(lu_);
        if (!j_.save_factors.empty())
          r_.write_seconds += timed(grid_, [&] { write_factors(grid_, j_, a_, lu_.pivots); });
      }
      x.emplace(solve_and_check(factors ? &*factors : nullptr));
    }
    r_.write_seconds += timed(grid_, [&] { write_solution(*x); });
    finish();
    r_.what = j_;
    r_.total_seconds = comm::wtime() - start;
    return r_;
  }

private:
  // A checkpoint's working matrix: of T, or the single-precision one of a mixed job.
  enum class saved { none, working, single };

  saved saved_state() const {
    if (!ck_ || !ck_->dir.has_state()) return saved::none;
    return ck_->dir.summary().type == scalar_traits<T>::name ? saved::working : saved::single;
  }

  solve_result stopped(double start) {
    if (!ck_)
      throw error(error_kind::stopped,
                  "stopped on request (" + stopped_by() +
                      ") before X was written; nothing was kept: a solve keeps its work only "
                      "with --checkpoint DIR");
    r_.what = j_;
    r_.total_seconds = comm::wtime() - start;
    return r_;
  }

  // Mixed precision: factor a single-precision copy of op(A) (held in a_ in double) and
  // refine. Returns false when the run stopped with a checkpoint; x holds the answer
  // unless mixed precision gave way, and then a_ is still op(A) for a double factorization.
  bool try_mixed(bool from_state, std::optional<dist_matrix<T>>& x) {
    using S = narrow_t<T>;
    if constexpr (std::is_same_v<S, T>) {
      throw error(error_kind::internal, "mixed precision reached a single-precision system");
    } else {
      dist_matrix<S> single(grid_, j_.n, j_.n, j_.block);
      lu_result lu;
      if (from_state) {
        lu = ck_->dir.load(single);
      } else if (!narrow_copy(a_, single)) {
        fall_back(mixed_out_of_range);
        return true;
      }
      if (!checkpointed_factor<S>(grid_, j_, run_, single, ck_, r_)(lu)) return false;
      r_.precision.single_factor_seconds = r_.factor_seconds;
      if (lu.first_zero_pivot >= 0) {
        fall_back(mixed_zero_pivot(lu.first_zero_pivot));
        return true;
      }
      const auto method =
          j_.precision == "mixed-krylov" ? refinement_method::krylov : refinement_method::classical;
      x.emplace(grid_, j_.n, j_.nrhs, j_.block);
      r_.solve_seconds = timed(
          grid_, [&] { r_.precision.mixed = refine_mixed(a_, single, lu.pivots, b_, *x, method); });
      if (!r_.precision.mixed->converged) {
        x.reset();
        fall_back(r_.precision.mixed->why);
        return true;
      }
      refuse_nonfinite_solution(*x, in_.rhs_1d());
      r_.precision.used = j_.precision;
      j_.fallback.clear();
      r_.check_seconds = timed(grid_, [&] {
        const auto from_factors = measure_factors(single, lu.pivots, solve_with::a);
        const auto& figures = r_.precision.mixed->matrix;
        const auto errors = backward_errors(a_, figures, *x, b_, residual(a_, *x, b_));
        r_.trust = judge(from_factors, figures, errors, unit_roundoff<T>(), rules_of(j_));
      });
      return true;
    }
  }

  // Mixed precision gives way to a double factorization of op(A), said at once and
  // recorded in the job, so that a later run continues that factorization.
  void fall_back(const std::string& why) {
    r_.precision.fallback = j_.fallback = why;
    if (run_.notice) run_.notice("mixed precision gave way to double: " + why);
    if (ck_) ck_->dir.record_job(to_json(j_).dump(2) + "\n");
  }

  // The system factored in double: A (its factors then answer op(A)), or in a mixed job
  // op(A) itself, read as such.
  solve_with factored_with() const {
    return is_mixed(j_.precision) ? solve_with::a : system_of(j_);
  }

  void read(const io::file* factors, saved state) {
    if (factors) {
      factors->read("LU", a_);
      lu_.pivots = checked_pivots(*factors, j_.n);
      lu_.columns_done = j_.n;
      r_.refactored = false;
    } else if (state == saved::working) {
      // The inputs must be the ones the checkpoint was made from.
      if (io::checksum_text(in_.input.checksum<T>(j_.matrix_dataset, j_.column_major)) !=
          j_.a_checksum)
        throw changed(j_.matrix_dataset, j_.input);
      lu_ = ck_->dir.load(a_);
    } else if (is_mixed(j_.precision)) {
      const std::string sum = read_system_matrix(a_);
      if (state == saved::single && sum != j_.a_checksum)
        throw changed(j_.matrix_dataset, j_.input);
      j_.a_checksum = sum;
    } else {
      in_.input.read(j_.matrix_dataset, a_, j_.column_major);
      refuse_nonfinite(a_, j_.matrix_dataset, j_.input, false, j_.column_major);
      j_.a_checksum = io::checksum_text(content_checksum(a_));
    }
    in_.rhs().read(j_.rhs_dataset, b_, false);
    refuse_nonfinite(b_, j_.rhs_dataset, in_.rhs().path(), in_.rhs_1d(), false);
    const std::string b_sum = io::checksum_text(content_checksum(b_));
    if (state != saved::none && b_sum != j_.b_checksum)
      throw changed(j_.rhs_dataset, in_.rhs().path());
    j_.b_checksum = b_sum;
    if (ck_) ck_->dir.record_job(to_json(j_).dump(2) + "\n");
  }

  dist_matrix<T> solve_and_check(const io::file* factors) {
    const solve_with with = factored_with();
    dist_matrix<T> x(grid_, j_.n, j_.nrhs, j_.block);
    std::copy_n(b_.data(), b_.ld() * b_.local_cols(), x.data());
    r_.solve_seconds = timed(grid_, [&] { solve(a_, lu_.pivots, x, with); });
    // Before A is read again: a non-finite X needs no figures.
    refuse_nonfinite_solution(x, in_.rhs_1d());
    r_.check_seconds = timed(grid_, [&] {
      const auto from_factors = measure_factors(a_, lu_.pivots, with);
      // Refinement needs the factors and the matrix at once; otherwise the matrix is read
      // again into the factors' storage.
      std::optional<dist_matrix<T>> kept;
      if (j_.refine) kept.emplace(grid_, j_.n, j_.n, j_.block);
      dist_matrix<T>& m = kept ? *kept : a_;
      const std::string sum = read_system_matrix(m);
      if (factors && text_attribute(*factors, "a_checksum") != sum)
        throw error(error_kind::input, "the factors in " + j_.factors + " do not belong to " +
                                           j_.input + ": its matrix differs from theirs");
      const auto figures = measure_matrix(m);
      solution_figures errors;
      if (j_.refine) {
        r_.refined = refine(m, figures, a_, lu_.pivots, with, x, b_);
        errors = r_.refined->final;
        refuse_nonfinite_solution(x, in_.rhs_1d());
      } else {
        errors = backward_errors(m, figures, x, b_, residual(m, x, b_));
      }
      r_.trust = judge(from_factors, figures, errors, unit_roundoff<T>(), rules_of(j_));
    });
    return x;
  }

  // The matrix of the system solved, op(A), from A's file (A^T is A read the other way),
  // and the checksum of A as stored.
  std::string read_system_matrix(dist_matrix<T>& m) {
    const bool flipped = system_of(j_) != solve_with::a;
    in_.input.read(j_.matrix_dataset, m, j_.column_major != flipped);
    refuse_nonfinite(m, j_.matrix_dataset, j_.input, false, j_.column_major != flipped);
    std::string sum = io::checksum_text(content_checksum(m, flipped));
    if constexpr (scalar_traits<T>::is_complex)
      if (system_of(j_) == solve_with::adjoint)
        for (index_t i = 0; i < m.ld() * m.local_cols(); ++i) m.data()[i] = std::conj(m.data()[i]);
    return sum;
  }

  void write_solution(const dist_matrix<T>& x) {
    io::staged_output out(grid_, j_.output, j_.force ? io::existing::replace : io::existing::refuse,
                          x.bytes() + 3 * 8.0 * static_cast<double>(j_.nrhs));
    {
      io::file f(grid_, out.path(), io::file::mode::create);
      f.write("X", x, in_.rhs_1d());
      write_figures(f);
      write_attributes(f, "/", j_);
      f.set_attribute("/", "gridlu_kind", std::string("solution"));
      f.set_attribute("/", "gridlu_format", format_version);
      f.set_attribute("/", "gridlu_version", std::string(version));
      f.set_attribute("/X", "factor_seconds", r_.factor_seconds);
      f.set_attribute("/X", "gflops", r_.gflops);
      f.set_attribute("/X", "precision_used", r_.precision.used);
      f.set_attribute("/X", "grid",
                      std::to_string(grid_.prows()) + "x" + std::to_string(grid_.pcols()));
      f.set_attribute("/X", "ranks", std::int64_t{grid_.size()});
      f.close();
    }
    out.commit();
  }

  // The trust figures beside X: per right-hand side in datasets (attributes have a size
  // limit), the worst and the verdict as attributes of X.
  void write_figures(io::file& f) const {
    const auto& t = r_.trust;
    const std::pair<const char*, const std::vector<double>*> lists[] = {
        {"normwise_backward_errors", &t.backward.normwise},
        {"componentwise_backward_errors", &t.backward.componentwise},
        {"forward_error_bounds", &t.forward_bounds}};
    for (const auto& [name, values] : lists) {
      dist_matrix<double> column(grid_, j_.nrhs, 1, j_.block);
      column.fill([&](index_t i, index_t) { return (*values)[i]; });
      f.write(name, column, true);
    }
    std::string flags;
    for (const auto& flag : t.flags) flags += (flags.empty() ? "" : ",") + flag;
    const std::pair<const char*, io::attribute> attributes[] = {
        {"trusted_digits", std::int64_t{t.trusted_digits}},
        {"flags", flags},
        {"unit_roundoff", t.unit_roundoff},
        {"normwise_backward_error", t.worst_normwise()},
        {"componentwise_backward_error", t.worst_componentwise()},
        {"forward_error_bound", t.worst_forward_bound()},
        {"condition_estimate", t.condition_1},
        {"condition_estimate_inf", t.condition_inf},
        {"growth_factor", t.growth},
        {"smallest_pivot", t.smallest_pivot}};
    for (const auto& [key, value] : attributes) f.set_attribute("/X", key, value);
  }

  // X is safely written: the job is complete and its working state can go.
  void finish() {
    if (!ck_) return;
    const auto& d = ck_->done;
    const nlohmann::json marker = {{"job_id", j_.id},        {"output", j_.output},
                                   {"columns_done", j_.n},   {"elapsed_seconds", d.elapsed_seconds},
                                   {"restarts", d.restarts}, {"checkpoints", d.checkpoints}};
    ck_->dir.record_completion(marker.dump(2) + "\n");
    ck_->dir.remove_state();
    r_.state_removed = true;
  }

  const process_grid& grid_;
  job& j_;
  const run_settings& run_;
  const inputs& in_;
  checkpointing* ck_;
  dist_matrix<T> a_, b_;
  lu_result lu_;
  solve_result r_;
};

// A run's peak memory: the job's system on this grid, factored unless its factors are
// read; checked on every rank before A is allocated.
void require_job_memory(const process_grid& grid, const job& j, const run_settings& run) {
  const auto bytes = static_cast<std::int64_t>(element_bytes(j.type));
  const auto model =
      solve_model(grid.shape(), j.n, j.nrhs, j.block, bytes, static_cast<int>(j.lookahead),
                  j.precision, j.refine, j.factors.empty());
  require_memory(grid, model, run.memory_per_rank,
                 "a " + j.type + " system of order " + std::to_string(j.n) + " (grid " +
                     std::to_string(grid.prows()) + "x" + std::to_string(grid.pcols()) + ")");
}

solve_result run_job(const process_grid& grid, job& j, const run_settings& run, const inputs& in,
                     checkpointing* ck) {
  require_job_memory(grid, j, run);
  solve_result result;
  dispatch_scalar(j.type, [&]<class T>(T) { result = job_run<T>(grid, j, run, in, ck)(); });
  return result;
}

// ---------------------------------------------------------------------------------------
// Checkpoint directories: whose they are, and what a new solve may do with them.

std::string describe_job(const job& j, const checkpoint::directory& dir, bool finished) {
  std::string what = "a solve of " + j.input + " -> " + j.output;
  if (finished) return what + ", finished";
  if (!dir.has_state()) return what + ", not yet at its first checkpoint";
  try {
    const auto s = dir.summary();
    char percent[32];
    std::snprintf(percent, sizeof percent, "%.1f", percent_of_flops(s.n, s.done.columns_done));
    return what + ", " + percent + " % of its flops done";
  } catch (const error&) {
    return what + ", with a damaged checkpoint";
  }
}

// A new solve may use the directory if it is empty or its job finished; another job's
// state is discarded only with --force, and the same job is continued by `resume`.
void claim_directory(const checkpoint::directory& dir, const job& j, const run_settings& run) {
  const std::string text = dir.job();
  const bool state = dir.has_state(), marked = !dir.completion().empty();
  if (text.empty() && !state && !marked) return;
  const bool finished = marked && !state;
  std::optional<job> previous;
  try {
    previous = job_from_json(text, dir.path());
  } catch (const error&) {
  }
  const std::string what = previous ? describe_job(*previous, dir, finished) : "an unreadable job";
  if (!finished && !j.force) {
    if (previous && same_work(*previous, j))
      throw error(error_kind::usage, dir.path() + " holds this solve's checkpoint (" + what +
                                         "); continue it with `gridlu resume " + dir.path() +
                                         "`, or pass --force to start over");
    throw error(error_kind::usage, dir.path() + " holds the checkpoint of another job (" + what +
                                       "); pass --force to discard it, or use another directory");
  }
  if (run.notice)
    run.notice((finished ? "forgetting the finished job in " : "discarding, as --force asks, ") +
               dir.path() + ": " + what);
  dir.clear();
}

// The type of a mixed job's single-precision factorization ("" for other jobs).
std::string single_type(const job& j) {
  std::string name;
  if (is_mixed(j.precision))
    dispatch_scalar(j.type, [&]<class T>(T) { name = scalar_traits<narrow_t<T>>::name; });
  return name;
}

checkpoint::progress progress_of(const checkpoint::directory& dir, const job& j) {
  if (!dir.has_state()) return {};
  const auto s = dir.summary();
  if (s.job_id != j.id)
    throw error(error_kind::input, "the checkpoint in " + dir.path() +
                                       " belongs to another job than its job.json; it cannot be "
                                       "resumed");
  if ((s.type != j.type && s.type != single_type(j)) || s.n != j.n)
    throw error(error_kind::input, "the checkpoint in " + dir.path() +
                                       " is not of the job's matrix; it cannot be resumed");
  return s.done;
}

// Runs a job whose directory is held: records the job as soon as its inputs' headers
// are read, so that a kill at any later moment leaves something `resume` can continue.
solve_result run_checkpointed(const process_grid& grid, job& j, const run_settings& run,
                              const checkpoint::directory& dir, bool resumed) {
  checkpointing ck{dir, progress_of(dir, j)};
  if (resumed) ++ck.done.restarts;
  const job recorded = j;
  const inputs in = open_inputs(grid, j);
  if (!resumed) j.block = block_for(j.block, j.n, default_block);
  if (resumed && (j.n != recorded.n || j.type != recorded.type))
    throw error(error_kind::input, j.matrix_dataset + " in " + j.input +
                                       " is no longer the matrix of the job in " + dir.path());
  if (const std::string text = to_json(j).dump(2) + "\n"; text != dir.job()) dir.record_job(text);
  dir.require_space(static_cast<double>(j.n) * static_cast<double>(j.n) * element_bytes(j.type));
  auto r = run_job(grid, j, run, in, &ck);
  r.restarts = ck.done.restarts;
  return r;
}

// The job's X, if it is in place: a solution file tagged with the job's identity.
bool solution_in_place(const process_grid& grid, const job& j) {
  std::int64_t present = 0;
  comm::together(grid.all(), [&] {
    if (grid.rank() == 0) present = std::filesystem::exists(j.output) ? 1 : 0;
  });
  comm::broadcast(grid.all(), &present, 1, 0);
  if (!present) return false;
  try {
    const io::file x(grid, j.output, io::file::mode::read);
    return text_attribute(x, "job_id") == j.id;
  } catch (const error&) {
    return false;
  }
}

// `resume` of a finished job: nothing to do if its X is in place; X written again from
// the job's saved factors if they are there; otherwise the reason it cannot be.
solve_result finish_again(const process_grid& grid, job j, const run_settings& run,
                          const checkpoint::directory& dir) {
  if (solution_in_place(grid, j)) {
    solve_result r;
    r.what = j;
    r.already_complete = true;
    return r;
  }
  std::int64_t factors = 0;
  comm::together(grid.all(), [&] {
    if (grid.rank() == 0 && !j.save_factors.empty())
      factors = std::filesystem::exists(j.save_factors) ? 1 : 0;
  });
  comm::broadcast(grid.all(), &factors, 1, 0);
  if (!factors)
    throw error(error_kind::input,
                "the job in " + dir.path() + " finished, but its X (" + j.output +
                    ") is not there, and it cannot be written again: the working state was "
                    "removed once X was written and the job saved no factors (--save-factors); "
                    "solve again");
  j.factors = std::exchange(j.save_factors, "");
  j.checkpoint_dir.clear();  // this run needs no checkpoints: the factors are there
  if (run.notice)
    run.notice("the job in " + dir.path() + " finished but its X is not in " + j.output +
               "; writing it again from the saved factors " + j.factors);
  check_paths(grid, j, run.report);
  const inputs in = open_inputs(grid, j);
  auto r = run_job(grid, j, run, in, nullptr);
  auto marker = nlohmann::json::parse(dir.completion());
  marker["output"] = j.output;
  dir.record_completion(marker.dump(2) + "\n");
  return r;
}

// resume --precision: free before the first checkpoint; after it, only between the two
// mixed kinds, which share their single-precision factors.
void switch_precision(job& j, const std::string& precision, const checkpoint::directory& dir) {
  require_precision(precision, j.type);
  if (precision == j.precision) return;
  if (dir.has_state() && !(is_mixed(precision) && is_mixed(j.precision)))
    throw error(error_kind::usage,
                "the checkpoint in " + dir.path() + " holds a factorization made for --precision " +
                    j.precision + "; resume it with --precision " +
                    (is_mixed(j.precision) ? "mixed or mixed-krylov" : j.precision) +
                    ", or start over with `gridlu solve --force`");
  if (is_mixed(precision) && j.refine)
    throw error(error_kind::usage, "the job asks for --refine, which goes with --precision double");
  j.precision = precision;
}

job recorded_job(const checkpoint::directory& dir) {
  const std::string text = dir.job();
  if (text.empty())
    throw error(error_kind::input,
                "no gridlu job in " + dir.path() +
                    (dir.has_state() ? " (a checkpoint without its job.json)" : ""));
  return job_from_json(text, (std::filesystem::path(dir.path()) / "job.json").string());
}

}  // namespace

void require_precision(const std::string& precision, const std::string& type) {
  if (precision != "double" && !is_mixed(precision))
    throw error(error_kind::usage,
                "the precision must be double, mixed or mixed-krylov, not " + precision);
  if (is_mixed(precision) && !type.empty() && type != "float64" && type != "complex128")
    throw error(error_kind::usage, "--precision " + precision +
                                       " refines float64 and complex128 systems; this one is " +
                                       type + ": solve it with --precision double");
}

solve_result solve_file(const process_grid& grid, const solve_options& o, const run_settings& run) {
  check_options(o);
  job j = job_of(o);
  comm::broadcast(grid.all(), j.id, 0);  // one identity, rank 0's
  check_paths(grid, j, run.report);
  // Signals count from the start: one during the reading stops at the first step.
  const stop_requests stops;
  if (j.checkpoint_dir.empty()) {
    const inputs in = open_inputs(grid, j);
    j.block = block_for(j.block, j.n, default_block);
    return run_job(grid, j, run, in, nullptr);
  }
  const checkpoint::directory dir(grid, j.checkpoint_dir, checkpoint::directory::opening::create);
  claim_directory(dir, j, run);
  return run_checkpointed(grid, j, run, dir, false);
}

solve_result resume_dir(const process_grid& grid, const resume_options& ro,
                        const run_settings& run) {
  if (ro.block < 0) throw error(error_kind::usage, "the block size must be at least 1");
  const stop_requests stops;
  const checkpoint::directory dir(grid, absolute(ro.dir), checkpoint::directory::opening::existing);
  job j = recorded_job(dir);
  if (ro.block > 0) j.block = block_for(ro.block, j.n, default_block);
  if (ro.lookahead >= 0) j.lookahead = ro.lookahead;
  if (!ro.output.empty()) j.output = absolute(ro.output);
  if (ro.checkpoint_every >= 0) j.checkpoint_every = ro.checkpoint_every;
  if (ro.require_digits >= 0) j.require_digits = ro.require_digits;
  if (!ro.precision.empty()) switch_precision(j, ro.precision, dir);
  j.force = j.force || ro.force;
  j.checkpoint_dir = dir.path();
  if (marks_completion(dir.completion(), j)) return finish_again(grid, j, run, dir);
  check_paths(grid, j, run.report);
  return run_checkpointed(grid, j, run, dir, true);
}

}  // namespace gridlu::workflows
