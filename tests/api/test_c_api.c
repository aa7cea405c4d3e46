/* The C interface from a C program: a diagonally dominant system with the known solution
 * X = ones (B = A ones, filled with A's row sums), in float64 and complex128, and the
 * status codes of calls that must fail. Exit code: the number of failed checks. */
#include <complex.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "gridlu/gridlu.h"

static int failures = 0;
static int rank = 0;

#define CHECK(cond)                                                                               \
  do {                                                                                            \
    if (!(cond)) {                                                                                \
      ++failures;                                                                                 \
      fprintf(stderr, "rank %d, line %d: %s (%s)\n", rank, __LINE__, #cond, gridlu_last_error()); \
    }                                                                                             \
  } while (0)

enum { N = 157, BLOCK = 20 };

/* A pure function of (i, j) in [-1, 1), and a diagonal above any row's off-diagonal sum. */
static double hashed(int64_t i, int64_t j, unsigned salt) {
  unsigned long long h = (unsigned long long)(i * 7919 + j * 104729 + salt) * 0x9e3779b97f4a7c15ULL;
  h ^= h >> 29;
  return (double)(h % 2000001) / 1000000.0 - 1.0;
}
static double complex a_entry(int64_t i, int64_t j) {
  return hashed(i, j, 1) + I * hashed(i, j, 2) + (i == j ? 2.0 * N : 0.0);
}

static void fill_real(int64_t i, int64_t j, void* value, void* user) {
  (void)user;
  *(double*)value = creal(a_entry(i, j));
}
static void fill_complex(int64_t i, int64_t j, void* value, void* user) {
  (void)user;
  *(double complex*)value = a_entry(i, j);
}
/* Entry (i, 0) of A ones: row i's sum. `user` says whether A is complex. */
static void fill_row_sum(int64_t i, int64_t j, void* value, void* user) {
  (void)j;
  double complex s = 0;
  for (int64_t k = 0; k < N; ++k) s += a_entry(i, k);
  if (*(int*)user)
    *(double complex*)value = s;
  else
    *(double*)value = creal(s);
}

/* The largest |x_ij - 1| of this rank's blocks, every rank's together. */
static double distance_from_ones(gridlu_matrix* x, int complex_type) {
  int64_t count = 0;
  double worst = 0;
  CHECK(gridlu_matrix_block_count(x, &count) == GRIDLU_OK);
  for (int64_t b = 0; b < count; ++b) {
    gridlu_block blk;
    CHECK(gridlu_matrix_block(x, b, &blk) == GRIDLU_OK);
    for (int64_t c = 0; c < blk.cols; ++c)
      for (int64_t r = 0; r < blk.rows; ++r) {
        const double d = complex_type ? cabs(((double complex*)blk.data)[r + c * blk.ld] - 1)
                                      : fabs(((double*)blk.data)[r + c * blk.ld] - 1);
        if (!(d <= worst)) worst = d; /* NaN wins */
      }
  }
  MPI_Allreduce(MPI_IN_PLACE, &worst, 1, MPI_DOUBLE, MPI_MAX, MPI_COMM_WORLD);
  return worst;
}

static void solve_known_system(gridlu_grid* grid, enum gridlu_type type) {
  int complex_type = type == GRIDLU_COMPLEX128;
  gridlu_matrix *a = NULL, *b = NULL, *x = NULL;
  gridlu_factorization* f = NULL;
  CHECK(gridlu_matrix_create(grid, type, N, N, BLOCK, &a) == GRIDLU_OK);
  CHECK(gridlu_matrix_create(grid, type, N, 1, BLOCK, &b) == GRIDLU_OK);
  CHECK(gridlu_matrix_create(grid, type, N, 1, BLOCK, &x) == GRIDLU_OK);
  CHECK(gridlu_matrix_fill(a, complex_type ? fill_complex : fill_real, NULL) == GRIDLU_OK);
  CHECK(gridlu_matrix_fill(b, fill_row_sum, &complex_type) == GRIDLU_OK);
  CHECK(gridlu_matrix_fill(x, fill_row_sum, &complex_type) == GRIDLU_OK);

  enum gridlu_type t;
  int64_t rows, cols, block;
  CHECK(gridlu_matrix_info(a, &t, &rows, &cols, &block) == GRIDLU_OK);
  CHECK(t == type && rows == N && cols == N && block == BLOCK);
  double complex corner = 0;
  CHECK(gridlu_matrix_get(a, N - 1, N - 1, &corner) == GRIDLU_OK);
  CHECK(corner == (complex_type ? a_entry(N - 1, N - 1) : creal(a_entry(N - 1, N - 1))));

  CHECK(gridlu_factor(a, NULL, &f) == GRIDLU_OK);
  CHECK(gridlu_solve(f, GRIDLU_SYSTEM_A, x) == GRIDLU_OK);
  /* A is diagonally dominant, its condition number near 1: X within a few hundred u of
   * ones (common practice). */
  CHECK(distance_from_ones(x, complex_type) < 1e-13);
  gridlu_trust trust;
  CHECK(gridlu_check(f, GRIDLU_SYSTEM_A, x, b, 0, &trust) == GRIDLU_OK);
  CHECK(trust.unit_roundoff == 0x1p-53);
  CHECK(trust.backward_error < 100 * trust.unit_roundoff);
  CHECK(trust.condition >= 1 && trust.condition < 10);
  CHECK(trust.flags == 0 && trust.trusted_digits >= 13);

  /* Wrong calls: usage errors with a message, nothing done. */
  CHECK(gridlu_matrix_free(a) == GRIDLU_ERROR_USAGE &&
        strstr(gridlu_last_error(), "factorization"));
  CHECK(gridlu_solve(f, (enum gridlu_system)3, x) == GRIDLU_ERROR_USAGE);
  CHECK(gridlu_solve(f, GRIDLU_SYSTEM_A, NULL) == GRIDLU_ERROR_USAGE);
  CHECK(strstr(gridlu_last_error(), "NULL") != NULL);

  CHECK(gridlu_factorization_free(f) == GRIDLU_OK);
  CHECK(gridlu_matrix_free(a) == GRIDLU_OK && gridlu_matrix_free(b) == GRIDLU_OK);
  CHECK(gridlu_matrix_free(x) == GRIDLU_OK);
  CHECK(strcmp(gridlu_last_error(), "") == 0);
}

/* Written, refused over an existing file unless replacing, read back whole. */
static void round_trip(gridlu_grid* grid) {
  char path[64];
  long id = (long)getpid();
  MPI_Bcast(&id, 1, MPI_LONG, 0, MPI_COMM_WORLD);
  snprintf(path, sizeof path, "/tmp/gridlu-c-api-%ld.h5", id);
  gridlu_matrix *a = NULL, *back = NULL;
  CHECK(gridlu_matrix_create(grid, GRIDLU_COMPLEX128, N, 3, 16, &a) == GRIDLU_OK);
  CHECK(gridlu_matrix_fill(a, fill_complex, NULL) == GRIDLU_OK);
  CHECK(gridlu_matrix_write(a, path, "M", 0) == GRIDLU_OK);
  CHECK(gridlu_matrix_write(a, path, "M", 0) == GRIDLU_ERROR_USAGE);
  CHECK(gridlu_matrix_write(a, path, "M", 1) == GRIDLU_OK);
  CHECK(gridlu_matrix_read(grid, path, "M", GRIDLU_FLOAT64, 0, &back) == GRIDLU_ERROR_INPUT);
  CHECK(gridlu_matrix_read(grid, path, "M", GRIDLU_COMPLEX128, 7, &back) == GRIDLU_OK);
  enum gridlu_type t;
  int64_t rows = 0, cols = 0, block = 0;
  CHECK(gridlu_matrix_info(back, &t, &rows, &cols, &block) == GRIDLU_OK);
  CHECK(t == GRIDLU_COMPLEX128 && rows == N && cols == 3 && block == 7);
  double complex v = 0;
  CHECK(gridlu_matrix_get(back, N - 2, 2, &v) == GRIDLU_OK && v == a_entry(N - 2, 2));
  CHECK(gridlu_matrix_free(a) == GRIDLU_OK && gridlu_matrix_free(back) == GRIDLU_OK);
  MPI_Barrier(MPI_COMM_WORLD);
  if (rank == 0) remove(path);
}

/* An exactly singular A (a zero column) and mismatched types. */
static void refusals(gridlu_grid* grid) {
  gridlu_matrix *a = NULL, *x32 = NULL, *missing = NULL;
  gridlu_factorization* f = NULL;
  CHECK(gridlu_matrix_create(grid, GRIDLU_FLOAT64, N, N, 0, &a) == GRIDLU_OK);
  CHECK(gridlu_factor(a, NULL, &f) == GRIDLU_ERROR_NUMERICAL);
  CHECK(strstr(gridlu_last_error(), "column 0 ") != NULL);
  CHECK(gridlu_matrix_fill(a, fill_real, NULL) == GRIDLU_OK);
  gridlu_factor_options options;
  gridlu_factor_options_init(&options);
  CHECK(options.lookahead == 1 && options.checkpoint_dir == NULL &&
        options.stop_after_seconds == 0);
  options.precision = GRIDLU_PRECISION_MIXED;
  CHECK(gridlu_factor(a, &options, &f) == GRIDLU_OK);
  CHECK(gridlu_matrix_create(grid, GRIDLU_FLOAT32, N, 1, 0, &x32) == GRIDLU_OK);
  CHECK(gridlu_solve(f, GRIDLU_SYSTEM_A, x32) == GRIDLU_ERROR_USAGE);
  CHECK(gridlu_factorization_free(f) == GRIDLU_OK);
  CHECK(gridlu_matrix_free(x32) == GRIDLU_OK);
  CHECK(gridlu_matrix_create(grid, GRIDLU_FLOAT64, 0, 1, 0, &x32) == GRIDLU_ERROR_USAGE);

  CHECK(gridlu_matrix_read(grid, "/nonexistent/gridlu-missing.h5", "A", GRIDLU_FLOAT64, 0,
                           &missing) == GRIDLU_ERROR_INPUT);
  CHECK(strlen(gridlu_last_error()) > 0 && missing == NULL);
  CHECK(gridlu_grid_free(grid) == GRIDLU_ERROR_USAGE); /* a is alive */
  CHECK(gridlu_matrix_free(a) == GRIDLU_OK);
}

int main(int argc, char** argv) {
  MPI_Init(&argc, &argv);
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  gridlu_grid* grid = NULL;
  CHECK(gridlu_grid_create(MPI_COMM_WORLD, 0, 0, &grid) == GRIDLU_OK);
  CHECK(gridlu_grid_create(MPI_COMM_WORLD, 0, 0, NULL) == GRIDLU_ERROR_USAGE);
  CHECK(strstr(gridlu_last_error(), "NULL") != NULL);
  int p, q, myrow, mycol, size;
  MPI_Comm_size(MPI_COMM_WORLD, &size);
  CHECK(gridlu_grid_shape(grid, &p, &q, &myrow, &mycol) == GRIDLU_OK);
  CHECK(p * q == size && myrow * q + mycol == rank);
  solve_known_system(grid, GRIDLU_FLOAT64);
  solve_known_system(grid, GRIDLU_COMPLEX128);
  refusals(grid);
  round_trip(grid);
  CHECK(gridlu_grid_free(grid) == GRIDLU_OK);
  MPI_Allreduce(MPI_IN_PLACE, &failures, 1, MPI_INT, MPI_SUM, MPI_COMM_WORLD);
  if (rank == 0) printf("%d failed checks\n", failures);
  MPI_Finalize();
  return failures != 0;
}
