// The C interface to the built-in boundary-element problems (gridlu/bem.hpp).
#include <algorithm>
#include <string>
#include <utility>

#include "api/c_status.hpp"
#include "gridlu/bem.hpp"

using namespace gridlu;
using namespace gridlu::capi;

struct gridlu_problem {
  bem::problem problem;
};

namespace {

int create(gridlu_problem** made, bem::surface (*mesh)(int, double), int count, double size,
           double wavenumber) {
  return guarded([&] {
    require(made, "problem");
    if (!(wavenumber >= 0)) throw error(error_kind::usage, "the wavenumber must be at least 0");
    *made = new gridlu_problem{bem::problem{mesh(count, size), wavenumber}};
  });
}

void require_panel(const gridlu_problem* p, int64_t j) {
  if (j < 0 || j >= p->problem.size())
    throw error(error_kind::usage, "panel " + std::to_string(j) + " is not among the " +
                                       std::to_string(p->problem.size()));
}

}  // namespace

extern "C" {

int gridlu_problem_sphere(int subdivisions, double radius, double wavenumber,
                          gridlu_problem** problem) {
  return create(problem, bem::sphere, subdivisions, radius, wavenumber);
}

int gridlu_problem_cube(int divisions, double side, gridlu_problem** problem) {
  return create(problem, bem::cube, divisions, side, 0);
}

int gridlu_problem_free(gridlu_problem* problem) {
  return guarded([&] {
    require(problem, "problem");
    delete problem;
  });
}

int gridlu_problem_size(const gridlu_problem* problem, int64_t* panels) {
  return guarded([&] {
    require(problem && panels, "problem and panels");
    *panels = problem->problem.size();
  });
}

int gridlu_problem_panel(const gridlu_problem* problem, int64_t j, double centroid[3],
                         double* area) {
  return guarded([&] {
    require(problem && centroid && area, "problem, centroid and area");
    require_panel(problem, j);
    const auto& p = problem->problem.mesh[j];
    std::copy(p.centroid.begin(), p.centroid.end(), centroid);
    *area = p.area;
  });
}

int gridlu_problem_entry(const gridlu_problem* problem, int64_t i, int64_t j, double* re,
                         double* im) {
  return guarded([&] {
    require(problem && re && im, "problem, re and im");
    require_panel(problem, i);
    require_panel(problem, j);
    const auto v = problem->problem.entry(i, j);
    *re = v.real();
    *im = v.imag();
  });
}

int gridlu_problem_entry_error(const gridlu_problem* problem, double* entry_error) {
  return guarded([&] {
    require(problem && entry_error, "problem and entry_error");
    *entry_error = problem->problem.entry_error();
  });
}

}  // extern "C"
