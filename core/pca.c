/* Principal components of embedding rows: the covariance summed in double precision, its
 * top eigenvectors by subspace iteration with Rayleigh-Ritz steps, and the projection.
 * Shapes: x (n, d) row-major; C (d, d); the blocks Q, Z, V, CV (d, p) row-major, column j
 * one vector; H, W (p, p). p = min(d, k + PCA_EXTRA) vectors are iterated so that the k
 * wanted ones converge at the rate lambda_{p+1} / lambda_k rather than lambda_{k+1} /
 * lambda_k (Golub & Van Loan, Matrix Computations, 4th ed., 8.2.4). */
#include "weft/pca.h"

#include <cblas.h>
#include <math.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/rng.h"

enum {
    PCA_BLOCK_ROWS = 256,     /* centred rows per cblas_dsyrk call */
    PCA_EXTRA = 6,            /* vectors iterated beyond the k wanted */
    PCA_MAX_ITERATIONS = 5000,
    PCA_JACOBI_SWEEPS = 60    /* cyclic Jacobi on p <= 14 converges in well under 10 */
};
/* Every residual ||C v - lambda v|| below this share of lambda_1 ends the iteration. */
#define PCA_TOL 1e-10
/* The start block is random: a fixed seed keeps every answer the same. */
#define PCA_SEED UINT64_C(0x77656674)

size_t weft_pca_sample(uint32_t *rows, size_t n, size_t m, uint64_t seed)
{
    if (m >= n) {
        for (size_t i = 0; i < n; i++)
            rows[i] = (uint32_t)i;
        return n;
    }
    /* Algorithm S: id i is taken with probability (wanted - taken) / (n - i), which is 1
     * once as many ids are left as are still wanted, so exactly m are taken. */
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    size_t taken = 0;
    for (size_t i = 0; i < n && taken < m; i++)
        if ((double)(n - i) * weft_rng_double(&rng) < (double)(m - taken))
            rows[taken++] = (uint32_t)i;
    return taken;
}

static const float *row_of(const float *x, const uint32_t *rows, size_t i, size_t d)
{
    return x + (size_t)(rows ? rows[i] : i) * d;
}

/* a * b doubles, or NULL when the count overflows or memory is short. */
static double *alloc_doubles(size_t a, size_t b)
{
    if (b != 0 && a > SIZE_MAX / b)
        return NULL;
    return weft_alloc_array(a * b, sizeof(double));
}

/* mean (d): the mean of the listed rows; fails on the first non-finite value. */
static weft_err row_mean(double *mean, const float *x, const uint32_t *rows, size_t m, size_t d,
                         weft_error *err)
{
    memset(mean, 0, d * sizeof *mean);
    for (size_t i = 0; i < m; i++) {
        const float *r = row_of(x, rows, i, d);
        for (size_t c = 0; c < d; c++) {
            if (!isfinite(r[c]))
                return weft_error_set(err, WEFT_ERR_INVALID,
                                      "row %zu holds a non-finite value (column %zu)",
                                      rows ? (size_t)rows[i] : i, c);
            mean[c] += r[c];
        }
    }
    for (size_t c = 0; c < d; c++)
        mean[c] /= (double)m;
    return WEFT_OK;
}

/* cov (d, d) = X_c^T X_c / (m - 1), summed block by block; block: (PCA_BLOCK_ROWS, d). */
static void covariance(double *cov, double *block, const double *mean, const float *x,
                       const uint32_t *rows, size_t m, size_t d)
{
    memset(cov, 0, d * d * sizeof *cov);
    for (size_t i0 = 0; i0 < m; i0 += PCA_BLOCK_ROWS) {
        size_t b = m - i0 < PCA_BLOCK_ROWS ? m - i0 : PCA_BLOCK_ROWS;
        for (size_t i = 0; i < b; i++) {
            const float *r = row_of(x, rows, i0 + i, d);
            for (size_t c = 0; c < d; c++)
                block[i * d + c] = (double)r[c] - mean[c];
        }
        cblas_dsyrk(CblasRowMajor, CblasUpper, CblasTrans, (int)d, (int)b, 1.0, block, (int)d,
                    1.0, cov, (int)d);
    }
    double scale = m > 1 ? 1.0 / (double)(m - 1) : 0.0;
    for (size_t a = 0; a < d; a++)
        for (size_t b = a; b < d; b++) {
            cov[a * d + b] *= scale;
            cov[b * d + a] = cov[a * d + b];
        }
}

