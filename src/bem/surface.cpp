// The surfaces of the built-in problems: any closed surface of flat triangles, and the
// sphere and cube meshes.
#include <algorithm>
#include <cmath>
#include <sstream>

#include "bem/panels.hpp"
#include "gridlu/error.hpp"

namespace gridlu::bem {
namespace {

using namespace detail;
using triangle = std::array<point, 3>;

panel make_panel(const triangle& t) {
  panel p;
  p.corners = t;
  p.centroid = (1.0 / 3) * (t[0] + t[1] + t[2]);
  p.area = norm(cross(t[1] - t[0], t[2] - t[0])) / 2;
  p.diameter = std::max({norm(t[1] - t[0]), norm(t[2] - t[1]), norm(t[0] - t[2])});
  return p;
}

std::string describe(const char* shape, const char* size_name, double size, std::size_t panels) {
  std::ostringstream text;
  text << shape << " of " << size_name << " " << size << ", " << panels << " panels";
  return text.str();
}

void check_size(const char* what, double size) {
  if (!(size > 0) || !std::isfinite(size))
    throw error(error_kind::usage, std::string(what) + " must be positive and finite");
}

// The regular icosahedron inscribed in the sphere of radius r.
std::vector<triangle> icosahedron(double r) {
  const double t = (1 + std::sqrt(5.0)) / 2, s = r / std::sqrt(1 + t * t);
  const point v[12] = {{-s, t * s, 0}, {s, t * s, 0}, {-s, -t * s, 0}, {s, -t * s, 0},
                       {0, -s, t * s}, {0, s, t * s}, {0, -s, -t * s}, {0, s, -t * s},
                       {t * s, 0, -s}, {t * s, 0, s}, {-t * s, 0, -s}, {-t * s, 0, s}};
  const int faces[20][3] = {{0, 11, 5}, {0, 5, 1},  {0, 1, 7},   {0, 7, 10}, {0, 10, 11},
                            {1, 5, 9},  {5, 11, 4}, {11, 10, 2}, {10, 7, 6}, {7, 1, 8},
                            {3, 9, 4},  {3, 4, 2},  {3, 2, 6},   {3, 6, 8},  {3, 8, 9},
                            {4, 9, 5},  {2, 4, 11}, {6, 2, 10},  {8, 6, 7},  {9, 8, 1}};
  std::vector<triangle> out;
  for (const auto& f : faces) out.push_back({v[f[0]], v[f[1]], v[f[2]]});
  return out;
}

// Each triangle into four by its edge midpoints, pushed out onto the sphere. A midpoint
// depends only on its edge's two ends (a + b == b + a exactly), so neighbours share it.
std::vector<triangle> refine(const std::vector<triangle>& in, double r) {
  const auto mid = [r](const point& a, const point& b) {
    const point m = a + b;
    return (r / norm(m)) * m;
  };
  std::vector<triangle> out;
  out.reserve(4 * in.size());
  for (const auto& [a, b, c] : in) {
    const point ab = mid(a, b), bc = mid(b, c), ca = mid(c, a);
    out.push_back({a, ab, ca});
    out.push_back({ab, b, bc});
    out.push_back({ca, bc, c});
    out.push_back({ab, bc, ca});
  }
  return out;
}

}  // namespace

surface::surface(const std::vector<std::array<point, 3>>& triangles, std::string name)
    : name_(std::move(name)) {
  panels_.reserve(triangles.size());
  for (const auto& t : triangles) {
    panels_.push_back(make_panel(t));
    if (!(panels_.back().area > 0) || !std::isfinite(panels_.back().area))
      throw error(error_kind::usage, "panel " + std::to_string(panels_.size() - 1) +
                                         " of the surface has no area or a corner not finite");
  }
}

double surface::area() const {
  double sum = 0;
  for (const auto& p : panels_) sum += p.area;
  return sum;
}

surface sphere(int subdivisions, double radius) {
  if (subdivisions < 0 || subdivisions > 10)
    throw error(error_kind::usage, "sphere subdivisions must be in [0, 10]");
  check_size("the sphere's radius", radius);
  auto triangles = icosahedron(radius);
  for (int s = 0; s < subdivisions; ++s) triangles = refine(triangles, radius);
  auto name = describe("sphere", "radius", radius, triangles.size());
  return surface(triangles, std::move(name));
}

surface cube(int divisions, double side) {
  if (divisions < 1 || divisions > (1 << 14))
    throw error(error_kind::usage, "cube divisions must be in [1, 16384]");
  check_size("the cube's side", side);
  const int m = divisions;
  std::vector<triangle> triangles;
  triangles.reserve(12 * static_cast<std::size_t>(m) * m);
  // Face (axis, level): the coordinate `axis` is 0 or side, the other two run the grid.
  for (int axis = 0; axis < 3; ++axis)
    for (const double level : {0.0, side})
      for (int u = 0; u < m; ++u)
        for (int v = 0; v < m; ++v) {
          const auto at = [&](int du, int dv) {
            point p;
            p[axis] = level;
            p[(axis + 1) % 3] = side * (u + du) / m;
            p[(axis + 2) % 3] = side * (v + dv) / m;
            return p;
          };
          triangles.push_back({at(0, 0), at(1, 0), at(1, 1)});
          triangles.push_back({at(0, 0), at(1, 1), at(0, 1)});
        }
  auto name = describe("cube", "side", side, triangles.size());
  return surface(triangles, std::move(name));
}

}  // namespace gridlu::bem
