// The C interface over the C++ library: handles hold the C++ objects, and every entry
// point turns exceptions into status codes (api/c_status.hpp).
#include <algorithm>
#include <complex>
#include <memory>
#include <variant>

#include "api/c_status.hpp"
#include "gridlu/factorization.hpp"
#include "gridlu/io.hpp"
#include "io/staged.hpp"
#include "workflows/memory.hpp"
#include "workflows/workflows.hpp"

using namespace gridlu;
using namespace gridlu::capi;

using matrix_variant =
    std::variant<dist_matrix<float>, dist_matrix<double>, dist_matrix<std::complex<float>>,
                 dist_matrix<std::complex<double>>>;

struct gridlu_grid {
  process_grid grid;
  int matrices = 0;  // alive on this grid
};

// Each handle counts itself on what it depends on, so that freeing that first is refused.
struct gridlu_matrix {
  gridlu_matrix(gridlu_grid* g, matrix_variant d) : grid(g), m(std::move(d)) { ++grid->matrices; }
  ~gridlu_matrix() { --grid->matrices; }
  gridlu_matrix(const gridlu_matrix&) = delete;
  gridlu_matrix& operator=(const gridlu_matrix&) = delete;

  gridlu_grid* grid;
  matrix_variant m;
  int factorizations = 0;  // alive, with this matrix as A
};

using factorization_variant =
    std::variant<factorization<float>, factorization<double>, factorization<std::complex<float>>,
                 factorization<std::complex<double>>>;

struct gridlu_factorization {
  template <scalar T>
  gridlu_factorization(gridlu_matrix* m, const dist_matrix<T>& d, const factor_options& o)
      : a(m), f(std::in_place_type<factorization<T>>, d, o) {
    ++a->factorizations;
  }
  ~gridlu_factorization() { --a->factorizations; }
  gridlu_factorization(const gridlu_factorization&) = delete;
  gridlu_factorization& operator=(const gridlu_factorization&) = delete;

  gridlu_matrix* a;
  factorization_variant f;
};

std::string& gridlu::capi::last_error() {
  thread_local std::string message;
  return message;
}

namespace {

// f(T{}) for the element type `type` names (its index in matrix_variant).
template <class F>
auto with_type(gridlu_type type, F&& f) {
  switch (type) {
    case GRIDLU_FLOAT32:
      return f(float{});
    case GRIDLU_FLOAT64:
      return f(double{});
    case GRIDLU_COMPLEX64:
      return f(std::complex<float>{});
    case GRIDLU_COMPLEX128:
      return f(std::complex<double>{});
  }
  throw error(error_kind::usage, "unknown type " + std::to_string(static_cast<int>(type)));
}

grid_shape shape_for(MPI_Comm comm, int p, int q) {
  if (p != 0 || q != 0) return {p, q};
  return square_grid_shape(comm::size_of(comm));
}

int create_grid(MPI_Comm comm, int p, int q, gridlu_grid** grid) {
  return guarded([&] {
    require(grid, "grid");
    *grid = new gridlu_grid{process_grid(comm, shape_for(comm, p, q))};
  });
}

index_t block_of(index_t block, index_t rows, index_t cols) {
  return workflows::block_for(block, std::max(rows, cols), workflows::default_block);
}

gridlu_matrix* new_matrix(gridlu_grid* grid, gridlu_type type, index_t rows, index_t cols,
                          index_t block) {
  if (rows < 1 || cols < 1)
    throw error(error_kind::usage, "a matrix needs at least one row and one column");
  const index_t nb = block_of(block, rows, cols);
  return new gridlu_matrix(grid, with_type(type, [&]<class T>(T) -> matrix_variant {
                             return dist_matrix<T>(grid->grid, rows, cols, nb);
                           }));
}

solve_with system_of(gridlu_system s) {
  switch (s) {
    case GRIDLU_SYSTEM_A:
      return solve_with::a;
    case GRIDLU_SYSTEM_TRANSPOSE:
      return solve_with::transpose;
    case GRIDLU_SYSTEM_ADJOINT:
      return solve_with::adjoint;
  }
  throw error(error_kind::usage, "unknown system " + std::to_string(static_cast<int>(s)));
}

factor_options options_of(const gridlu_factor_options* o) {
  gridlu_factor_options d;
  gridlu_factor_options_init(&d);
  if (!o) o = &d;
  factor_options f;
  f.lookahead = o->lookahead;
  switch (o->precision) {
    case GRIDLU_PRECISION_WORKING:
      f.arithmetic = precision::working;
      break;
    case GRIDLU_PRECISION_MIXED:
      f.arithmetic = precision::mixed;
      break;
    case GRIDLU_PRECISION_MIXED_KRYLOV:
      f.arithmetic = precision::mixed_krylov;
      break;
    default:
      throw error(error_kind::usage,
                  "unknown precision " + std::to_string(static_cast<int>(o->precision)));
  }
  f.checkpoint_dir = o->checkpoint_dir ? o->checkpoint_dir : "";
  f.checkpoint_seconds = o->checkpoint_seconds;
  f.stop_after_seconds = o->stop_after_seconds;
  return f;
}

// The matrix as a dist_matrix<T>: usage error if it holds another type.
template <scalar T>
dist_matrix<T>& same_type(const gridlu_matrix* m, const char* name) {
  auto* p = std::get_if<dist_matrix<T>>(&const_cast<gridlu_matrix*>(m)->m);
  if (!p)
    throw error(error_kind::usage, std::string(name) + " is not of the factorization's type " +
                                       std::string(scalar_traits<T>::name));
  return *p;
}

int flags_of(const trust_report& t) {
  int bits = 0;
  for (const auto& f : t.flags)
    bits |= f == "backward_error_high" ? GRIDLU_FLAG_BACKWARD_ERROR_HIGH
            : f == "ill_conditioned"   ? GRIDLU_FLAG_ILL_CONDITIONED
            : f == "growth_large"      ? GRIDLU_FLAG_GROWTH_LARGE
                                       : 0;
  return bits;
}

}  // namespace