static double column_dot(const double *q, size_t a, size_t b, size_t d, size_t p)
{
    double s = 0.0;
    for (size_t c = 0; c < d; c++)
        s += q[c * p + a] * q[c * p + b];
    return s;
}

static void random_column(double *q, size_t j, size_t d, size_t p, weft_rng *rng)
{
    for (size_t c = 0; c < d; c++)
        q[c * p + j] = weft_rng_double(rng) - 0.5;
}

/* Make the p columns of q (d, p) orthonormal: modified Gram-Schmidt, twice over each
 * column ("twice is enough", Giraud et al. 2005). A column that lies in the span of those
 * before it (C's rank is below p) is replaced by a random one; p <= d makes that end. */
static void orthonormalise(double *q, size_t d, size_t p, weft_rng *rng)
{
    for (size_t j = 0; j < p; j++) {
        for (;;) {
            double before = sqrt(column_dot(q, j, j, d, p));
            for (int pass = 0; pass < 2; pass++)
                for (size_t i = 0; i < j; i++) {
                    double r = column_dot(q, i, j, d, p);
                    for (size_t c = 0; c < d; c++)
                        q[c * p + j] -= r * q[c * p + i];
                }
            double after = sqrt(column_dot(q, j, j, d, p));
            if (before > 0.0 && after > 1e-8 * before) {
                for (size_t c = 0; c < d; c++)
                    q[c * p + j] /= after;
                break;
            }
            random_column(q, j, d, p, rng);
        }
    }
}

/* Eigenvalues and eigenvectors of the symmetric a (p, p), by cyclic Jacobi rotations
 * (Golub & Van Loan 8.5.2 and 8.5.3). a is overwritten; on return its diagonal holds the
 * eigenvalues in descending order into val, and the columns of v (p, p) the eigenvectors. */
static void jacobi_eigen(double *val, double *v, double *a, size_t p)
{
    memset(v, 0, p * p * sizeof *v);
    for (size_t i = 0; i < p; i++)
        v[i * p + i] = 1.0;
    for (int sweep = 0; sweep < PCA_JACOBI_SWEEPS; sweep++) {
        double off = 0.0, all = 0.0;
        for (size_t i = 0; i < p; i++)
            for (size_t j = 0; j < p; j++) {
                all += a[i * p + j] * a[i * p + j];
                off += i != j ? a[i * p + j] * a[i * p + j] : 0.0;
            }
        if (off <= 1e-30 * all)
            break;
        for (size_t r = 0; r + 1 < p; r++)
            for (size_t s = r + 1; s < p; s++) {
                double ars = a[r * p + s];
                if (ars == 0.0)
                    continue;
                /* sym.schur2: the rotation (c, s) that zeroes a_rs */
                double tau = (a[s * p + s] - a[r * p + r]) / (2.0 * ars);
                double t = tau >= 0.0 ? 1.0 / (tau + sqrt(1.0 + tau * tau))
                                      : -1.0 / (-tau + sqrt(1.0 + tau * tau));
                double cs = 1.0 / sqrt(1.0 + t * t), sn = t * cs;
                for (size_t i = 0; i < p; i++) {   /* a J */
                    double air = a[i * p + r], ais = a[i * p + s];
                    a[i * p + r] = cs * air - sn * ais;
                    a[i * p + s] = sn * air + cs * ais;
                }
                for (size_t i = 0; i < p; i++) {   /* J^T (a J) */
                    double ari = a[r * p + i], asi = a[s * p + i];
                    a[r * p + i] = cs * ari - sn * asi;
                    a[s * p + i] = sn * ari + cs * asi;
                }
                for (size_t i = 0; i < p; i++) {   /* v J */
                    double vir = v[i * p + r], vis = v[i * p + s];
                    v[i * p + r] = cs * vir - sn * vis;
                    v[i * p + s] = sn * vir + cs * vis;
                }
            }
    }
    for (size_t i = 0; i < p; i++)
        val[i] = a[i * p + i];
    for (size_t i = 0; i < p; i++) {   /* selection sort, descending, columns with them */
        size_t best = i;
        for (size_t j = i + 1; j < p; j++)
            if (val[j] > val[best])
                best = j;
        if (best == i)
            continue;
        double tv = val[i];
        val[i] = val[best];
        val[best] = tv;
        for (size_t r = 0; r < p; r++) {
            double tw = v[r * p + i];
            v[r * p + i] = v[r * p + best];
            v[r * p + best] = tw;
        }
    }
}

