/* gridlu's C interface: opaque handles, error codes and a message query. No C++
 * exception crosses it. Every call returns GRIDLU_OK (0) or an error code, the same
 * numbers the gridlu command exits with; gridlu_last_error() then says why. Calls on
 * a grid, matrix or factorization are collective over the grid's ranks unless marked
 * "local". Complex entries are pairs (real, imaginary) of float or double, as C99's
 * float _Complex / double _Complex and Fortran's complex kinds store them. */
#ifndef GRIDLU_H
#define GRIDLU_H

#include <mpi.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

enum gridlu_status {
  GRIDLU_OK = 0,
  GRIDLU_ERROR_INTERNAL = 1,
  GRIDLU_ERROR_USAGE = 2,     /* bad argument or call order; nothing was done */
  GRIDLU_ERROR_INPUT = 3,     /* missing or damaged file, dataset or checkpoint */
  GRIDLU_ERROR_NUMERICAL = 4, /* exactly zero pivot, or a solution that is not finite */
  GRIDLU_ERROR_STOPPED = 5,   /* stopped on request with the state checkpointed */
  GRIDLU_ERROR_RESOURCE = 6   /* out of memory, disk full, output not writable */
};

enum gridlu_type {
  GRIDLU_FLOAT32 = 0,
  GRIDLU_FLOAT64 = 1,
  GRIDLU_COMPLEX64 = 2,
  GRIDLU_COMPLEX128 = 3
};
enum gridlu_system { GRIDLU_SYSTEM_A = 0, GRIDLU_SYSTEM_TRANSPOSE = 1, GRIDLU_SYSTEM_ADJOINT = 2 };
enum gridlu_precision {
  GRIDLU_PRECISION_WORKING = 0,
  GRIDLU_PRECISION_MIXED = 1,
  GRIDLU_PRECISION_MIXED_KRYLOV = 2
};

typedef struct gridlu_grid gridlu_grid;
typedef struct gridlu_matrix gridlu_matrix;
typedef struct gridlu_factorization gridlu_factorization;
typedef struct gridlu_problem gridlu_problem;

/* The message of the last failed call on this thread ("" after a success). Local. */
const char* gridlu_last_error(void);

/* A p x q process grid over comm (duplicated; comm may be freed afterwards); p = q = 0
 * picks the default shape. */
int gridlu_grid_create(MPI_Comm comm, int p, int q, gridlu_grid** grid);
/* The same for a Fortran communicator handle (MPI_Comm_c2f's kind): Fortran callers
 * need no MPI C types. */
int gridlu_grid_create_f(MPI_Fint comm, int p, int q, gridlu_grid** grid);
/* This rank's place: the grid's shape and its process row and column. Local. */
int gridlu_grid_shape(const gridlu_grid* grid, int* p, int* q, int* myrow, int* mycol);
int gridlu_grid_free(gridlu_grid* grid); /* after every matrix on it (usage error before) */

/* A rows x cols matrix distributed block-cyclically in blocks of `block` (0: gridlu's
 * default), zero-filled. */
int gridlu_matrix_create(gridlu_grid* grid, enum gridlu_type type, int64_t rows, int64_t cols,
                         int64_t block, gridlu_matrix** matrix);
int gridlu_matrix_free(gridlu_matrix* matrix); /* after its factorizations (usage error before) */
/* Local: the type, the global sizes and the block size. */
int gridlu_matrix_info(const gridlu_matrix* matrix, enum gridlu_type* type, int64_t* rows,
                       int64_t* cols, int64_t* block);

/* Sets every entry this rank owns to entry(i, j, value, user), i and j 0-based global
 * indices; `value` points to the entry (one element of the matrix's type). */
typedef void (*gridlu_entry_fn)(int64_t i, int64_t j, void* value, void* user);
int gridlu_matrix_fill(gridlu_matrix* matrix, gridlu_entry_fn entry, void* user);

/* One block of this rank's part: global indices of its first entry (0-based), its
 * extent, and its storage, column-major with leading dimension ld. */
typedef struct gridlu_block {
  int64_t row, col, rows, cols, ld;
  void* data;
} gridlu_block;
/* Local: the count of this rank's blocks, and block b (0 <= b < count). */
int gridlu_matrix_block_count(const gridlu_matrix* matrix, int64_t* count);
int gridlu_matrix_block(gridlu_matrix* matrix, int64_t b, gridlu_block* block);

/* Collective: a copy of entry (i, j) on every rank (for small checks, not for loops). */
int gridlu_matrix_get(const gridlu_matrix* matrix, int64_t i, int64_t j, void* value);