extern "C" {

const char* gridlu_last_error(void) { return last_error().c_str(); }

int gridlu_grid_create(MPI_Comm comm, int p, int q, gridlu_grid** grid) {
  return create_grid(comm, p, q, grid);
}

int gridlu_grid_create_f(MPI_Fint comm, int p, int q, gridlu_grid** grid) {
  return create_grid(comm::from_fortran(comm), p, q, grid);
}

int gridlu_grid_shape(const gridlu_grid* grid, int* p, int* q, int* myrow, int* mycol) {
  return guarded([&] {
    require(grid && p && q && myrow && mycol, "grid, p, q, myrow and mycol");
    *p = grid->grid.prows();
    *q = grid->grid.pcols();
    *myrow = grid->grid.myrow();
    *mycol = grid->grid.mycol();
  });
}

int gridlu_grid_free(gridlu_grid* grid) {
  return guarded([&] {
    require(grid, "grid");
    if (grid->matrices > 0)
      throw error(error_kind::usage, std::to_string(grid->matrices) +
                                         " matrices on the grid are still alive; free them first");
    delete grid;
  });
}

int gridlu_matrix_create(gridlu_grid* grid, gridlu_type type, int64_t rows, int64_t cols,
                         int64_t block, gridlu_matrix** matrix) {
  return guarded([&] {
    require(grid && matrix, "grid and matrix");
    *matrix = new_matrix(grid, type, rows, cols, block);
  });
}

int gridlu_matrix_free(gridlu_matrix* matrix) {
  return guarded([&] {
    require(matrix, "matrix");
    if (matrix->factorizations > 0)
      throw error(error_kind::usage,
                  "the matrix is A of a factorization still alive; free "
                  "the factorization first");
    delete matrix;
  });
}

int gridlu_matrix_info(const gridlu_matrix* matrix, gridlu_type* type, int64_t* rows, int64_t* cols,
                       int64_t* block) {
  return guarded([&] {
    require(matrix && type && rows && cols && block, "matrix, type, rows, cols and block");
    *type = static_cast<gridlu_type>(matrix->m.index());
    std::visit(
        [&](const auto& m) {
          *rows = m.rows();
          *cols = m.cols();
          *block = m.block();
        },
        matrix->m);
  });
}

int gridlu_matrix_fill(gridlu_matrix* matrix, gridlu_entry_fn entry, void* user) {
  return guarded([&] {
    require(matrix && entry, "matrix and entry");
    std::visit(
        [&]<class T>(dist_matrix<T>& m) {
          m.fill([&](index_t i, index_t j) {
            T v{};
            entry(i, j, &v, user);
            return v;
          });
        },
        matrix->m);
  });
}

int gridlu_matrix_block_count(const gridlu_matrix* matrix, int64_t* count) {
  return guarded([&] {
    require(matrix && count, "matrix and count");
    *count = std::visit([](const auto& m) { return m.local_blocks(); }, matrix->m);
  });
}

int gridlu_matrix_block(gridlu_matrix* matrix, int64_t b, gridlu_block* block) {
  return guarded([&] {
    require(matrix && block, "matrix and block");
    std::visit(
        [&](auto& m) {
          if (b < 0 || b >= m.local_blocks())
            throw error(error_kind::usage, "block " + std::to_string(b) +
                                               " is not among this "
                                               "rank's " +
                                               std::to_string(m.local_blocks()));
          const auto v = m.local_block(b);
          *block = {v.row, v.col, v.rows, v.cols, v.ld, v.data};
        },
        matrix->m);
  });
}

int gridlu_matrix_get(const gridlu_matrix* matrix, int64_t i, int64_t j, void* value) {
  return guarded([&] {
    require(matrix && value, "matrix and value");
    std::visit(
        [&]<class T>(const dist_matrix<T>& m) {
          if (i < 0 || i >= m.rows() || j < 0 || j >= m.cols())
            throw error(error_kind::usage, "entry (" + std::to_string(i) + ", " +
                                               std::to_string(j) + ") is outside the matrix");
          const auto at = m.layout().locate(i, j);
          T v{};
          if (const T* mine = m.find(i, j)) v = *mine;
          comm::broadcast(m.grid().all(), &v, 1, at.prow * m.grid().pcols() + at.pcol);
          *static_cast<T*>(value) = v;
        },
        matrix->m);
  });
}

int gridlu_matrix_read(gridlu_grid* grid, const char* path, const char* dataset, gridlu_type type,
                       int64_t block, gridlu_matrix** matrix) {
  return guarded([&] {
    require(grid && path && dataset && matrix, "grid, path, dataset and matrix");
    const io::file f(grid->grid, path, io::file::mode::read);
    const auto shape = f.shape(dataset);
    const std::string where = std::string(dataset) + " in " + path;
    if (!shape.usable || shape.dims.empty() || shape.dims.size() > 2)
      throw error(error_kind::input, where + " is not a 1-D or 2-D dataset of numbers (" +
                                         shape.type + ", " + io::shape_text(shape.dims) + ")");
    if (shape.is_complex && (type == GRIDLU_FLOAT32 || type == GRIDLU_FLOAT64))
      throw error(error_kind::input, where + " is complex; read it as a complex type");
    const index_t rows = shape.dims[0], cols = shape.dims.size() == 2 ? shape.dims[1] : 1;
    std::unique_ptr<gridlu_matrix> m(new_matrix(grid, type, rows, cols, block));
    std::visit([&](auto& d) { f.read(dataset, d); }, m->m);
    *matrix = m.release();
  });
}

int gridlu_matrix_write(const gridlu_matrix* matrix, const char* path, const char* dataset,
                        int replace) {
  return guarded([&] {
    require(matrix && path && dataset, "matrix, path and dataset");
    const auto& grid = matrix->grid->grid;
    const auto policy = replace ? io::existing::replace : io::existing::refuse;
    comm::together(grid.all(), [&] {
      if (grid.rank() == 0) io::check_output_target(path, policy);
    });
    std::visit(
        [&](const auto& m) {
          io::staged_output out(grid, path, policy, m.bytes());
          {
            io::file f(grid, out.path(), io::file::mode::create);
            f.write(dataset, m);
            f.close();
          }
          out.commit();
        },
        matrix->m);
  });
}

void gridlu_factor_options_init(gridlu_factor_options* options) {
  if (!options) return;
  const factor_options d;
  options->lookahead = d.lookahead;
  options->precision = GRIDLU_PRECISION_WORKING;
  options->checkpoint_dir = nullptr;
  options->checkpoint_seconds = d.checkpoint_seconds;
  options->stop_after_seconds = d.stop_after_seconds;
}

int gridlu_factor(const gridlu_matrix* a, const gridlu_factor_options* options,
                  gridlu_factorization** factors) {
  return guarded([&] {
    require(a && factors, "a and factors");
    const auto o = options_of(options);
    auto* m = const_cast<gridlu_matrix*>(a);  // counts its factorizations
    *factors = std::visit([&](const auto& d) { return new gridlu_factorization(m, d, o); }, m->m);
  });
}

int gridlu_factorization_free(gridlu_factorization* factors) {
  return guarded([&] {
    require(factors, "factors");
    delete factors;
  });
}

int gridlu_solve(const gridlu_factorization* factors, gridlu_system system, gridlu_matrix* x) {
  return guarded([&] {
    require(factors && x, "factors and x");
    const auto with = system_of(system);
    std::visit([&]<class T>(const factorization<T>& f) { f.solve(same_type<T>(x, "x"), with); },
               factors->f);
  });
}

int gridlu_check(const gridlu_factorization* factors, gridlu_system system, const gridlu_matrix* x,
                 const gridlu_matrix* b, double entry_error, gridlu_trust* trust) {
  return guarded([&] {
    require(factors && x && b && trust, "factors, x, b and trust");
    if (!(entry_error >= 0)) throw error(error_kind::usage, "the entry error must be at least 0");
    const auto with = system_of(system);
    trust_rules rules;
    rules.entry_error = entry_error;
    const auto t = std::visit(
        [&]<class T>(const factorization<T>& f) {
          return f.check(same_type<T>(x, "x"), same_type<T>(b, "b"), with, rules);
        },
        factors->f);
    *trust = {t.unit_roundoff,         t.condition_inf,  t.worst_normwise(),
              t.worst_forward_bound(), t.trusted_digits, flags_of(t)};
  });
}

}  // extern "C"
