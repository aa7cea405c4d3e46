// The C interface to the built-in boundary-element surfaces (gridlu/bem.hpp).
#include <algorithm>
#include <mutex>
#include <shared_mutex>
#include <string>
#include <utility>

#include "api/c_status.hpp"
#include "gridlu/bem.hpp"

using namespace gridlu;
using namespace gridlu::capi;

// The entries are those of a problem on the surface; its wavenumber is that of the last
// call. Calls with one wavenumber run side by side; another one waits for them.
struct gridlu_surface {
  explicit gridlu_surface(bem::surface s) : problem{std::move(s), 0} {}
  bem::problem problem;
  mutable std::shared_mutex wavenumber_change;
};

namespace {

int create(gridlu_surface** surface, bem::surface (*make)(int, double), int count, double size) {
  return guarded([&] {
    require(surface, "surface");
    *surface = new gridlu_surface(make(count, size));
  });
}

void require_panel(const gridlu_surface* s, int64_t j) {
  if (j < 0 || j >= s->problem.size())
    throw error(error_kind::usage, "panel " + std::to_string(j) + " is not among the " +
                                       std::to_string(s->problem.size()));
}

}  // namespace

extern "C" {

int gridlu_surface_sphere(int subdivisions, double radius, gridlu_surface** surface) {
  return create(surface, bem::sphere, subdivisions, radius);
}

int gridlu_surface_cube(int divisions, double side, gridlu_surface** surface) {
  return create(surface, bem::cube, divisions, side);
}

int gridlu_surface_free(gridlu_surface* surface) {
  return guarded([&] {
    require(surface, "surface");
    delete surface;
  });
}

int gridlu_surface_size(const gridlu_surface* surface, int64_t* panels) {
  return guarded([&] {
    require(surface && panels, "surface and panels");
    *panels = surface->problem.size();
  });
}

int gridlu_surface_panel(const gridlu_surface* surface, int64_t j, double centroid[3],
                         double* area) {
  return guarded([&] {
    require(surface && centroid && area, "surface, centroid and area");
    require_panel(surface, j);
    const auto& p = surface->problem.mesh[j];
    std::copy(p.centroid.begin(), p.centroid.end(), centroid);
    *area = p.area;
  });
}

int gridlu_surface_entry(const gridlu_surface* surface, double wavenumber, int64_t i, int64_t j,
                         double* re, double* im) {
  return guarded([&] {
    require(surface && re && im, "surface, re and im");
    require_panel(surface, i);
    require_panel(surface, j);
    if (!(wavenumber >= 0)) throw error(error_kind::usage, "the wavenumber must be at least 0");
    auto& s = const_cast<gridlu_surface&>(*surface);  // only the wavenumber changes
    std::shared_lock same(s.wavenumber_change);
    while (s.problem.wavenumber != wavenumber) {
      same.unlock();
      {
        const std::unique_lock change(s.wavenumber_change);
        s.problem.wavenumber = wavenumber;
      }
      same.lock();
    }
    const auto v = s.problem.entry(i, j);
    *re = v.real();
    *im = v.imag();
  });
}

}  // extern "C"
