#include <algorithm>
#include <complex>
#include <stdexcept>
#include <utility>
#include <vector>

#include "factor/numerical.hpp"
#include "gridlu/accuracy.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/version.hpp"
#include "io/staged.hpp"
#include "kernels/blas.hpp"
#include "workflows/dispatch.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

void require_order(index_t n) {
  if (n < 1) throw error(error_kind::usage, "the order N must be at least 1");
}

// Every rank multiplies square matrices at once: the rate the same cores reach on the
// operation that dominates the factorization.
template <scalar T>
double gemm_rate(const process_grid& grid, index_t order) {
  std::vector<T> a(order * order), b(order * order), c(order * order);
  for (index_t i = 0; i < order * order; ++i) {
    a[i] = random_entry<T>(7, i, 0);
    b[i] = random_entry<T>(8, i, 0);
  }
  std::vector<double> rates;
  for (int rep = 0; rep < 3; ++rep) {
    const double s = timed(grid, [&] {
      blas::gemm(blas::op::none, blas::op::none, order, order, order, T(1), a.data(), order,
                 b.data(), order, T(0), c.data(), order);
    });
    const double flops = 2.0 * order * order * order * (scalar_traits<T>::is_complex ? 4 : 1);
    rates.push_back(flops * grid.size() / s * 1e-9);
  }
  return median(rates);
}

// One right-hand side for the time to X, of the bench's seed.
template <scalar T>
void fill_bench_rhs(const bench_options& o, dist_matrix<T>& b) {
  b.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed + 1, i, j); });
}

// The worst normwise backward error of x as a solution of a x = b.
template <scalar T>
double normwise_error(const dist_matrix<T>& a, const dist_matrix<T>& x, const dist_matrix<T>& b) {
  return worst_of(backward_errors(a, measure_matrix(a), x, b, residual(a, x, b)).normwise);
}

refinement_method method_of(const std::string& precision) {
  return precision == "mixed-krylov" ? refinement_method::krylov : refinement_method::classical;
}

// Mixed precision on a system held in memory (a stays intact): `single` receives the
// single-precision factors, x the solution of b, p what happened. Returns the pivots, or
// nothing when mixed precision gave way to double.
template <scalar T>
std::optional<std::vector<index_t>> mixed_in_memory(const dist_matrix<T>& a,
                                                    dist_matrix<narrow_t<T>>& single,
                                                    const dist_matrix<T>& b, dist_matrix<T>& x,
                                                    int lookahead, precision_outcome& p) {
  std::copy_n(b.data(), b.ld() * b.local_cols(), x.data());
  lu_options lo;
  lo.lookahead = lookahead;
  auto out = solve_mixed(a, single, x, method_of(p.asked), lo);
  p.mixed = std::move(out.refinement);
  if (!p.mixed->converged) {
    p.fallback = p.mixed->why;
    return std::nullopt;
  }
  p.used = p.asked;
  return std::move(out.factors.pivots);
}

// Double precision: factor (timed alone, and with the solve as the time to X), `repeat`
// times, and A generated again for the last X's backward error.
template <scalar T>
void bench_double(const process_grid& grid, const bench_options& o, bench_result& r) {
  dist_matrix<T> a(grid, o.n, o.n, o.block), b(grid, o.n, 1, o.block), x(grid, o.n, 1, o.block);
  const auto fill_a = [&] {
    a.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed, i, j); });
  };
  fill_bench_rhs(o, b);
  std::vector<lu_phases> phases;
  lu_options lo;
  lo.lookahead = o.lookahead;
  for (int rep = 0; rep < o.repeat; ++rep) {
    fill_a();
    std::copy_n(b.data(), b.ld() * b.local_cols(), x.data());
    lu_result lu;
    r.factor_seconds.push_back(timed(grid, [&] { lu = factor(a, lo); }));
    phases.push_back(lu.phases);
    r.solve_seconds.push_back(r.factor_seconds.back() +
                              timed(grid, [&] { solve(a, lu.pivots, x); }));
  }
  r.factor_median = median(r.factor_seconds);
  const auto at_median =
      std::find(r.factor_seconds.begin(), r.factor_seconds.end(), r.factor_median);
  r.phases = slowest(
      grid, phases[at_median == r.factor_seconds.end() ? 0 : at_median - r.factor_seconds.begin()]);
  r.gflops = lu_flops<T>(static_cast<double>(o.n)) / r.factor_median * 1e-9;
  fill_a();
  r.normwise_backward_error = normwise_error(a, x, b);
}

// Mixed precision: A stays; each run copies it to single precision, factors and refines.
template <scalar T>
void bench_mixed(const process_grid& grid, const bench_options& o, bench_result& r) {
  r.narrow_gemm_gflops = gemm_rate<narrow_t<T>>(grid, r.gemm_order);
  dist_matrix<T> a(grid, o.n, o.n, o.block), b(grid, o.n, 1, o.block), x(grid, o.n, 1, o.block);
  dist_matrix<narrow_t<T>> single(grid, o.n, o.n, o.block);  // allocated once, as A
  a.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed, i, j); });
  fill_bench_rhs(o, b);
  for (int rep = 0; rep < o.repeat; ++rep) {
    r.precision = {};
    r.precision.asked = o.precision;
    r.solve_seconds.push_back(
        timed(grid, [&] { mixed_in_memory(a, single, b, x, o.lookahead, r.precision); }));
    if (!r.precision.fallback.empty()) return;  // x is not an answer: nothing to time
  }
  r.normwise_backward_error = normwise_error(a, x, b);
}

