#include <algorithm>
#include <csignal>
#include <cstdio>
#include <filesystem>
#include <optional>

#include "gridlu/accuracy.hpp"
#include "gridlu/checkpoint.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/version.hpp"
#include "workflows/staged_output.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

constexpr std::int64_t format_version = 1;

std::string entry_name(const std::string& dataset, std::pair<index_t, index_t> at, bool one_d) {
  return dataset + "[" + std::to_string(at.first) +
         (one_d ? "" : ", " + std::to_string(at.second)) + "]";
}

template <scalar T>
void refuse_nonfinite(const dist_matrix<T>& m, const std::string& dataset, const std::string& path,
                      bool one_d, bool transposed) {
  if (auto at = first_nonfinite(m)) {
    // Name the entry as the file's reader sees it.
    if (transposed) std::swap(at->first, at->second);
    throw error(exit_code::input, entry_name(dataset, *at, one_d) + " in " + path +
                                      " is not a finite number (NaN or Inf)");
  }
}

std::string text_attribute(const io::file& f, const std::string& key) {
  return f.get_attribute_as<std::string>("/", key).value_or("");
}
std::int64_t integer_attribute(const io::file& f, const std::string& key) {
  return f.get_attribute_as<std::int64_t>("/", key).value_or(-1);
}

// Shape checks of a dataset that must hold numbers gridlu can solve with.
void require_numbers(const io::dataset_shape& s, const std::string& name, const std::string& path) {
  if (!s.usable)
    throw error(exit_code::input, name + " in " + path + " holds " + s.type +
                                      "; gridlu reads float32, float64 and complex (compound of "
                                      "floats named r and i)");
}

// The input files of a solve, opened and checked.
struct inputs {
  io::file input;
  std::optional<io::file> other;  // B's own file, with --rhs-file
  index_t n = 0;
  io::dataset_shape a_shape, b_shape;
  const io::file& rhs() const { return other ? *other : input; }
};

inputs open_inputs(const process_grid& grid, const solve_options& o) {
  inputs in{io::file(grid, o.input, io::file::mode::read), std::nullopt, 0, {}, {}};
  if (!o.rhs_file.empty()) in.other.emplace(grid, o.rhs_file, io::file::mode::read);
  const auto& a = in.a_shape = in.input.shape(o.matrix_dataset);
  const std::string a_name = o.matrix_dataset + " in " + o.input;
  if (a.dims.size() != 2)
    throw error(exit_code::input, a_name + " has " + std::to_string(a.dims.size()) +
                                      " dimensions; the matrix must be 2-D");
  if (a.dims[0] != a.dims[1])
    throw error(exit_code::input, a_name + " is " + std::to_string(a.dims[0]) + " x " +
                                      std::to_string(a.dims[1]) + "; the matrix must be square");
  if (a.dims[0] < 1) throw error(exit_code::input, a_name + " is empty");
  require_numbers(a, o.matrix_dataset, o.input);
  in.n = a.dims[0];

  const auto& b = in.b_shape = in.rhs().shape(o.rhs_dataset);
  const std::string b_name = o.rhs_dataset + " in " + in.rhs().path();
  require_numbers(b, o.rhs_dataset, in.rhs().path());
  const std::string n = std::to_string(in.n);
  if (b.dims.empty() || b.dims.size() > 2 || b.dims[0] != in.n)
    throw error(exit_code::input, b_name + " must have " + n + " rows (A is " + n + " x " + n +
                                      ") and one or two dimensions");
  if (b.dims.size() == 2 && b.dims[1] < 1)
    throw error(exit_code::input, b_name + " has no columns");
  if (b.is_complex && !a.is_complex)
    throw error(exit_code::input, b_name + " is complex but A is real");
  return in;
}

// Set by SIGTERM, SIGUSR1 and SIGINT while a checkpointed factorization runs; the ranks
// look at it between block steps and agree to stop together.
volatile std::sig_atomic_t stop_requested = 0;
extern "C" void request_stop(int) { stop_requested = 1; }

