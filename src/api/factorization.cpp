#include "gridlu/factorization.hpp"

#include <string>
#include <type_traits>
#include <utility>

#include "comm/collectives.hpp"
#include "factor/numerical.hpp"
#include "gridlu/checkpoint.hpp"
#include "gridlu/io.hpp"
#include "instantiate.hpp"

namespace gridlu {
namespace {

template <scalar T>
constexpr bool is_double() {
  return !std::is_same_v<narrow_t<T>, T>;
}

template <scalar T>
void check_arguments(const dist_matrix<T>& a, const factor_options& o) {
  if (a.rows() != a.cols() || a.rows() < 1)
    throw error(error_kind::usage, "A is " + std::to_string(a.rows()) + " x " +
                                       std::to_string(a.cols()) + "; it must be square, not empty");
  if (o.lookahead < 0) throw error(error_kind::usage, "the look-ahead must be at least 0");
  if (!(o.checkpoint_seconds >= 0) || !(o.stop_after_seconds >= 0))
    throw error(error_kind::usage, "checkpoint_seconds and stop_after_seconds must be >= 0");
  if (o.stop_after_seconds > 0 && o.checkpoint_dir.empty())
    throw error(error_kind::usage, "stop_after_seconds needs a checkpoint_dir to keep the work");
  if (o.arithmetic != precision::working && !is_double<T>())
    throw error(error_kind::usage,
                "mixed precision refines float64 and complex128 systems; this "
                "one is " +
                    std::string(scalar_traits<T>::name));
  if (const auto at = first_nonfinite(a))
    throw error(error_kind::input, "A(" + std::to_string(at->first) + ", " +
                                       std::to_string(at->second) +
                                       ") is not a finite number (NaN or Inf)");
}

// op(A) on A's grid and block size: every entry (i, j) travels to the owner of (j, i).
// Each rank sends its entries column by column, and receives them from each source in
// the same order, which is its own row by row.
template <scalar T>
dist_matrix<T> system_matrix(const dist_matrix<T>& a, solve_with with) {
  const auto& grid = a.grid();
  const auto& l = a.layout();
  const auto rank_of = [&](index_t i, index_t j) {
    return l.rows.owner(i) * grid.pcols() + l.cols.owner(j);
  };
  std::vector<std::vector<T>> out(static_cast<std::size_t>(grid.size()));
  for (index_t lj = 0; lj < a.local_cols(); ++lj) {
    const index_t j = l.cols.global(grid.mycol(), lj);
    for (index_t li = 0; li < a.local_rows(); ++li) {
      T v = *a.at(li, lj);
      if constexpr (scalar_traits<T>::is_complex)
        if (with == solve_with::adjoint) v = std::conj(v);
      out[rank_of(j, l.rows.global(grid.myrow(), li))].push_back(v);
    }
  }
  dist_matrix<T> m(grid, a.cols(), a.rows(), a.block());
  std::vector<index_t> send_counts, recv_counts(out.size(), 0);
  std::vector<T> send;
  for (const auto& piece : out) {
    send_counts.push_back(static_cast<index_t>(piece.size()));
    send.insert(send.end(), piece.begin(), piece.end());
  }
  // The source of m's entry (r, c) is a's entry (c, r).
  const auto source = [&](index_t li, index_t lj) {
    return rank_of(m.layout().cols.global(grid.mycol(), lj),
                   m.layout().rows.global(grid.myrow(), li));
  };
  for (index_t li = 0; li < m.local_rows(); ++li)
    for (index_t lj = 0; lj < m.local_cols(); ++lj) ++recv_counts[source(li, lj)];
  std::vector<T> recv(static_cast<std::size_t>(m.local_rows() * m.local_cols()));
  comm::all_to_all(grid.all(), send.data(), send_counts, recv.data(), recv_counts);
  std::vector<index_t> next(out.size(), 0);
  for (std::size_t r = 1; r < next.size(); ++r) next[r] = next[r - 1] + recv_counts[r - 1];
  for (index_t li = 0; li < m.local_rows(); ++li)
    for (index_t lj = 0; lj < m.local_cols(); ++lj) *m.at(li, lj) = recv[next[source(li, lj)]++];
  return m;
}

// A factorization in a checkpoint directory: saves every checkpoint_seconds and at a stop.
class checkpointing {
public:
  checkpointing(const process_grid& grid, const factor_options& o, std::string job_id)
      : dir_(grid, o.checkpoint_dir), job_id_(std::move(job_id)) {
    if (!dir_.job().empty() || !dir_.completion().empty())
      throw error(error_kind::usage, dir_.path() +
                                         " holds a job of the gridlu command; use another "
                                         "directory for a factorization");
  }

