// The built-in conductor problems: a demo that assembles, factors and solves in memory
// through the library's factorization, and a generator that writes the system to a file.
#include <cmath>
#include <cstdio>
#include <numbers>
#include <optional>

#include "gridlu/factorization.hpp"
#include "gridlu/io.hpp"
#include "gridlu/version.hpp"
#include "io/staged.hpp"
#include "workflows/dispatch.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

std::string number(double v) {
  char text[32];
  std::snprintf(text, sizeof text, "%g", v);
  return text;
}

bool is_helmholtz(const conductor_options& o) { return o.problem == "sphere-helmholtz"; }

std::string type_of(const conductor_options& o) {
  if (!o.type.empty()) return o.type;
  return is_helmholtz(o) ? "complex128" : "float64";
}

precision precision_named(const std::string& name) {
  if (name == "mixed") return precision::mixed;
  if (name == "mixed-krylov") return precision::mixed_krylov;
  return precision::working;
}

void require_conductor(const conductor_options& o) {
  if (!is_conductor(o.problem))
    throw error(error_kind::usage,
                "unknown conductor problem '" + o.problem + "' (sphere, cube or sphere-helmholtz)");
  if (!(o.size > 0) || !std::isfinite(o.size))
    throw error(error_kind::usage, "the radius or side must be a positive number");
  if (is_helmholtz(o) && (!(o.wavenumber > 0) || !std::isfinite(o.wavenumber)))
    throw error(error_kind::usage, "the wavenumber must be a positive number");
  require_precision(o.precision, type_of(o));
}

template <scalar T>
conductor_result solve_conductor(const process_grid& grid, const conductor_options& o,
                                 const bem::problem& p) {
  conductor_result r;
  const index_t n = p.size();
  r.block = block_for(o.block, n, default_block);
  // The factorization keeps A beside its factors (two copies; 1.5 with mixed precision).
  require_memory(
      grid,
      solve_model(grid.shape(), n, 1, r.block, sizeof(T), o.lookahead, o.precision,
                  o.precision == "double"),
      o.memory_per_rank,
      described("conductor system", std::string(scalar_traits<T>::name), n, grid, "demo"));
  dist_matrix<T> a(grid, n, n, r.block), b(grid, n, 1, r.block), x(grid, n, 1, r.block);
  r.assemble_seconds = timed(grid, [&] {
    bem::assemble(p, a);
    b.fill([](index_t, index_t) { return T(1); });
    x.fill([](index_t, index_t) { return T(1); });
  });
  factor_options fo;
  fo.lookahead = o.lookahead;
  fo.arithmetic = precision_named(o.precision);
  std::optional<factorization<T>> f;
  r.factor_seconds = timed(grid, [&] { f.emplace(a, fo); });
  r.gflops = lu_flops<T>(static_cast<double>(n)) / r.factor_seconds * 1e-9;
  r.solve_seconds = timed(grid, [&] { f->solve(x); });
  if (f->refinement()) r.corrections = f->refinement()->iterations;
  trust_rules rules;
  rules.entry_error = p.entry_error();
  r.check_seconds = timed(grid, [&] { r.trust = f->check(x, b, solve_with::a, rules); });
  r.computed = bem::total_charge(p.mesh, x);
  if (p.is_complex()) r.computed /= p.mesh.area();
  return r;
}

// What a written conductor system is and how to make it again.
std::vector<std::pair<const char*, io::attribute>> conductor_attributes(const conductor_options& o,
                                                                        const bem::problem& p,
                                                                        const std::string& type) {
  const auto expected = conductor_expected(o);
  std::vector<std::pair<const char*, io::attribute>> attrs = {
      {"gridlu_kind", std::string("system")},
      {"gridlu_format", std::int64_t{1}},
      {"gridlu_version", std::string(version)},
      {"generator", o.problem},
      {"scenario", "a conductor held at potential 1 (eps0 = 1): " + p.mesh.name() +
                       "; X is the charge density on each panel"},
      {"n", std::int64_t{p.size()}},
      {"nrhs", std::int64_t{1}},
      {"type", type},
      {o.problem == "cube" ? "side" : "radius", o.size},
      {"entry_error", p.entry_error()}};
  if (o.problem == "cube")
    attrs.emplace_back("divisions", std::int64_t{o.divisions});
  else
    attrs.emplace_back("subdivisions", std::int64_t{o.subdivisions});
  if (is_helmholtz(o)) {
    attrs.emplace_back("wavenumber", o.wavenumber);
    attrs.emplace_back("expected_density", std::vector<double>{expected.real(), expected.imag()});
  } else {
    attrs.emplace_back("expected_capacitance", expected.real());
  }
  return attrs;
}