class stop_signals {
public:
  stop_signals() {
    stop_requested = 0;
    struct sigaction sa {};
    sa.sa_handler = request_stop;
    sigemptyset(&sa.sa_mask);
    for (std::size_t k = 0; k < std::size(signals_); ++k) sigaction(signals_[k], &sa, &saved_[k]);
  }
  ~stop_signals() {
    for (std::size_t k = 0; k < std::size(signals_); ++k)
      sigaction(signals_[k], &saved_[k], nullptr);
  }
  stop_signals(const stop_signals&) = delete;
  stop_signals& operator=(const stop_signals&) = delete;

private:
  static constexpr int signals_[] = {SIGTERM, SIGUSR1, SIGINT};
  struct sigaction saved_[3]{};
};

// The factorization, with checkpoints when a directory is given: periodic ones, and a
// last one before stopping on a signal or when the time budget would run out.
template <scalar T>
bool factor_checkpointed(const process_grid& grid, const solve_options& o, dist_matrix<T>& a,
                         lu_result& lu, checkpoint::header& ck, solve_result& r) {
  const index_t n = a.rows();
  const double total = lu_flops<T>(static_cast<double>(n));
  const double start = comm::wtime();
  const double done_before = total - lu_flops<T>(static_cast<double>(n - lu.columns_done));
  const bool checkpointing = !o.checkpoint_dir.empty();
  const double before = r.factor_seconds_total;  // earlier runs of this solve
  // Until a checkpoint has been timed, assume the disk writes (and reads back) 100 MB/s.
  double save_estimate =
      2.0 * static_cast<double>(n) * static_cast<double>(n) * sizeof(T) / 100e6 + 0.5;
  double last_save = start;
  index_t saved_at = -1;
  const auto save = [&](const lu_result& state) {
    const index_t done = state.columns_done;
    ck.done.columns_done = done;
    ck.done.elapsed_seconds = before + (comm::wtime() - start);
    ++ck.done.checkpoints;
    save_estimate = timed(grid, [&] { checkpoint::save(grid, o.checkpoint_dir, a, state, ck); });
    r.write_seconds += save_estimate;
    last_save = comm::wtime();
    saved_at = done;
  };
  constexpr std::int64_t signal_flag = 1, periodic_flag = 2, budget_flag = 4;
  lu_options lo;
  lo.lookahead = o.lookahead;
  std::optional<bool> over_at_first_step;  // the budget was exceeded at this run's first step
  lo.after_step = [&](const lu_result& state) {
    const index_t done = state.columns_done;
    const double now = comm::wtime(), seconds = now - start;
    const double flops = total - lu_flops<T>(static_cast<double>(n - done)) - done_before;
    if (o.progress)
      o.progress(1.0 - lu_flops<T>(static_cast<double>(n - done)) / total, seconds,
                 seconds > 0 ? flops / seconds * 1e-9 : 0.0);
    if (!checkpointing) return step_request::go_on;
    std::int64_t flags = stop_requested ? signal_flag : 0;
    if (o.checkpoint_every > 0 && now - last_save >= o.checkpoint_every) flags |= periodic_flag;
    if (o.stop_after > 0) {
      // Go on only if the steps that settle the look-ahead, one more, and a checkpoint
      // still fit in the budget.
      const double rate = seconds > 0 ? flops / seconds : 0.0;
      const index_t next = std::min(n, done + (1 + lo.lookahead) * a.block());
      const double steps_flops =
          lu_flops<T>(static_cast<double>(n - done)) - lu_flops<T>(static_cast<double>(n - next));
      const double steps = rate > 0 ? steps_flops / rate : 0.0;
      const double tail = done == n ? 1.5 * r.read_seconds + 0.5 : 0.0;  // solve, check, write
      if (now - o.started + steps + tail + 1.25 * save_estimate + 0.5 > o.stop_after)
        flags |= budget_flag;
    }
    comm::max(grid.all(), &flags, 1);
    if (!over_at_first_step) over_at_first_step = (flags & budget_flag) != 0;
    if (flags == 0) return step_request::go_on;
    if (!state.settled) return step_request::settle;  // a checkpoint needs a settled state
    save(state);
    if (flags & (signal_flag | budget_flag)) {
      r.stopped = true;
      r.budget_too_short = (flags & budget_flag) && *over_at_first_step;
      return step_request::stop;
    }
    return step_request::go_on;
  };
  const double seconds = timed(grid, [&] { lu = factor(a, std::move(lu), lo); });
  r.factor_seconds = seconds;
  r.phases = slowest(grid, lu.phases);
  r.gflops = (total - done_before) / seconds * 1e-9;
  r.columns_done = lu.columns_done;
  // With everything eliminated, one last checkpoint covers the solve phase too.
  if (checkpointing && !r.stopped && saved_at != n) save(lu);
  r.factor_seconds_total = before + seconds;
  r.checkpoints = ck.done.checkpoints;
  return !r.stopped;
}