/* The workspace of one subspace iteration. */
struct subspace {
    size_t d, p;
    double *q, *z, *vecs, *cvecs;   /* (d, p) each */
    double *h, *w;                  /* (p, p) each */
    double *val;                    /* (p) */
};

/* One step: z = C q, Ritz pairs of C in span(q) into val and vecs (d, p), C vecs into
 * cvecs; the next q is cvecs orthonormalised. @return the largest residual of the first k,
 * relative to the largest Ritz value. */
static double subspace_step(struct subspace *s, const double *cov, size_t k, weft_rng *rng)
{
    size_t d = s->d, p = s->p;
    cblas_dsymm(CblasRowMajor, CblasLeft, CblasUpper, (int)d, (int)p, 1.0, cov, (int)d, s->q,
                (int)p, 0.0, s->z, (int)p);
    cblas_dgemm(CblasRowMajor, CblasTrans, CblasNoTrans, (int)p, (int)p, (int)d, 1.0, s->q,
                (int)p, s->z, (int)p, 0.0, s->h, (int)p);
    for (size_t i = 0; i < p; i++)   /* H = Q^T C Q is symmetric up to rounding */
        for (size_t j = i + 1; j < p; j++)
            s->h[i * p + j] = s->h[j * p + i] = 0.5 * (s->h[i * p + j] + s->h[j * p + i]);
    jacobi_eigen(s->val, s->w, s->h, p);
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)d, (int)p, (int)p, 1.0, s->q,
                (int)p, s->w, (int)p, 0.0, s->vecs, (int)p);
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)d, (int)p, (int)p, 1.0, s->z,
                (int)p, s->w, (int)p, 0.0, s->cvecs, (int)p);
    double scale = s->val[0] > 0.0 ? s->val[0] : 1.0, worst = 0.0;
    for (size_t j = 0; j < k; j++) {
        double r2 = 0.0;
        for (size_t c = 0; c < d; c++) {
            double e = s->cvecs[c * p + j] - s->val[j] * s->vecs[c * p + j];
            r2 += e * e;
        }
        worst = fmax(worst, sqrt(r2) / scale);
    }
    memcpy(s->q, s->cvecs, d * p * sizeof *s->q);
    orthonormalise(s->q, d, p, rng);
    return worst;
}

/* Flip column j of vecs (d, p) so that its largest coefficient in absolute value (the
 * first of equals) is positive. */
static void fix_sign(double *vecs, size_t j, size_t d, size_t p)
{
    size_t at = 0;
    for (size_t c = 1; c < d; c++)
        if (fabs(vecs[c * p + j]) > fabs(vecs[at * p + j]))
            at = c;
    if (vecs[at * p + j] < 0.0)
        for (size_t c = 0; c < d; c++)
            vecs[c * p + j] = -vecs[c * p + j];
}

