/* weft: principal component analysis of embedding rows (the 2-D map of GET /v1/map). */
#ifndef WEFT_PCA_H
#define WEFT_PCA_H

#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"

/** Most components weft_pca_project() gives. */
#define WEFT_PCA_MAX_K 8

/**
 * Choose @p m of the row ids 0..@p n-1 uniformly at random, the same ones for the same
 * (@p n, @p m, @p seed), written ascending into @p rows: selection sampling (Knuth, TAOCP
 * vol. 2, 3.4.2, Algorithm S). With @p m >= @p n every id is written (n of them).
 * @param rows  min(m, n) entries; n <= 2^32
 * @return the count written, min(m, n)
 * Threads: reentrant, allocates nothing. Cost: O(n), one random number per id looked at.
 */
size_t weft_pca_sample(uint32_t *rows, size_t n, size_t m, uint64_t seed);

/** What weft_pca_project() found besides the coordinates. */
typedef struct weft_pca_fit {
    size_t k;                          /**< components computed */
    double variance[WEFT_PCA_MAX_K];   /**< variance along each component (an eigenvalue of
                                            the covariance, divided by m - 1), descending */
    double total;                      /**< total variance: the covariance's trace, so that
                                            variance[j] / total is component j's share */
    size_t iterations;                 /**< subspace iterations run (0: nothing to iterate) */
    double residual;                   /**< largest ||C v - lambda v|| / lambda_1 of the k
                                            components at the end (0 when total is 0) */
} weft_pca_fit;

/**
 * Project rows @p rows of @p x onto their first @p k principal components (Pearson 1901):
 * the rows are centred on their mean, and component j is the eigenvector of their covariance
 * C = X_c^T X_c / (m - 1) with the j-th largest eigenvalue, as numpy gives them through the
 * SVD of X_c (right singular vectors, variances s^2 / (m - 1)). Each component's sign is
 * fixed so that its largest coefficient in absolute value is positive (a tie goes to the
 * first). C is summed in double precision (cblas_dsyrk over blocks of rows); its top
 * eigenvectors come from subspace iteration with Rayleigh-Ritz steps (Golub & Van Loan,
 * Matrix Computations, 4th ed., 8.2.4 and 8.3), stopped when every residual is below
 * 1e-10 lambda_1 or after 5,000 iterations. Components past d, or past the rank of C,
 * have variance 0 and coordinate 0.
 * @param out   (m, k) row-major: row i holds the coordinates of x[rows[i]]
 * @param fit   variances, total, iterations
 * @param x     (n, d) row-major; only the listed rows are read
 * @param rows  (m) ids of rows of x, or NULL for the rows 0..m-1
 * @param k     1..WEFT_PCA_MAX_K
 * @param err   may be NULL
 * @return WEFT_OK, WEFT_ERR_INVALID (k out of range, d == 0, or a listed row holds a NaN or
 *         an infinity: the message names the row), WEFT_ERR_NOMEM
 * Threads: reentrant; allocates O(d^2 + 256 d) doubles, freed before it returns. Cost:
 * O(m d^2) for C, then O(d^2 (k + 6)) per iteration.
 */
weft_err weft_pca_project(float *out, weft_pca_fit *fit, const float *x, const uint32_t *rows,
                          size_t m, size_t d, size_t k, weft_error *err);

#endif
