// Typed BLAS/LAPACK layer: the only code that calls CBLAS or LAPACKE. Column-major
// storage throughout; sizes are local and fit BLAS's 32-bit integers.
#pragma once

#include <cstdint>
#include <string>

#include "gridlu/layout.hpp"
#include "gridlu/scalar.hpp"

namespace gridlu::blas {

enum class op { none, transpose, adjoint };  // adjoint: conjugate transpose (transpose if real)
enum class triangle { lower, upper };
enum class diagonal { unit, non_unit };

// C = alpha op(A) op(B) + beta C, with op(A) m x k and op(B) k x n.
template <scalar T>
void gemm(op opa, op opb, index_t m, index_t n, index_t k, T alpha, const T* a, index_t lda,
          const T* b, index_t ldb, T beta, T* c, index_t ldc);

// gemm with op(b) = b for products with few columns, as the solves and residuals with
// few right-hand sides form them: one real column goes to GEMV, which reads op(a) once
// where OpenBLAS 0.3.21's GEMM packs it first (a solve with one right-hand side 3x
// faster). Complex columns stay with GEMM: under AddressSanitizer OpenBLAS 0.3.21's
// cgemv_n read past the end of an operand. The factorization keeps gemm: its panel ran
// about 2 % slower with GEMV.
template <scalar T>
void gemm_few(op opa, index_t m, index_t n, index_t k, T alpha, const T* a, index_t lda, const T* b,
              index_t ldb, T beta, T* c, index_t ldc);

// B = alpha inv(op(A)) B with A an m x m triangle (left side).
template <scalar T>
void trsm_left(triangle uplo, diagonal diag, op how, index_t m, index_t n, T alpha, const T* a,
               index_t lda, T* b, index_t ldb);

// A += alpha x y^T (unconjugated for complex).
template <scalar T>
void rank1(index_t m, index_t n, T alpha, const T* x, const T* y, T* a, index_t lda);

// x = alpha x, contiguous.
template <scalar T>
void scale(index_t n, T alpha, T* x);

// LAPACK's LU with partial pivoting of an m x n matrix: the panel of a one-rank process
// column, and the reference in tests and benchmarks. ipiv gets min(m, n) 1-based row
// indices; returns LAPACK's info.
template <scalar T>
int lapack_getrf(index_t m, index_t n, T* a, index_t lda, std::int32_t* ipiv);

// LAPACK's solve with getrf's factors: B = inv(op(A)) B. The reference in tests.
template <scalar T>
int lapack_getrs(op how, index_t n, index_t nrhs, const T* lu, index_t lda,
                 const std::int32_t* ipiv, T* b, index_t ldb);

// Overwrites the n x n matrix a with Q of its Householder QR factorization: from random
// entries, a random orthogonal (unitary) matrix for test systems of chosen singular
// values. Returns LAPACK's info.
template <scalar T>
int lapack_qr_factor_q(index_t n, T* a, index_t lda);

// The BLAS library's build description.
std::string library_version();

// Threads of the BLAS library itself (one per rank is gridlu's default).
void set_threads(int threads);

}  // namespace gridlu::blas
