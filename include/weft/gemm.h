/* weft: single-precision matrix products, C = alpha * op(A) op(B) + beta * C, row-major.
 * On CPUs with AVX-512 weft uses its own packed kernel (a 12 x 32 register tile); elsewhere
 * cblas_sgemm. The products the trainer and the evaluator need are all of this form. */
#ifndef WEFT_GEMM_H
#define WEFT_GEMM_H

#include <stdbool.h>
#include <stddef.h>

/**
 * C (m x n) = alpha * op(A) op(B) + beta * C, where op(A) is m x k (A, or A^T when
 * @p trans_a, stored row-major with leading dimension @p lda) and op(B) is k x n likewise.
 * With beta == 0, C is not read (NaN in C does not propagate).
 * @param n_threads  threads to use (>= 1); the result does not depend on it
 * Thread-safe. The calling thread keeps its packing space (at most about 2 MB per thread used)
 * until it ends; the helper threads of a product are kept for the next one, and a caller that
 * finds them busy with another caller's product starts threads of its own.
 */
void weft_gemm(bool trans_a, bool trans_b, size_t m, size_t n, size_t k, float alpha,
               const float *a, size_t lda, const float *b, size_t ldb, float beta, float *c,
               size_t ldc, size_t n_threads);

/** The same product by three plain loops summing in double: the reference for tests. */
void weft_gemm_ref(bool trans_a, bool trans_b, size_t m, size_t n, size_t k, float alpha,
                   const float *a, size_t lda, const float *b, size_t ldb, float beta, float *c,
                   size_t ldc);

/** True when weft_gemm uses its own kernel on this CPU (false: it calls cblas_sgemm). */
bool weft_gemm_is_native(void);

/**
 * Allow (true, the default) or forbid weft_gemm's own kernel, process-wide; forbidding sends
 * every product to cblas_sgemm. For tests and side-by-side measurements. Thread-safe.
 */
void weft_gemm_allow_native(bool allow);

#endif
