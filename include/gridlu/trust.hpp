// How far a solution can be trusted: the figures measured on the factors, the matrix and
// the solution, and the rules that turn them into digits and flags. Pure arithmetic: the
// distributed measurements are in gridlu/accuracy.hpp.
#pragma once

#include <string>
#include <vector>

namespace gridlu {

// Measured on the factors of A, before A is read again.
struct factor_figures {
  double max_u = 0;             // max |U_ij|
  double min_pivot = 0;         // min |U_ii|
  double inverse_norm_1 = 0;    // estimate of ||inv(M)||_1, M the system matrix
  double inverse_norm_inf = 0;  // estimate of ||inv(M)||_inf
};

// Measured on the system matrix M (A, A^T or A^H) as read from its source.
struct matrix_figures {
  double norm_1 = 0, norm_inf = 0, max_abs = 0;
};

// Per right-hand side.
struct solution_figures {
  std::vector<double> normwise;       // Rigal-Gaches: ||r|| / (||M|| ||x|| + ||b||), inf-norms
  std::vector<double> componentwise;  // Oettli-Prager: max_i |r_i| / (|M| |x| + |b|)_i
};

// The thresholds, in units of the unit roundoff u so that they mean the same in every
// precision and at every order n (README, "How far to trust X").
struct trust_rules {
  double backward_error_limit = 1000;  // normwise backward error above this many u
  double conditioning_limit = 0.01;    // condition number x max(u, entry_error) at or above this
  // The relative error of A's entries beyond rounding (quadrature, measurement): X can be
  // no more accurate than condition number x entry_error, whatever the solve. 0: exact.
  double entry_error = 0;
  // The growth is flagged when growth x u, the backward error it can cause, passes the
  // backward error limit: a growth above backward_error_limit.
};

struct trust_report {
  double unit_roundoff = 0;
  double entry_error = 0;  // the rules' accuracy of A's entries, which the bounds include
  double condition_1 = 0, condition_inf = 0;  // estimates of kappa(M) in the 1- and inf-norm
  double growth = 0;                          // max|U| / max|A|
  double smallest_pivot = 0;                  // min|U_ii| / max|A|
  solution_figures backward;
  std::vector<double> forward_bounds;  // on ||x - x_exact||_inf / ||x||_inf, per right-hand side
  int trusted_digits = 0;              // over all right-hand sides
  // Short names of what makes X doubtful: backward_error_high, ill_conditioned,
  // growth_large; each with its reason in `reasons`.
  std::vector<std::string> flags, reasons;

  double worst_normwise() const;
  double worst_componentwise() const;
  double worst_forward_bound() const;
};

// The largest value, NaN if any is: a NaN must never look like a good figure.
double worst_of(const std::vector<double>& values);

// Decimal digits of a type with unit roundoff u: floor(-log10 u).
int type_digits(double unit_roundoff);

// Applies the rules to the figures. NaN anywhere counts as the worst case.
trust_report judge(const factor_figures& f, const matrix_figures& m, const solution_figures& s,
                   double unit_roundoff, const trust_rules& rules = {});

}  // namespace gridlu