template <scalar T>
bench_result bench_typed(const process_grid& grid, const bench_options& o) {
  bench_result r;
  r.block = o.block;
  auto model =
      solve_model(grid.shape(), o.n, 1, o.block, sizeof(T), o.lookahead, o.precision, false);
  model.gemm_order = std::min<index_t>(o.n, 2048);
  require_memory(grid, model, o.memory_per_rank, described("matrix", o.type, o.n, grid, "bench"));
  // GEMM first: its operands are freed before the matrix exists, so they do not add to
  // the peak memory of the run.
  r.gemm_order = std::min<index_t>(o.n, 2048);
  r.gemm_gflops = gemm_rate<T>(grid, r.gemm_order);
  if constexpr (!std::is_same_v<narrow_t<T>, T>)
    if (is_mixed(o.precision)) {
      bench_mixed<T>(grid, o, r);
      r.solve_median = median(r.solve_seconds);
      return r;
    }
  bench_double<T>(grid, o, r);
  r.solve_median = median(r.solve_seconds);
  return r;
}

// Mixed precision in the demo: true when X came from it, with its figures in r.
template <scalar T>
bool demo_mixed(const process_grid& grid, const demo_options& o, const dist_matrix<T>& a,
                const dist_matrix<T>& b, dist_matrix<T>& x, demo_result& r) {
  dist_matrix<narrow_t<T>> single(grid, o.n, o.n, o.block);
  std::optional<std::vector<index_t>> pivots;
  r.factor_seconds =
      timed(grid, [&] { pivots = mixed_in_memory(a, single, b, x, o.lookahead, r.precision); });
  if (!pivots) return false;
  r.gflops = lu_flops<T>(static_cast<double>(o.n)) / r.factor_seconds * 1e-9;
  refuse_nonfinite_solution(x, false);
  r.check_seconds = timed(grid, [&] {
    const auto from_factors = measure_factors(single, *pivots, solve_with::a);
    const auto& figures = r.precision.mixed->matrix;
    const auto errors = backward_errors(a, figures, x, b, residual(a, x, b));
    r.trust = judge(from_factors, figures, errors, unit_roundoff<T>());
  });
  return true;
}

template <scalar T>
demo_result demo_typed(const process_grid& grid, const demo_options& o) {
  demo_result r;
  r.block = o.block;
  require_memory(
      grid,
      solve_model(grid.shape(), o.n, o.nrhs, o.block, sizeof(T), o.lookahead, o.precision, false),
      o.memory_per_rank, described("system", o.type, o.n, grid, "demo"));
  const auto a_entry = [&](index_t i, index_t j) { return random_entry<T>(o.seed, i, j); };
  const auto b_entry = [&](index_t i, index_t j) { return random_entry<T>(o.seed + 1, i, j); };
  dist_matrix<T> a(grid, o.n, o.n, o.block), b(grid, o.n, o.nrhs, o.block),
      x(grid, o.n, o.nrhs, o.block);
  r.generate_seconds = timed(grid, [&] {
    a.fill(a_entry);
    b.fill(b_entry);
    x.fill(b_entry);
  });
  r.precision.asked = o.precision;
  if constexpr (!std::is_same_v<narrow_t<T>, T>)
    if (is_mixed(o.precision)) {
      if (demo_mixed(grid, o, a, b, x, r)) return r;
      x.fill(b_entry);  // a double factorization after all
    }
  lu_result lu;
  lu_options lo;
  lo.lookahead = o.lookahead;
  r.factor_seconds += timed(grid, [&] { lu = factor(a, lo); });
  refuse_singular(lu);
  r.gflops = lu_flops<T>(static_cast<double>(o.n)) / r.factor_seconds * 1e-9;
  r.solve_seconds = timed(grid, [&] { solve(a, lu.pivots, x); });
  refuse_nonfinite_solution(x, false);
  r.check_seconds = timed(grid, [&] {
    const auto from_factors = measure_factors(a, lu.pivots, solve_with::a);
    // The factors overwrote A; regenerate it instead of keeping a second copy.
    a.fill(a_entry);
    const auto figures = measure_matrix(a);
    const auto errors = backward_errors(a, figures, x, b, residual(a, x, b));
    r.trust = judge(from_factors, figures, errors, unit_roundoff<T>());
  });
  return r;
}

// Row i of A times the vector of ones, for A of real entries: summed in long double and
// rounded once, so that ones solves the stored system to B's rounding.
template <scalar T, class F>
T times_ones(F&& entry, index_t n, index_t i) {
  long double sum = 0;
  for (index_t k = 0; k < n; ++k) sum += std::real(entry(i, k));
  return T(static_cast<real_t<T>>(sum));
}

