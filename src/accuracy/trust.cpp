#include "gridlu/trust.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>

#include "accuracy/figures.hpp"

namespace gridlu {
namespace {

constexpr double infinity = std::numeric_limits<double>::infinity();

using detail::ratio;

std::string figure(double v) {
  char text[32];
  std::snprintf(text, sizeof text, "%.2g", v);
  return text;
}

// First-order bound on the relative forward error in the inf-norm from a normwise
// backward error eta and the condition number k: 2 k eta / (1 - k eta) while k eta < 1
// (Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed. 2002, Thm 7.2).
double forward_bound(double k, double eta) {
  const double ke = k * eta;
  if (std::isnan(ke) || ke >= 1) return infinity;
  return 2 * ke / (1 - ke);
}

int digits_within(double bound, int most) {
  if (std::isnan(bound) || bound >= 1) return 0;
  if (bound <= 0) return most;
  return std::clamp(static_cast<int>(std::floor(-std::log10(bound))), 0, most);
}

void flag(trust_report& t, const char* name, const std::string& reason) {
  t.flags.emplace_back(name);
  t.reasons.push_back(reason);
}

void add_flags(trust_report& t, const trust_rules& rules) {
  const double u = t.unit_roundoff, eta = t.worst_normwise();
  if (!(eta <= rules.backward_error_limit * u))
    flag(t, "backward_error_high",
         "the backward error is " + figure(eta / u) + " u, above " +
             figure(rules.backward_error_limit) + " u: the solve itself went wrong");
  const double k = std::max(t.condition_1, t.condition_inf);
  if (rules.entry_error > u) {
    if (!(k * rules.entry_error < rules.conditioning_limit))
      flag(t, "ill_conditioned",
           "condition number x entry error = " + figure(k * rules.entry_error) +
               " >= " + figure(rules.conditioning_limit) +
               ": errors of A's entries may change X beyond its first two digits");
  } else if (!(k * u < rules.conditioning_limit))
    flag(t, "ill_conditioned",
         "condition number x u = " + figure(k * u) + " >= " + figure(rules.conditioning_limit) +
             ": A is nearly singular and X may carry no correct digit");
  if (!(t.growth <= rules.backward_error_limit))
    flag(t, "growth_large",
         "growth factor " + figure(t.growth) + ": the elimination may have lost up to " +
             figure(t.growth) + " u of backward accuracy");
}

}  // namespace

double worst_of(const std::vector<double>& values) {
  double w = 0;
  for (const double v : values) detail::keep_max(w, v);
  return w;
}

double trust_report::worst_normwise() const { return worst_of(backward.normwise); }
double trust_report::worst_componentwise() const { return worst_of(backward.componentwise); }
double trust_report::worst_forward_bound() const { return worst_of(forward_bounds); }

int type_digits(double unit_roundoff) {
  return static_cast<int>(std::floor(-std::log10(unit_roundoff)));
}

trust_report judge(const factor_figures& f, const matrix_figures& m, const solution_figures& s,
                   double unit_roundoff, const trust_rules& rules) {
  trust_report t;
  t.unit_roundoff = unit_roundoff;
  t.entry_error = rules.entry_error;
  t.condition_1 = m.norm_1 * f.inverse_norm_1;
  t.condition_inf = m.norm_inf * f.inverse_norm_inf;
  t.growth = ratio(f.max_u, m.max_abs);
  t.smallest_pivot = ratio(f.min_pivot, m.max_abs);
  t.backward = s;
  const int most = type_digits(unit_roundoff);
  t.trusted_digits = most;
  for (const double eta : s.normwise) {
    t.forward_bounds.push_back(forward_bound(t.condition_inf, eta + rules.entry_error));
    t.trusted_digits = std::min(t.trusted_digits, digits_within(t.forward_bounds.back(), most));
  }
  add_flags(t, rules);
  return t;
}

}  // namespace gridlu