template <class V>
void set_all(io::file& f, const std::string& object,
             std::initializer_list<std::pair<const char*, V>> attrs) {
  for (const auto& [key, value] : attrs) f.set_attribute(object, key, value);
}

template <scalar T>
solve_result solve_typed(const process_grid& grid, const solve_options& o, const inputs& in,
                         const std::optional<checkpoint::header>& resumed) {
  const double start = comm::wtime();
  const index_t n = in.n;
  solve_result r;
  r.n = n;
  r.type = std::string(scalar_traits<T>::name);
  r.input = o.input;
  r.block = o.block;
  r.output = o.output;
  const bool rhs_1d = in.b_shape.dims.size() == 1;
  r.nrhs = rhs_1d ? 1 : in.b_shape.dims[1];
  r.threshold = 10.0 * static_cast<double>(n) * epsilon<T>();
  staged_output out(grid, o.output, o.force);
  std::optional<staged_output> factors_out;
  if (!o.save_factors.empty()) factors_out.emplace(grid, o.save_factors, o.force);
  if (!o.checkpoint_dir.empty())
    checkpoint::prepare(grid, o.checkpoint_dir,
                        static_cast<double>(n) * static_cast<double>(n) * sizeof(T));
  const io::file_identity source = io::identify(o.input);

  dist_matrix<T> a(grid, n, n, o.block), b(grid, n, r.nrhs, o.block);
  lu_result lu;
  checkpoint::header ck;

  std::optional<io::file> saved;
  if (!o.factors.empty()) {
    // Saved factors: they must be gridlu's, of this order and type, made from this A.
    saved.emplace(grid, o.factors, io::file::mode::read);
    if (text_attribute(*saved, "gridlu_kind") != "factors")
      throw error(exit_code::input, o.factors + " is not a gridlu factors file");
    if (integer_attribute(*saved, "n") != n || text_attribute(*saved, "type") != r.type)
      throw error(exit_code::input, "the factors in " + o.factors + " are not of a " +
                                        std::to_string(n) + " x " + std::to_string(n) + " " +
                                        r.type + " matrix like " + o.input);
    if (integer_attribute(*saved, "source_size") != source.size)
      throw error(exit_code::input, "the factors in " + o.factors + " were made from another A (" +
                                        o.input + " has a different size)");
    r.refactored = false;
  }

  r.read_seconds = timed(grid, [&] {
    if (saved) {
      saved->read("LU", a);
      lu.pivots = saved->read_indices("pivots");
      lu.columns_done = n;
      bool valid = static_cast<index_t>(lu.pivots.size()) == n;
      for (index_t i = 0; valid && i < n; ++i) valid = lu.pivots[i] >= i && lu.pivots[i] < n;
      if (!valid) throw error(exit_code::input, "the pivots in " + o.factors + " are damaged");
    } else if (resumed) {
      // The inputs must be the ones the checkpoint was made from.
      if (in.input.checksum<T>(o.matrix_dataset, o.column_major) != resumed->what.a_checksum)
        throw error(exit_code::input,
                    o.matrix_dataset + " in " + o.input +
                        " changed since the checkpoint was made; it cannot be resumed");
      lu = checkpoint::load(grid, o.checkpoint_dir, a);
    } else {
      in.input.read(o.matrix_dataset, a, o.column_major);
      refuse_nonfinite(a, o.matrix_dataset, o.input, false, o.column_major);
    }
    in.rhs().read(o.rhs_dataset, b, false);
    refuse_nonfinite(b, o.rhs_dataset, in.rhs().path(), rhs_1d, false);
  });

  if (!saved) {
    const std::uint64_t b_sum = content_checksum(b);
    if (resumed) {
      ck = *resumed;
      if (b_sum != ck.what.b_checksum)
        throw error(exit_code::input,
                    o.rhs_dataset + " in " + in.rhs().path() +
                        " changed since the checkpoint was made; it cannot be resumed");
      ++ck.done.restarts;
      ck.what.block = o.block;
      ck.what.output = std::filesystem::absolute(o.output).string();
      r.factor_seconds_total = ck.done.elapsed_seconds;
    } else {
      const auto rhs_identity = io::identify(in.rhs().path());
      // Absolute paths: the next allocation may start in another directory.
      const auto absolute = [](const std::string& p) {
        return p.empty() ? p : std::filesystem::absolute(p).string();
      };
      ck.what = {absolute(o.input),
                 absolute(o.output),
                 o.matrix_dataset,
                 o.rhs_dataset,
                 absolute(o.rhs_file),
                 absolute(o.save_factors),
                 o.column_major,
                 r.type,
                 n,
                 r.nrhs,
                 o.block,
                 source.size,
                 rhs_identity.size,
                 source.mtime,
                 rhs_identity.mtime,
                 content_checksum(a),
                 b_sum};
    }
    r.restarts = ck.done.restarts;
    if (!factor_checkpointed(grid, o, a, lu, ck, r)) {
      r.total_seconds = comm::wtime() - start;
      return r;
    }
    if (lu.first_zero_pivot >= 0)
      throw error(exit_code::singular, "A is exactly singular: the pivot of column " +
                                           std::to_string(lu.first_zero_pivot) +
                                           " (0-based) is zero; no solution written");
    if (factors_out) {
      r.write_seconds += timed(grid, [&] {
        io::file f(grid, factors_out->temporary(), io::file::mode::create);
        f.write("LU", a);
        f.write_indices("pivots", lu.pivots);
        set_all<io::attribute>(f, "/",
                               {{"gridlu_kind", std::string("factors")},
                                {"gridlu_format", format_version},
                                {"gridlu_version", std::string(version)},
                                {"type", r.type},
                                {"n", std::int64_t{n}},
                                {"source_file", source.path},
                                {"source_size", source.size},
                                {"source_mtime", source.mtime},
                                {"source_checksum", io::checksum_text(ck.what.a_checksum)},
                                {"matrix_dataset", o.matrix_dataset},
                                {"column_major", std::int64_t{o.column_major}}});
        f.close();
        factors_out->commit();
      });
    }
  }

  dist_matrix<T> x(grid, n, r.nrhs, o.block);
  std::copy_n(b.data(), b.ld() * b.local_cols(), x.data());
  r.solve_seconds = timed(grid, [&] { solve(a, lu.pivots, x); });

  // The factors overwrote A: read it again into the same storage for the residual.
  r.check_seconds = timed(grid, [&] {
    in.input.read(o.matrix_dataset, a, o.column_major);
    if (saved) {
      refuse_nonfinite(a, o.matrix_dataset, o.input, false, o.column_major);
      if (text_attribute(*saved, "source_checksum") != io::checksum_text(content_checksum(a)))
        throw error(exit_code::input, "the factors in " + o.factors + " do not belong to " +
                                          o.input + ": its matrix differs from theirs");
    }
    r.backward_errors = backward_errors(a, x, b);
  });

  r.write_seconds += timed(grid, [&] {
    io::file f(grid, out.temporary(), io::file::mode::create);
    f.write("X", x, rhs_1d);
    const double worst = *std::max_element(r.backward_errors.begin(), r.backward_errors.end());
    set_all<io::attribute>(f, "/",
                           {{"gridlu_kind", std::string("solution")},
                            {"gridlu_format", format_version},
                            {"gridlu_version", std::string(version)},
                            {"source_file", source.path}});
    set_all<io::attribute>(
        f, "/X",
        {{"backward_error", worst},
         {"backward_errors", r.backward_errors},
         {"factor_seconds", r.factor_seconds},
         {"gflops", r.gflops},
         {"grid", std::to_string(grid.prows()) + "x" + std::to_string(grid.pcols())},
         {"block", std::int64_t{o.block}},
         {"ranks", std::int64_t{grid.size()}},
         {"type", r.type}});
    f.close();
    out.commit();
  });
  if (!o.checkpoint_dir.empty()) checkpoint::mark_complete(grid, o.checkpoint_dir, o.output);
  r.total_seconds = comm::wtime() - start;
  return r;
}

