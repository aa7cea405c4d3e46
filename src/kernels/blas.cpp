// The one place that calls CBLAS and LAPACKE (OpenBLAS).
#include "kernels/blas.hpp"

#include <cblas.h>
#include <lapacke.h>

#include <algorithm>
#include <complex>
#include <vector>

namespace gridlu::blas {
namespace {

CBLAS_TRANSPOSE to_cblas(op o) {
  return o == op::none ? CblasNoTrans : o == op::transpose ? CblasTrans : CblasConjTrans;
}
char to_lapack(op o) { return o == op::none ? 'N' : o == op::transpose ? 'T' : 'C'; }
CBLAS_UPLO to_cblas(triangle t) { return t == triangle::lower ? CblasLower : CblasUpper; }
CBLAS_DIAG to_cblas(diagonal d) { return d == diagonal::unit ? CblasUnit : CblasNonUnit; }
blasint bi(index_t v) { return static_cast<blasint>(v); }
// BLAS wants leading dimensions >= 1 even for empty operands; empty calls do nothing.
blasint ld(index_t v) { return static_cast<blasint>(std::max<index_t>(1, v)); }
bool empty(index_t m, index_t n) { return m <= 0 || n <= 0; }

using cf = std::complex<float>;
using cd = std::complex<double>;

}  // namespace

template <>
void gemm<float>(op opa, op opb, index_t m, index_t n, index_t k, float alpha, const float* a,
                 index_t lda, const float* b, index_t ldb, float beta, float* c, index_t ldc) {
  if (empty(m, n)) return;
  cblas_sgemm(CblasColMajor, to_cblas(opa), to_cblas(opb), bi(m), bi(n), bi(k), alpha, a, ld(lda),
              b, ld(ldb), beta, c, ld(ldc));
}
template <>
void gemm<double>(op opa, op opb, index_t m, index_t n, index_t k, double alpha, const double* a,
                  index_t lda, const double* b, index_t ldb, double beta, double* c, index_t ldc) {
  if (empty(m, n)) return;
  cblas_dgemm(CblasColMajor, to_cblas(opa), to_cblas(opb), bi(m), bi(n), bi(k), alpha, a, ld(lda),
              b, ld(ldb), beta, c, ld(ldc));
}
template <>
void gemm<cf>(op opa, op opb, index_t m, index_t n, index_t k, cf alpha, const cf* a, index_t lda,
              const cf* b, index_t ldb, cf beta, cf* c, index_t ldc) {
  if (empty(m, n)) return;
  cblas_cgemm(CblasColMajor, to_cblas(opa), to_cblas(opb), bi(m), bi(n), bi(k), &alpha, a, ld(lda),
              b, ld(ldb), &beta, c, ld(ldc));
}
template <>
void gemm<cd>(op opa, op opb, index_t m, index_t n, index_t k, cd alpha, const cd* a, index_t lda,
              const cd* b, index_t ldb, cd beta, cd* c, index_t ldc) {
  if (empty(m, n)) return;
  cblas_zgemm(CblasColMajor, to_cblas(opa), to_cblas(opb), bi(m), bi(n), bi(k), &alpha, a, ld(lda),
              b, ld(ldb), &beta, c, ld(ldc));
}

namespace {
// y = alpha op(a) x + beta y, a stored rows x cols.
template <class T>
void gemv(op opa, index_t rows, index_t cols, T alpha, const T* a, index_t lda, const T* x, T beta,
          T* y);
template <>
void gemv<float>(op opa, index_t rows, index_t cols, float alpha, const float* a, index_t lda,
                 const float* x, float beta, float* y) {
  cblas_sgemv(CblasColMajor, to_cblas(opa), bi(rows), bi(cols), alpha, a, ld(lda), x, 1, beta, y,
              1);
}
template <>
void gemv<double>(op opa, index_t rows, index_t cols, double alpha, const double* a, index_t lda,
                  const double* x, double beta, double* y) {
  cblas_dgemv(CblasColMajor, to_cblas(opa), bi(rows), bi(cols), alpha, a, ld(lda), x, 1, beta, y,
              1);
}
}  // namespace

template <scalar T>
void gemm_few(op opa, index_t m, index_t n, index_t k, T alpha, const T* a, index_t lda, const T* b,
              index_t ldb, T beta, T* c, index_t ldc) {
  if constexpr (scalar_traits<T>::is_complex) {
    gemm(opa, op::none, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc);
  } else {
    if (n != 1) return gemm(opa, op::none, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc);
    if (m <= 0) return;
    const bool plain = opa == op::none;
    gemv(opa, plain ? m : k, plain ? k : m, alpha, a, lda, b, beta, c);
  }
}

template <>
void trsm_left<float>(triangle uplo, diagonal diag, op how, index_t m, index_t n, float alpha,
                      const float* a, index_t lda, float* b, index_t ldb) {
  if (empty(m, n)) return;
  cblas_strsm(CblasColMajor, CblasLeft, to_cblas(uplo), to_cblas(how), to_cblas(diag), bi(m), bi(n),
              alpha, a, ld(lda), b, ld(ldb));
}
template <>
void trsm_left<double>(triangle uplo, diagonal diag, op how, index_t m, index_t n, double alpha,
                       const double* a, index_t lda, double* b, index_t ldb) {
  if (empty(m, n)) return;
  cblas_dtrsm(CblasColMajor, CblasLeft, to_cblas(uplo), to_cblas(how), to_cblas(diag), bi(m), bi(n),
              alpha, a, ld(lda), b, ld(ldb));
}
template <>
void trsm_left<cf>(triangle uplo, diagonal diag, op how, index_t m, index_t n, cf alpha,
                   const cf* a, index_t lda, cf* b, index_t ldb) {
  if (empty(m, n)) return;
  cblas_ctrsm(CblasColMajor, CblasLeft, to_cblas(uplo), to_cblas(how), to_cblas(diag), bi(m), bi(n),
              &alpha, a, ld(lda), b, ld(ldb));
}
template <>
void trsm_left<cd>(triangle uplo, diagonal diag, op how, index_t m, index_t n, cd alpha,
                   const cd* a, index_t lda, cd* b, index_t ldb) {
  if (empty(m, n)) return;
  cblas_ztrsm(CblasColMajor, CblasLeft, to_cblas(uplo), to_cblas(how), to_cblas(diag), bi(m), bi(n),
              &alpha, a, ld(lda), b, ld(ldb));
}

template <>
void rank1<float>(index_t m, index_t n, float alpha, const float* x, const float* y, float* a,
                  index_t lda) {
  if (empty(m, n)) return;
  cblas_sger(CblasColMajor, bi(m), bi(n), alpha, x, 1, y, 1, a, ld(lda));
}
template <>
void rank1<double>(index_t m, index_t n, double alpha, const double* x, const double* y, double* a,
                   index_t lda) {
  if (empty(m, n)) return;
  cblas_dger(CblasColMajor, bi(m), bi(n), alpha, x, 1, y, 1, a, ld(lda));
}
template <>
void rank1<cf>(index_t m, index_t n, cf alpha, const cf* x, const cf* y, cf* a, index_t lda) {
  if (empty(m, n)) return;
  cblas_cgeru(CblasColMajor, bi(m), bi(n), &alpha, x, 1, y, 1, a, ld(lda));
}
template <>
void rank1<cd>(index_t m, index_t n, cd alpha, const cd* x, const cd* y, cd* a, index_t lda) {
  if (empty(m, n)) return;
  cblas_zgeru(CblasColMajor, bi(m), bi(n), &alpha, x, 1, y, 1, a, ld(lda));
}

template <>
void scale<float>(index_t n, float alpha, float* x) {
  if (n <= 0) return;
  cblas_sscal(bi(n), alpha, x, 1);
}
template <>
void scale<double>(index_t n, double alpha, double* x) {
  if (n <= 0) return;
  cblas_dscal(bi(n), alpha, x, 1);
}
template <>
void scale<cf>(index_t n, cf alpha, cf* x) {
  if (n <= 0) return;
  cblas_cscal(bi(n), &alpha, x, 1);
}
template <>
void scale<cd>(index_t n, cd alpha, cd* x) {
  if (n <= 0) return;
  cblas_zscal(bi(n), &alpha, x, 1);
}

template <>
int lapack_getrf<float>(index_t m, index_t n, float* a, index_t lda, std::int32_t* ipiv) {
  return LAPACKE_sgetrf(LAPACK_COL_MAJOR, bi(m), bi(n), a, ld(lda), ipiv);
}
template <>
int lapack_getrf<double>(index_t m, index_t n, double* a, index_t lda, std::int32_t* ipiv) {
  return LAPACKE_dgetrf(LAPACK_COL_MAJOR, bi(m), bi(n), a, ld(lda), ipiv);
}
template <>
int lapack_getrf<cf>(index_t m, index_t n, cf* a, index_t lda, std::int32_t* ipiv) {
  return LAPACKE_cgetrf(LAPACK_COL_MAJOR, bi(m), bi(n), reinterpret_cast<lapack_complex_float*>(a),
                        ld(lda), ipiv);
}
template <>
int lapack_getrf<cd>(index_t m, index_t n, cd* a, index_t lda, std::int32_t* ipiv) {
  return LAPACKE_zgetrf(LAPACK_COL_MAJOR, bi(m), bi(n), reinterpret_cast<lapack_complex_double*>(a),
                        ld(lda), ipiv);
}

template <>
int lapack_getrs<float>(op how, index_t n, index_t nrhs, const float* lu, index_t lda,
                        const std::int32_t* ipiv, float* b, index_t ldb) {
  return LAPACKE_sgetrs(LAPACK_COL_MAJOR, to_lapack(how), bi(n), bi(nrhs), lu, ld(lda), ipiv, b,
                        ld(ldb));
}
template <>
int lapack_getrs<double>(op how, index_t n, index_t nrhs, const double* lu, index_t lda,
                         const std::int32_t* ipiv, double* b, index_t ldb) {
  return LAPACKE_dgetrs(LAPACK_COL_MAJOR, to_lapack(how), bi(n), bi(nrhs), lu, ld(lda), ipiv, b,
                        ld(ldb));
}
template <>
int lapack_getrs<cf>(op how, index_t n, index_t nrhs, const cf* lu, index_t lda,
                     const std::int32_t* ipiv, cf* b, index_t ldb) {
  return LAPACKE_cgetrs(LAPACK_COL_MAJOR, to_lapack(how), bi(n), bi(nrhs),
                        reinterpret_cast<const lapack_complex_float*>(lu), ld(lda), ipiv,
                        reinterpret_cast<lapack_complex_float*>(b), ld(ldb));
}
template <>
int lapack_getrs<cd>(op how, index_t n, index_t nrhs, const cd* lu, index_t lda,
                     const std::int32_t* ipiv, cd* b, index_t ldb) {
  return LAPACKE_zgetrs(LAPACK_COL_MAJOR, to_lapack(how), bi(n), bi(nrhs),
                        reinterpret_cast<const lapack_complex_double*>(lu), ld(lda), ipiv,
                        reinterpret_cast<lapack_complex_double*>(b), ld(ldb));
}

template <>
int lapack_qr_factor_q<float>(index_t n, float* a, index_t lda) {
  std::vector<float> tau(static_cast<std::size_t>(n));
  const int info = LAPACKE_sgeqrf(LAPACK_COL_MAJOR, bi(n), bi(n), a, ld(lda), tau.data());
  return info != 0 ? info
                   : LAPACKE_sorgqr(LAPACK_COL_MAJOR, bi(n), bi(n), bi(n), a, ld(lda), tau.data());
}
template <>
int lapack_qr_factor_q<double>(index_t n, double* a, index_t lda) {
  std::vector<double> tau(static_cast<std::size_t>(n));
  const int info = LAPACKE_dgeqrf(LAPACK_COL_MAJOR, bi(n), bi(n), a, ld(lda), tau.data());
  return info != 0 ? info
                   : LAPACKE_dorgqr(LAPACK_COL_MAJOR, bi(n), bi(n), bi(n), a, ld(lda), tau.data());
}
template <>
int lapack_qr_factor_q<cf>(index_t n, cf* a, index_t lda) {
  std::vector<cf> tau(static_cast<std::size_t>(n));
  auto* la = reinterpret_cast<lapack_complex_float*>(a);
  auto* lt = reinterpret_cast<lapack_complex_float*>(tau.data());
  const int info = LAPACKE_cgeqrf(LAPACK_COL_MAJOR, bi(n), bi(n), la, ld(lda), lt);
  return info != 0 ? info : LAPACKE_cungqr(LAPACK_COL_MAJOR, bi(n), bi(n), bi(n), la, ld(lda), lt);
}
template <>
int lapack_qr_factor_q<cd>(index_t n, cd* a, index_t lda) {
  std::vector<cd> tau(static_cast<std::size_t>(n));
  auto* la = reinterpret_cast<lapack_complex_double*>(a);
  auto* lt = reinterpret_cast<lapack_complex_double*>(tau.data());
  const int info = LAPACKE_zgeqrf(LAPACK_COL_MAJOR, bi(n), bi(n), la, ld(lda), lt);
  return info != 0 ? info : LAPACKE_zungqr(LAPACK_COL_MAJOR, bi(n), bi(n), bi(n), la, ld(lda), lt);
}

#define INSTANTIATE(T)                                                                     \
  template void gemm_few<T>(op, index_t, index_t, index_t, T, const T*, index_t, const T*, \
                            index_t, T, T*, index_t);
INSTANTIATE(float)
INSTANTIATE(double)
INSTANTIATE(cf)
INSTANTIATE(cd)
#undef INSTANTIATE

std::string library_version() { return openblas_get_config(); }

void set_threads(int threads) { openblas_set_num_threads(threads); }

}  // namespace gridlu::blas
