// The library's one-stop path: factor a distributed matrix with options, solve for many
// right-hand sides, and say how far each solution can be trusted. Built on gridlu/lu.hpp,
// gridlu/mixed.hpp, gridlu/accuracy.hpp and gridlu/checkpoint.hpp, which stay available
// for finer control (factoring in place, for one).
#pragma once

#include <memory>
#include <optional>
#include <string>

#include "gridlu/accuracy.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/mixed.hpp"

namespace gridlu {

enum class precision { working, mixed, mixed_krylov };

struct factor_options {
  int lookahead = 1;
  // mixed, mixed_krylov: for double and complex<double> A only (usage error otherwise).
  precision arithmetic = precision::working;
  // Not empty: the factorization's state is saved in this checkpoint directory every
  // checkpoint_seconds, and a state found there for the same A (by content checksum) is
  // taken up again, on any grid and block size, instead of starting over.
  std::string checkpoint_dir;
  double checkpoint_seconds = 600;
  // Above 0 (with a checkpoint_dir): once the factorization has run this long, it is
  // checkpointed and stopped, an error of kind stopped; the same A and directory take it
  // up again. For runs that must end within a batch system's time limit.
  double stop_after_seconds = 0;
};

// Factors of a square A with partial pivoting. A is not changed: the factors are a copy
// (working precision: twice A's memory; mixed: 1.5 times). A must outlive the object,
// unchanged: the mixed-precision refinement and the trust figures read it. An exactly
// zero pivot is an error of kind numerical. Mixed precision gives way to the working
// precision, as the command does, when A does not fit single precision, its copy has a
// zero pivot, or a refinement does not converge (that solve then factors A again).
template <scalar T>
class factorization {
public:
  factorization(const dist_matrix<T>& a, const factor_options& options = {});
  ~factorization();
  factorization(factorization&&) noexcept;
  factorization& operator=(factorization&&) = delete;

  // Overwrites x, which holds B (n x k, A's grid and block size), with the solution of
  // op(A) X = B. Numerical error (kind numerical) if X is not finite. Mixed precision
  // refines solutions of A X = B only: a transpose or adjoint is a usage error there.
  void solve(dist_matrix<T>& x, solve_with with = solve_with::a) const;

  // How far x can be trusted as the solution of op(A) x = b. rules.entry_error says
  // how accurate A's entries are beyond rounding. With a transpose or adjoint, op(A) is
  // formed for the check: A's memory once more while it runs.
  trust_report check(const dist_matrix<T>& x, const dist_matrix<T>& b,
                     solve_with with = solve_with::a, const trust_rules& rules = {}) const;

  const lu_result& result() const;  // pivots, zero pivot, phases
  // Of the last solve with mixed precision; empty otherwise.
  const std::optional<mixed_outcome>& refinement() const;
  // Why mixed precision gave way to the working precision; empty if it did not.
  const std::string& fallback() const;
  bool resumed() const;  // taken up from a checkpoint

private:
  struct state;
  std::unique_ptr<state> s_;
};

}  // namespace gridlu