  // The saved state's type, if it is of this A; usage error if it is another's.
  template <scalar T>
  std::string saved_type(index_t n) const {
    if (!dir_.has_state()) return {};
    const auto s = dir_.summary();
    if (s.job_id != job_id_ || s.n != n ||
        (s.type != scalar_traits<T>::name && s.type != scalar_traits<narrow_t<T>>::name))
      throw error(error_kind::usage, dir_.path() +
                                         " holds the checkpoint of another matrix; use another "
                                         "directory (nothing was changed)");
    return s.type;
  }

  template <scalar S>
  lu_result load(dist_matrix<S>& work) {
    done_ = dir_.summary().done;
    ++done_.restarts;
    return dir_.load(work);
  }

  template <scalar S>
  void save(const dist_matrix<S>& work, const lu_result& state, double seconds) {
    done_.columns_done = state.columns_done;
    done_.elapsed_seconds += seconds;
    ++done_.checkpoints;
    dir_.save(work, state, done_, job_id_);
  }

  void require_space(double bytes) const { dir_.require_space(bytes); }
  void finished() const { dir_.remove_state(); }
  const std::string& path() const { return dir_.path(); }

private:
  checkpoint::directory dir_;
  std::string job_id_;
  checkpoint::progress done_;
};

// Factors work (taken up from `state`), saving to ck as options say when it is there.
template <scalar S>
lu_result factor_with(dist_matrix<S>& work, lu_result state, const factor_options& o,
                      checkpointing* ck) {
  const auto& grid = work.grid();
  double start = comm::wtime(), last = start;
  bool stopped = false;
  lu_options lo;
  lo.lookahead = o.lookahead;
  if (ck) {
    ck->require_space(work.bytes());
    lo.after_step = [&](const lu_result& now) {
      const double t = comm::wtime();
      std::int64_t due[] = {t - last >= o.checkpoint_seconds,
                            o.stop_after_seconds > 0 && t - start >= o.stop_after_seconds};
      comm::max(grid.all(), due, 2);  // clocks differ: one rank's due is everyone's
      if (!due[0] && !due[1]) return step_request::go_on;
      if (!now.settled) return step_request::settle;
      ck->save(work, now, t - last);
      last = comm::wtime();
      stopped = due[1] != 0;
      return stopped ? step_request::stop : step_request::go_on;
    };
  }
  auto lu = factor(work, std::move(state), lo);
  if (stopped)
    throw error(error_kind::stopped, "stopped as asked after " + std::to_string(lu.columns_done) +
                                         " of " + std::to_string(work.rows()) +
                                         " columns, checkpointed in " + ck->path() +
                                         "; factor the same A with this directory to go on");
  if (ck) ck->finished();
  return lu;
}

}  // namespace

template <scalar T>
struct factorization<T>::state {
  const dist_matrix<T>& a;
  factor_options options;
  std::optional<dist_matrix<T>> working;
  std::optional<dist_matrix<narrow_t<T>>> single;  // mixed precision's factors
  lu_result lu;
  std::optional<mixed_outcome> refinement;
  std::string fallback;
  bool resumed = false;

  // Factors A in the working precision, taken up from ck when it holds such a state.
  void factor_working(checkpointing* ck, bool from_state) {
    single.reset();
    lu_result start;
    if (from_state) {
      working.emplace(a.grid(), a.rows(), a.cols(), a.block());
      start = ck->load(*working);
    } else {
      working.emplace(a);
    }
    lu = factor_with(*working, std::move(start), options, ck);
    refuse_singular(lu);
  }

  void give_way(const std::string& why, checkpointing* ck) {
    fallback = why;
    factor_working(ck, false);
  }