/* HDF5: reads a 2-D (or 1-D, as n x 1) dataset into a new matrix of `type`; writes a
 * matrix as a row-major dataset into a new file, or replaces the file when `replace`
 * is nonzero (the file appears whole or not at all). */
int gridlu_matrix_read(gridlu_grid* grid, const char* path, const char* dataset,
                       enum gridlu_type type, int64_t block, gridlu_matrix** matrix);
int gridlu_matrix_write(const gridlu_matrix* matrix, const char* path, const char* dataset,
                        int replace);

typedef struct gridlu_factor_options {
  int lookahead;                   /* panels factored ahead (default 1) */
  enum gridlu_precision precision; /* mixed: single-precision factors, refined in double */
  const char* checkpoint_dir;      /* NULL: none; else save the state there and resume from it */
  double checkpoint_seconds;       /* seconds between checkpoints (default 600) */
  double stop_after_seconds;       /* > 0: checkpoint and stop (GRIDLU_ERROR_STOPPED) once
                                      the factorization ran this long; 0: never (default) */
} gridlu_factor_options;
/* Fills `options` with the defaults. Local. */
void gridlu_factor_options_init(gridlu_factor_options* options);

/* Factors a square matrix A with partial pivoting. A is left as it is (the factors are
 * a copy: twice A's memory in the working precision, 1.5 times with mixed precision)
 * and must outlive the factorization unchanged: refinement and the trust figures use
 * it. options may be NULL (defaults). */
int gridlu_factor(const gridlu_matrix* a, const gridlu_factor_options* options,
                  gridlu_factorization** factors);
int gridlu_factorization_free(gridlu_factorization* factors);

/* Overwrites x, which holds B (n x k, on A's grid and block size), with the solution of
 * A X = B, A^T X = B or A^H X = B (mixed precision: A X = B only). */
int gridlu_solve(const gridlu_factorization* factors, enum gridlu_system system, gridlu_matrix* x);

/* How far X can be trusted as a solution of op(A) X = B, from A's factors, A and B. */
typedef struct gridlu_trust {
  double unit_roundoff;
  double condition;      /* estimate of op(A)'s condition number (inf-norm) */
  double backward_error; /* normwise, worst over the right-hand sides */
  double forward_bound;  /* bound on the relative error of X, worst over the columns */
  int trusted_digits;
  int flags; /* GRIDLU_FLAG_* bits: what makes X doubtful */
} gridlu_trust;
enum {
  GRIDLU_FLAG_BACKWARD_ERROR_HIGH = 1,
  GRIDLU_FLAG_ILL_CONDITIONED = 2,
  GRIDLU_FLAG_GROWTH_LARGE = 4
};
/* entry_error: the relative accuracy of A's entries beyond rounding (0 if exact). */
int gridlu_check(const gridlu_factorization* factors, enum gridlu_system system,
                 const gridlu_matrix* x, const gridlu_matrix* b, double entry_error,
                 gridlu_trust* trust);

/* Built-in boundary-element problems (see gridlu/bem.hpp): a conductor at potential 1,
 * piecewise-constant density on flat triangles, collocation at their centroids. The
 * sphere comes from an icosahedron subdivided `subdivisions` times (20 * 4^s panels), the
 * cube [0, side]^3 from m x m squares per face (12 m^2 panels). Wavenumber 0 gives the
 * Laplace kernel 1 / (4 pi r) (real entries), k > 0 the Helmholtz kernel
 * exp(ikr) / (4 pi r). */
int gridlu_problem_sphere(int subdivisions, double radius, double wavenumber,
                          gridlu_problem** problem);
int gridlu_problem_cube(int divisions, double side, gridlu_problem** problem);
int gridlu_problem_free(gridlu_problem* problem);
/* Local: the panel count (the order of the system), and panel j's centroid and area. */
int gridlu_problem_size(const gridlu_problem* problem, int64_t* panels);
int gridlu_problem_panel(const gridlu_problem* problem, int64_t j, double centroid[3],
                         double* area);
/* Local: entry (i, j), the potential at centroid i of unit density on panel j (im is 0
 * for Laplace), and the bound on any entry's relative quadrature error, for
 * gridlu_check's entry_error. */
int gridlu_problem_entry(const gridlu_problem* problem, int64_t i, int64_t j, double* re,
                         double* im);
int gridlu_problem_entry_error(const gridlu_problem* problem, double* entry_error);

#ifdef __cplusplus
}
#endif
#endif