template <scalar T>
void fill_system(const generate_options& o, dist_matrix<T>& a, dist_matrix<T>& b) {
  if (!o.kind) {
    a.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed, i, j); });
    b.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed + 1, i, j); });
    return;
  }
  const auto entry = [&](index_t i, index_t j) { return classical_entry<T>(*o.kind, o.n, i, j); };
  a.fill(entry);
  b.fill([&](index_t i, index_t) { return times_ones<T>(entry, o.n, i); });
}

// What a generated file holds and how to make it again.
std::vector<std::pair<const char*, io::attribute>> system_attributes(const generate_options& o) {
  std::vector<std::pair<const char*, io::attribute>> attrs = {
      {"gridlu_kind", std::string("system")},
      {"gridlu_format", std::int64_t{1}},
      {"gridlu_version", std::string(version)},
      {"generator", std::string(o.kind ? name_of(*o.kind) : "random")}};
  if (o.kind)
    attrs.emplace_back("solution", std::string("ones"));
  else
    attrs.emplace_back("seed", static_cast<std::int64_t>(o.seed));
  attrs.emplace_back("n", std::int64_t{o.n});
  attrs.emplace_back("nrhs", std::int64_t{o.nrhs});
  attrs.emplace_back("type", o.type);
  return attrs;
}

}  // namespace

bench_result bench(const process_grid& grid, const bench_options& asked) {
  require_order(asked.n);
  bench_options o = asked;
  o.block = block_for(asked.block, asked.n, default_block);
  require_precision(o.precision, o.type);
  if (o.repeat < 1) throw error(error_kind::usage, "--repeat must be at least 1");
  return by_type<bench_result>(o.type, [&]<class T>(T) { return bench_typed<T>(grid, o); });
}

read_bench_result bench_read(const process_grid& grid, const read_bench_options& o) {
  if (o.block < 0) block_for(o.block, 1, default_block);  // refused whatever the file
  const io::file f(grid, o.path, io::file::mode::read);
  const auto shape = f.shape(o.dataset);
  if (shape.dims.size() != 2 || !shape.usable)
    throw error(error_kind::input,
                o.dataset + " in " + o.path + " is not a 2-D dataset of numbers");
  const index_t rows = o.column_major ? shape.dims[1] : shape.dims[0];
  const index_t cols = o.column_major ? shape.dims[0] : shape.dims[1];
  read_bench_result r;
  r.block = block_for(o.block, std::max(rows, cols), default_block);
  dispatch_scalar(shape.type, [&]<class T>(T) {
    memory_model model;
    model.n = rows;
    model.cols = cols;
    model.block = r.block;
    model.grid = grid.shape();
    model.element_bytes = sizeof(T);
    require_memory(grid, model, o.memory_per_rank,
                   o.dataset + " in " + o.path + " (gridlu bench --read)");
    dist_matrix<T> m(grid, rows, cols, r.block);
    for (int rep = 0; rep < o.repeat; ++rep)
      r.seconds.push_back(timed(grid, [&] { f.read(o.dataset, m, o.column_major); }));
    r.bytes = static_cast<double>(rows) * static_cast<double>(cols) * sizeof(T);
  });
  r.median = median(r.seconds);
  return r;
}

demo_result demo(const process_grid& grid, const demo_options& asked) {
  require_order(asked.n);
  demo_options o = asked;
  o.block = block_for(asked.block, asked.n, default_block);
  require_precision(o.precision, o.type);
  if (o.nrhs < 1)
    throw error(error_kind::usage, "the number of right-hand sides must be at least 1");
  return by_type<demo_result>(o.type, [&]<class T>(T) { return demo_typed<T>(grid, o); });
}

void generate_file(const process_grid& grid, const generate_options& o) {
  if (o.n < 1) throw error(error_kind::usage, "--n must be at least 1");
  if (o.nrhs < 1) throw error(error_kind::usage, "--rhs must be at least 1");
  const auto policy = o.force ? io::existing::replace : io::existing::refuse;
  comm::together(grid.all(), [&] {
    if (grid.rank() == 0) io::check_output_target(o.output, policy);
  });
  with_type(o.type, [&]<class T>(T) {
    const index_t block = std::min(default_block, o.n);
    auto model =
        solve_model(grid.shape(), o.n, o.nrhs, block, sizeof(T), -1, "double", false, false);
    model.vectors = 1;  // B alone: A and B are filled and written
    require_memory(grid, model, o.memory_per_rank,
                   described("system", o.type, o.n, grid, "generate"));
    dist_matrix<T> a(grid, o.n, o.n, block), b(grid, o.n, o.nrhs, block);
    fill_system(o, a, b);
    io::staged_output out(grid, o.output, policy, a.bytes() + b.bytes());
    {
      io::file f(grid, out.path(), io::file::mode::create);
      f.write("A", a);
      f.write("B", b);
      for (const auto& [key, value] : system_attributes(o)) f.set_attribute("/", key, value);
      f.close();
    }
    out.commit();
  });
}

}  // namespace gridlu::workflows
