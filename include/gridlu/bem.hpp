// Built-in boundary-element problems: a conductor at unit potential, discretised by
// piecewise-constant charge density on flat triangles with collocation at the panel
// centroids. Entry (i, j) is the potential at centroid i of unit density on panel j, a
// pure function of (i, j), so every rank assembles its own blocks and nothing is gathered.
// Units with eps0 = 1: the Laplace kernel is G(r) = 1 / (4 pi r), the Helmholtz kernel
// exp(i k r) / (4 pi r).
#pragma once

#include <array>
#include <complex>
#include <string>
#include <vector>

#include "gridlu/matrix.hpp"

namespace gridlu::bem {

using point = std::array<double, 3>;

struct panel {
  std::array<point, 3> corners;
  point centroid;
  double area = 0;
  double diameter = 0;  // longest edge
};

// A closed surface of flat triangles.
class surface {
public:
  surface() = default;
  explicit surface(const std::vector<std::array<point, 3>>& triangles, std::string name = {});
  index_t size() const { return static_cast<index_t>(panels_.size()); }
  const panel& operator[](index_t j) const { return panels_[static_cast<std::size_t>(j)]; }
  double area() const;                               // sum of the panels' areas
  const std::string& name() const { return name_; }  // "sphere of radius 1, 1280 panels"

private:
  std::vector<panel> panels_;
  std::string name_;
};

// A sphere of `radius` centred at the origin: an icosahedron whose triangles are split
// into four `subdivisions` times, every new vertex projected onto the sphere. 20 * 4^s
// panels; usage error for s outside [0, 10].
surface sphere(int subdivisions, double radius = 1);
// The cube [0, side]^3: each face cut into divisions x divisions squares, each square into
// two triangles. 12 * divisions^2 panels; usage error for divisions outside [1, 2^14].
surface cube(int divisions, double side = 1);

// The collocation system of a conductor held at potential 1.
struct problem {
  surface mesh;
  double wavenumber = 0;  // 0: Laplace; above 0: Helmholtz with this k

  index_t size() const { return mesh.size(); }
  bool is_complex() const { return wavenumber != 0; }
  // The integral of the kernel over panel j from centroid i: Gauss quadrature on the
  // triangle, with more points the nearer the panel; on the diagonal the closed-form
  // integral of 1/r over a flat triangle from a point in its plane (plus, for Helmholtz,
  // the smooth remainder integrated in polar coordinates around the centroid).
  double laplace_entry(index_t i, index_t j) const;
  std::complex<double> entry(index_t i, index_t j) const;
  // A bound on the relative error of any entry from the quadrature (measured against
  // refined quadrature in tests/bem): the accuracy of the data the trust figures take.
  double entry_error() const;
};

// Sets every local entry of a (size() x size(), any grid and block size) to its entry.
// Usage error for a real T with a Helmholtz problem.
template <scalar T>
void assemble(const problem& p, dist_matrix<T>& a);

// sum_j x(j, column) * area_j: the total charge, which for unit potential is the
// capacitance (Laplace) or the integral of the density (Helmholtz). Collective; the same
// on every rank.
template <scalar T>
std::complex<double> total_charge(const surface& s, const dist_matrix<T>& x, index_t column = 0);

// Known answers.
// Capacitance of a sphere of radius R: 4 pi R (eps0 = 1; textbook electrostatics).
double sphere_capacitance(double radius);
// Capacitance of the cube of side a: 4 pi a * 0.66067813 (Hwang & Mascagni 2004, value
// recalled from memory).
inline constexpr double cube_capacitance_ratio = 0.66067813;
double cube_capacitance(double side);
// The constant density on a sphere of radius R at unit potential for wavenumber k:
// k / (exp(i k R) sin(k R)); infinite at the interior resonances sin(kR) = 0.
std::complex<double> sphere_helmholtz_density(double wavenumber, double radius);

}  // namespace gridlu::bem