// The panels' areas (n) and centroids (n x 3), for a reader to sum the charge.
void write_panels(const process_grid& grid, const bem::surface& s, index_t block, io::file& f) {
  dist_matrix<double> areas(grid, s.size(), 1, block), centroids(grid, s.size(), 3, block);
  areas.fill([&](index_t i, index_t) { return s[i].area; });
  centroids.fill([&](index_t i, index_t j) { return s[i].centroid[static_cast<std::size_t>(j)]; });
  f.write("areas", areas, true);
  f.write("centroids", centroids);
}

}  // namespace

bool is_conductor(const std::string& name) {
  return name == "sphere" || name == "cube" || name == "sphere-helmholtz";
}

bem::problem conductor_problem(const conductor_options& o) {
  require_conductor(o);
  bem::problem p;
  p.mesh =
      o.problem == "cube" ? bem::cube(o.divisions, o.size) : bem::sphere(o.subdivisions, o.size);
  if (is_helmholtz(o)) p.wavenumber = o.wavenumber;
  return p;
}

std::complex<double> conductor_expected(const conductor_options& o) {
  if (is_helmholtz(o)) return bem::sphere_helmholtz_density(o.wavenumber, o.size);
  return o.problem == "cube" ? bem::cube_capacitance(o.size) : bem::sphere_capacitance(o.size);
}

conductor_result conductor_demo(const process_grid& grid, const conductor_options& o) {
  const auto p = conductor_problem(o);
  const std::string type = type_of(o);
  conductor_result r;
  with_type(type, [&]<class T>(T) { r = solve_conductor<T>(grid, o, p); });
  r.type = type;
  r.surface = p.mesh.name();
  r.kernel = p.is_complex() ? "Helmholtz single layer, k = " + number(o.wavenumber)
                            : "Laplace single layer";
  r.n = p.size();
  r.quantity = p.is_complex() ? "mean density" : "capacitance";
  r.expected = conductor_expected(o);
  return r;
}

void generate_conductor_file(const process_grid& grid, const conductor_options& o) {
  const auto p = conductor_problem(o);
  const std::string type = type_of(o);
  const auto policy = o.force ? io::existing::replace : io::existing::refuse;
  comm::together(grid.all(), [&] {
    if (grid.rank() == 0) io::check_output_target(o.output, policy);
  });
  with_type(type, [&]<class T>(T) {
    const index_t n = p.size(), block = block_for(o.block, n, default_block);
    // A, then B, the areas and the centroids: five columns.
    auto model = solve_model(grid.shape(), n, 5, block, sizeof(T), -1, "double", false, false);
    model.vectors = 1;
    require_memory(grid, model, o.memory_per_rank,
                   described("conductor system", type, n, grid, "generate"));
    dist_matrix<T> a(grid, n, n, block), b(grid, n, 1, block);
    bem::assemble(p, a);
    b.fill([](index_t, index_t) { return T(1); });
    io::staged_output out(grid, o.output, policy, a.bytes() + b.bytes() + 4.0 * n * sizeof(double));
    {
      io::file f(grid, out.path(), io::file::mode::create);
      f.write("A", a);
      f.write("B", b, true);
      write_panels(grid, p.mesh, block, f);
      for (const auto& [key, value] : conductor_attributes(o, p, type))
        f.set_attribute("/", key, value);
      f.close();
    }
    out.commit();
  });
}

}  // namespace gridlu::workflows