solve_result solve_inputs(const process_grid& grid, const solve_options& o, const inputs& in,
                          const std::optional<checkpoint::header>& resumed) {
  solve_result result;
  dispatch_scalar(in.a_shape.type,
                  [&]<class T>(T) { result = solve_typed<T>(grid, o, in, resumed); });
  return result;
}

}  // namespace

solve_result solve_file(const process_grid& grid, const solve_options& o) {
  require_block(o.block);
  if (!o.factors.empty() && !o.save_factors.empty())
    throw error(exit_code::usage, "--factors and --save-factors do not go together");
  if (!o.factors.empty() && !o.checkpoint_dir.empty())
    throw error(exit_code::usage, "--factors needs no factorization and so no --checkpoint");
  if ((o.checkpoint_every > 0 || o.stop_after > 0) && o.checkpoint_dir.empty())
    throw error(exit_code::usage, "--checkpoint-every and --stop-after need --checkpoint DIR");
  // Signals count from the start: one during the reading stops at the first step.
  std::optional<stop_signals> signals;
  if (!o.checkpoint_dir.empty()) signals.emplace();
  return solve_inputs(grid, o, open_inputs(grid, o), std::nullopt);
}

solve_result resume_dir(const process_grid& grid, const resume_options& ro) {
  if (ro.block != 0) require_block(ro.block);  // 0: the checkpoint's own
  if (const auto output = checkpoint::completed(ro.dir)) {
    solve_result r;
    r.already_complete = true;
    r.output = *output;
    return r;
  }
  const stop_signals signals;
  const auto h = checkpoint::load_header(grid, ro.dir);
  const auto& w = h.what;
  solve_options o;
  o.input = w.input;
  o.output = ro.output.empty() ? w.output : ro.output;
  o.matrix_dataset = w.matrix_dataset;
  o.rhs_dataset = w.rhs_dataset;
  o.rhs_file = w.rhs_file;
  o.column_major = w.column_major;
  o.save_factors = w.save_factors;
  o.block = ro.block > 0 ? ro.block : w.block;
  o.lookahead = ro.lookahead;
  o.force = ro.force;
  o.progress = ro.progress;
  o.checkpoint_dir = ro.dir;
  o.checkpoint_every = ro.checkpoint_every;
  o.stop_after = ro.stop_after;
  o.started = ro.started;
  const inputs in = open_inputs(grid, o);
  if (in.n != w.n || in.a_shape.type != w.type)
    throw error(exit_code::input, o.matrix_dataset + " in " + o.input +
                                      " is no longer the matrix of the checkpoint in " + ro.dir);
  return solve_inputs(grid, o, in, h);
}