  // Mixed precision: a single-precision copy of A, factored, unless it cannot be.
  void factor_mixed(checkpointing* ck, bool from_state) {
    if constexpr (is_double<T>()) {
      single.emplace(a.grid(), a.rows(), a.cols(), a.block());
      lu_result start;
      if (from_state)
        start = ck->load(*single);
      else if (!narrow_copy(a, *single))
        return give_way(mixed_out_of_range, ck);
      lu = factor_with(*single, std::move(start), options, ck);
      if (lu.first_zero_pivot >= 0) give_way(mixed_zero_pivot(lu.first_zero_pivot), ck);
    }
  }
};

template <scalar T>
factorization<T>::factorization(const dist_matrix<T>& a, const factor_options& options)
    : s_(new state{a, options, {}, {}, {}, {}, {}, false}) {
  check_arguments(a, options);
  std::optional<checkpointing> ck;
  std::string saved;
  if (!options.checkpoint_dir.empty()) {
    ck.emplace(a.grid(), options, io::checksum_text(content_checksum(a)));
    saved = ck->saved_type<T>(a.rows());
  }
  const bool mixed = options.arithmetic != precision::working;
  const std::string single_name(scalar_traits<narrow_t<T>>::name);
  if (saved == single_name && !mixed && is_double<T>())
    throw error(error_kind::usage, ck->path() +
                                       " holds a mixed-precision factorization of this A; ask "
                                       "for mixed precision or use another directory");
  s_->resumed = !saved.empty();
  checkpointing* c = ck ? &*ck : nullptr;
  if (mixed && saved != scalar_traits<T>::name)
    s_->factor_mixed(c, s_->resumed);
  else {
    if (mixed) s_->fallback = "the checkpoint in " + ck->path() + " is in the working precision";
    s_->factor_working(c, s_->resumed);
  }
}

template <scalar T>
factorization<T>::~factorization() = default;
template <scalar T>
factorization<T>::factorization(factorization&&) noexcept = default;

template <scalar T>
void factorization<T>::solve(dist_matrix<T>& x, solve_with with) const {
  const auto& a = s_->a;
  if (&x.grid() != &a.grid() || x.rows() != a.rows() || x.block() != a.block())
    throw error(error_kind::usage, "X must have A's rows, grid and block size");
  if (s_->single) {
    if constexpr (is_double<T>()) {
      if (with != solve_with::a)
        throw error(error_kind::usage, "mixed precision solves A X = B only, not with A^T or A^H");
      const dist_matrix<T> b = x;
      const auto method = s_->options.arithmetic == precision::mixed_krylov
                              ? refinement_method::krylov
                              : refinement_method::classical;
      s_->refinement = refine_mixed(a, *s_->single, s_->lu.pivots, b, x, method);
      if (!s_->refinement->converged) {
        s_->give_way(s_->refinement->why, nullptr);
        x = b;
      }
    }
  }
  if (s_->working) gridlu::solve(*s_->working, s_->lu.pivots, x, with);
  refuse_nonfinite_solution(x, false);
}

template <scalar T>
trust_report factorization<T>::check(const dist_matrix<T>& x, const dist_matrix<T>& b,
                                     solve_with with, const trust_rules& rules) const {
  const auto& a = s_->a;
  if (&x.grid() != &a.grid() || &b.grid() != &a.grid() || x.rows() != a.rows() ||
      b.rows() != a.rows() || x.cols() != b.cols() || x.block() != a.block() ||
      b.block() != a.block())
    throw error(error_kind::usage, "X and B must be n x k alike, on A's grid and block size");
  const auto from_factors = s_->single ? measure_factors(*s_->single, s_->lu.pivots, with)
                                       : measure_factors(*s_->working, s_->lu.pivots, with);
  std::optional<dist_matrix<T>> formed;
  if (with != solve_with::a) formed.emplace(system_matrix(a, with));
  const dist_matrix<T>& m = formed ? *formed : a;
  const auto figures = measure_matrix(m);
  const auto errors = backward_errors(m, figures, x, b, residual(m, x, b));
  return judge(from_factors, figures, errors, unit_roundoff<T>(), rules);
}

template <scalar T>
const lu_result& factorization<T>::result() const {
  return s_->lu;
}
template <scalar T>
const std::optional<mixed_outcome>& factorization<T>::refinement() const {
  return s_->refinement;
}
template <scalar T>
const std::string& factorization<T>::fallback() const {
  return s_->fallback;
}
template <scalar T>
bool factorization<T>::resumed() const {
  return s_->resumed;
}

#define GRIDLU_FACTORIZATION_INSTANTIATE(T) template class factorization<T>;
GRIDLU_FOR_EACH_SCALAR(GRIDLU_FACTORIZATION_INSTANTIATE)
#undef GRIDLU_FACTORIZATION_INSTANTIATE

}  // namespace gridlu