/* The first k eigenpairs of cov (d, d) into fit and the first k columns of s->vecs. */
static void top_eigenpairs(weft_pca_fit *fit, struct subspace *s, const double *cov, size_t k)
{
    weft_rng rng;
    weft_rng_seed(&rng, PCA_SEED);
    for (size_t j = 0; j < s->p; j++)
        random_column(s->q, j, s->d, s->p, &rng);
    orthonormalise(s->q, s->d, s->p, &rng);
    double residual = INFINITY;
    size_t it = 0;
    while (it < PCA_MAX_ITERATIONS && residual > PCA_TOL) {
        residual = subspace_step(s, cov, k, &rng);
        it++;
    }
    fit->iterations = it;
    fit->residual = residual;
    for (size_t j = 0; j < k; j++) {
        fix_sign(s->vecs, j, s->d, s->p);
        fit->variance[j] = s->val[j];
    }
}

/* out (m, k): (x[rows[i]] - mean) . vecs[:, j] for the first kk components, 0 past them. */
static void project(float *out, const float *x, const uint32_t *rows, const double *mean,
                    const double *vecs, size_t m, size_t d, size_t p, size_t k, size_t kk)
{
    for (size_t i = 0; i < m; i++) {
        const float *r = row_of(x, rows, i, d);
        for (size_t j = 0; j < k; j++) {
            double acc = 0.0;
            for (size_t c = 0; j < kk && c < d; c++)
                acc += ((double)r[c] - mean[c]) * vecs[c * p + j];
            out[i * k + j] = (float)acc;
        }
    }
}

weft_err weft_pca_project(float *out, weft_pca_fit *fit, const float *x, const uint32_t *rows,
                          size_t m, size_t d, size_t k, weft_error *err)
{
    if (k < 1 || k > WEFT_PCA_MAX_K || d == 0)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "PCA needs 1 to %d components of rows of at least one value, "
                              "not %zu of %zu", WEFT_PCA_MAX_K, k, d);
    weft_pca_fit f = { .k = k };
    if (m == 0) {
        *fit = f;
        return WEFT_OK;
    }
    size_t kk = k < d ? k : d;   /* components that exist */
    struct subspace s = { .d = d, .p = d < k + PCA_EXTRA ? d : k + PCA_EXTRA };
    double *mean = alloc_doubles(d, 1), *cov = alloc_doubles(d, d);
    double *block = alloc_doubles(PCA_BLOCK_ROWS, d);
    s.q = alloc_doubles(d, s.p);
    s.z = alloc_doubles(d, s.p);
    s.vecs = alloc_doubles(d, s.p);
    s.cvecs = alloc_doubles(d, s.p);
    s.h = alloc_doubles(s.p, s.p);
    s.w = alloc_doubles(s.p, s.p);
    s.val = alloc_doubles(s.p, 1);
    weft_err rc = WEFT_OK;
    if (!mean || !cov || !block || !s.q || !s.z || !s.vecs || !s.cvecs || !s.h || !s.w ||
        !s.val) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the PCA of %zu x %zu values",
                            m, d);
        goto done;
    }
    if ((rc = row_mean(mean, x, rows, m, d, err)) != WEFT_OK)
        goto done;
    covariance(cov, block, mean, x, rows, m, d);
    for (size_t c = 0; c < d; c++)
        f.total += cov[c * d + c];
    if (f.total > 0.0) {
        top_eigenpairs(&f, &s, cov, kk);
        /* Below rounding of the total, a component is noise in the null space of C. */
        size_t kept = 0;
        while (kept < kk && f.variance[kept] > 1e-12 * f.total)
            kept++;
        kk = kept;
        for (size_t j = kk; j < k; j++)
            f.variance[j] = 0.0;
    } else {
        kk = 0;   /* every listed row is the same: every coordinate is 0 */
    }
    project(out, x, rows, mean, s.vecs, m, d, s.p, k, kk);
    *fit = f;
done:
    free(mean);
    free(cov);
    free(block);
    free(s.q);
    free(s.z);
    free(s.vecs);
    free(s.cvecs);
    free(s.h);
    free(s.w);
    free(s.val);
    return rc;
}