void generate_file(const process_grid& grid, const generate_options& o) {
  if (o.n < 1) throw error(exit_code::usage, "--n must be at least 1");
  if (o.nrhs < 1) throw error(exit_code::usage, "--rhs must be at least 1");
  staged_output out(grid, o.output, o.force);
  const bool known = dispatch_scalar(o.type, [&]<class T>(T) {
    dist_matrix<T> a(grid, o.n, o.n, default_block), b(grid, o.n, o.nrhs, default_block);
    a.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed, i, j); });
    b.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed + 1, i, j); });
    io::file f(grid, out.temporary(), io::file::mode::create);
    f.write("A", a);
    f.write("B", b);
    set_all<io::attribute>(f, "/",
                           {{"gridlu_kind", std::string("system")},
                            {"gridlu_format", format_version},
                            {"gridlu_version", std::string(version)},
                            {"generator", std::string("random")},
                            {"seed", static_cast<std::int64_t>(o.seed)},
                            {"n", std::int64_t{o.n}},
                            {"nrhs", std::int64_t{o.nrhs}},
                            {"type", o.type}});
    f.close();
    out.commit();
  });
  if (!known)
    throw error(exit_code::usage, "unknown element type '" + o.type +
                                      "' (float32, float64, complex64 or complex128)");
}

}  // namespace gridlu::workflows
