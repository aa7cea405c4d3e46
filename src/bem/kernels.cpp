// The entries of the collocation matrix: quadrature of the kernel over a panel from a
// collocation point, and the closed-form self terms on the diagonal.
#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>

#include "bem/panels.hpp"

namespace gridlu::bem {
namespace {

using namespace detail;
using complex = std::complex<double>;

constexpr double inv_4pi = 1 / (4 * std::numbers::pi);

// The rule for a (sub-)triangle of diameter d seen from x at distance D from its
// centroid: 3 points where D >= 7 d and k d <= 0.15, 7 points where D >= 1.75 d and
// k d <= 1, otherwise the four halves by the same test. Measured (tests/bem, and over
// triangles of every shape with the 3-point rule at D = 7 d, k d = 0.15 and the 7-point
// rule at D = 1.75 d, k d <= 1, at points all round them, against refined quadrature):
// the error of each rule is at most 1.05e-5 of the integral of 1/r over the triangle, and
// it falls off as (d / D)^3 and (d / D)^6 beyond. The four halves are similar to their
// parent, so the same holds for every piece of a split panel.
constexpr double far_ratio = 7, far_phase = 0.15;
constexpr double near_ratio = 1.75, near_phase = 1;
constexpr double rule_error = 1.1e-5;
// Depth of splitting where x lies on the panel itself (overlapping panels), so that the
// recursion ends; never reached by a point off the panel by 2^-12 of its diameter.
constexpr int deepest_split = 12;

struct node {
  double b0, b1, b2, weight;  // barycentric coordinates; weights sum to 1
};
// Degree 2, interior points (common practice).
constexpr node three_point[] = {{2.0 / 3, 1.0 / 6, 1.0 / 6, 1.0 / 3},
                                {1.0 / 6, 2.0 / 3, 1.0 / 6, 1.0 / 3},
                                {1.0 / 6, 1.0 / 6, 2.0 / 3, 1.0 / 3}};
// Degree 5, seven points (Radon's rule): a = (6 -+ sqrt 15) / 21, w = (155 -+ sqrt 15) / 1200.
constexpr double a1 = 0.10128650732345633, c1 = 0.7974269853530873, w1 = 0.12593918054482717;
constexpr double a2 = 0.47014206410511505, c2 = 0.05971587178976989, w2 = 0.13239415278850616;
constexpr node seven_point[] = {{1.0 / 3, 1.0 / 3, 1.0 / 3, 9.0 / 40},
                                {a1, a1, c1, w1},
                                {a1, c1, a1, w1},
                                {c1, a1, a1, w1},
                                {a2, a2, c2, w2},
                                {a2, c2, a2, w2},
                                {c2, a2, a2, w2}};

// The kernels without their 1 / (4 pi); k is what the choice of rule needs.
struct laplace {
  double k = 0;
  double operator()(double r) const { return 1 / r; }
};
struct helmholtz {
  double k;
  complex operator()(double r) const { return complex(std::cos(k * r), std::sin(k * r)) / r; }
};

struct triangle {
  point a, b, c;
  double area, diameter;
};

template <class K, std::size_t N>
auto apply(const K& g, const node (&rule)[N], const point& x, const triangle& t) {
  decltype(g(1.0)) sum{};
  for (const node& q : rule) sum += q.weight * g(norm(x - (q.b0 * t.a + q.b1 * t.b + q.b2 * t.c)));
  return t.area * sum;
}

template <class K>
auto integrate(const K& g, const point& x, const triangle& t, int depth) {
  const point centroid = (1.0 / 3) * (t.a + t.b + t.c);
  const point d = x - centroid;
  const double d2 = dot(d, d), kd = g.k * t.diameter;
  if (d2 >= far_ratio * far_ratio * t.diameter * t.diameter && kd <= far_phase)
    return apply(g, three_point, x, t);
  if ((d2 >= near_ratio * near_ratio * t.diameter * t.diameter && kd <= near_phase) ||
      depth == deepest_split)
    return apply(g, seven_point, x, t);
  const point ab = 0.5 * (t.a + t.b), bc = 0.5 * (t.b + t.c), ca = 0.5 * (t.c + t.a);
  const double area = t.area / 4, diameter = t.diameter / 2;
  return integrate(g, x, {t.a, ab, ca, area, diameter}, depth + 1) +
         integrate(g, x, {ab, t.b, bc, area, diameter}, depth + 1) +
         integrate(g, x, {ca, bc, t.c, area, diameter}, depth + 1) +
         integrate(g, x, {ab, bc, ca, area, diameter}, depth + 1);
}

template <class K>
auto off_diagonal(const K& g, const point& x, const panel& p) {
  return inv_4pi *
         integrate(g, x, {p.corners[0], p.corners[1], p.corners[2], p.area, p.diameter}, 0);
}

// Panel p cut into three triangles with apex at its centroid P, one per edge. Seen from
// P, an edge lies on a line at distance h, its ends at signed positions s1 < s2 from the
// foot of the perpendicular; at angle alpha from the perpendicular the edge is at
// R(alpha) = h / cos(alpha), alpha from atan(s1 / h) to atan(s2 / h).
struct edge_view {
  double h, s1, s2;
};
edge_view view_edge(const point& from, const point& v1, const point& v2) {
  const point e = v2 - v1;
  const double length = norm(e);
  const point u = (1 / length) * e;
  const double s1 = dot(v1 - from, u);
  return {norm(v1 - from - s1 * u), s1, s1 + length};
}

// The integral of 1/r over p from its centroid: in polar coordinates around P the
// r in dA = r dr dalpha cancels 1/r, leaving the integral of R(alpha) over alpha, which
// is h (asinh(s2 / h) - asinh(s1 / h)) = h ln((r2 + s2) / (r1 + s1)) per edge, r the
// distances to the ends; asinh keeps the digits where s1 < 0 and |s1| >> h.
double laplace_self(const panel& p) {
  double sum = 0;
  for (int e = 0; e < 3; ++e) {
    const auto [h, s1, s2] = view_edge(p.centroid, p.corners[e], p.corners[(e + 1) % 3]);
    sum += h * (std::asinh(s2 / h) - std::asinh(s1 / h));
  }
  return inv_4pi * sum;
}

// Gauss-Legendre, 16 points: the positive nodes and their weights (common practice).
constexpr double legendre_node[] = {0.09501250983763745, 0.2816035507792589, 0.45801677765722737,
                                    0.6178762444026438,  0.755404408355003,  0.8656312023878318,
                                    0.9445750230732326,  0.9894009349916499};
constexpr double legendre_weight[] = {
    0.18945061045506859, 0.1826034150449236,  0.16915651939500262,  0.14959598881657676,
    0.12462897125553403, 0.09515851168249259, 0.062253523938647706, 0.027152459411754037};

// The Helmholtz self term: the Laplace one plus the integral of the smooth remainder
// (exp(ikr) - 1) / (4 pi r) over p. In polar coordinates around P the inner integral is
// exact: int_0^R (exp(ikr) - 1) / r * r dr = (exp(ikR) - 1) / (ik) - R
// = (exp(ikR) - 1 - ikR) / (ik). In t = asinh(s / h), s = h tan(alpha) the position
// along the edge, R = h cosh(t) and dalpha = dt / cosh(t): the integrand is an entire
// function of t, where in alpha it has poles at +-pi/2, near the ends of a long edge seen
// from close by (thin panels).
complex helmholtz_self(const panel& p, double k) {
  const complex ik(0, k);
  complex sum = 0;
  for (int e = 0; e < 3; ++e) {
    const auto [h, s1, s2] = view_edge(p.centroid, p.corners[e], p.corners[(e + 1) % 3]);
    const double from = std::asinh(s1 / h), to = std::asinh(s2 / h);
    const double half = (to - from) / 2, middle = (to + from) / 2;
    for (int q = 0; q < 8; ++q)
      for (const double side : {-1.0, 1.0}) {
        const double c = std::cosh(middle + side * half * legendre_node[q]), r = h * c;
        sum += half * legendre_weight[q] * ((std::exp(ik * r) - 1.0 - ik * r) / (ik * c));
      }
  }
  return laplace_self(p) + inv_4pi * sum;
}

template <class K, class V, class Self>
void fill_column(const surface& s, const K& g, index_t j, index_t row, index_t rows, V* out,
                 Self self) {
  const panel& source = s[j];
  for (index_t r = 0; r < rows; ++r) {
    const index_t i = row + r;
    out[r] = i == j ? self(source) : off_diagonal(g, s[i].centroid, source);
  }
}

}  // namespace

double problem::laplace_entry(index_t i, index_t j) const {
  return i == j ? laplace_self(mesh[j]) : off_diagonal(laplace{}, mesh[i].centroid, mesh[j]);
}

std::complex<double> problem::entry(index_t i, index_t j) const {
  if (!is_complex()) return laplace_entry(i, j);
  return i == j ? helmholtz_self(mesh[j], wavenumber)
                : off_diagonal(helmholtz{wavenumber}, mesh[i].centroid, mesh[j]);
}

// The rules bound each error by rule_error times the integral of 1/r over the panel. For
// Helmholtz the phase k r varies by at most k d over a panel of diameter d, so the entry's
// modulus is at least cos(k d / 2) times that integral. The self terms are exact (Laplace)
// or far more accurate (the remainder by Gauss-Legendre).
double problem::entry_error() const {
  if (!is_complex()) return rule_error;
  double widest = 0;
  for (index_t j = 0; j < size(); ++j) widest = std::max(widest, mesh[j].diameter);
  const double phase = wavenumber * widest / 2;
  return phase < std::numbers::pi / 2 ? rule_error / std::cos(phase)
                                      : std::numeric_limits<double>::infinity();
}

namespace detail {

void laplace_column(const problem& p, index_t j, index_t row, index_t rows, double* out) {
  fill_column(p.mesh, laplace{}, j, row, rows, out, laplace_self);
}

void helmholtz_column(const problem& p, index_t j, index_t row, index_t rows, complex* out) {
  const double k = p.wavenumber;
  fill_column(p.mesh, helmholtz{k}, j, row, rows, out,
              [k](const panel& source) { return helmholtz_self(source, k); });
}

}  // namespace detail
}  // namespace gridlu::bem
