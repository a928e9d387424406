/* Sparse matrices (include/weft/sparse.h). */
#include "weft/sparse.h"

#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "internal.h"

#define MAX_THREADS 64
/* Below this many multiply-adds a product runs on the calling thread: starting threads costs
 * tens of microseconds, about what one core needs for this much work. */
#define PARALLEL_MIN_WORK (1u << 20)

void weft_sparse_fini(weft_sparse *a)
{
    if (!a)
        return;
    free(a->off);
    free(a->col);
    free(a->val);
    memset(a, 0, sizeof *a);
}

static weft_err sparse_alloc(weft_sparse *a, size_t n_rows, size_t n_cols, size_t nnz,
                             weft_error *err)
{
    memset(a, 0, sizeof *a);
    a->n_rows = n_rows;
    a->n_cols = n_cols;
    a->off = weft_calloc_array(n_rows + 1, sizeof *a->off);
    a->col = weft_alloc_array(nnz ? nnz : 1, sizeof *a->col);
    a->val = weft_alloc_array(nnz ? nnz : 1, sizeof *a->val);
    if (!a->off || !a->col || !a->val) {
        weft_sparse_fini(a);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a sparse matrix of %zu "
                              "entries", nnz);
    }
    return WEFT_OK;
}

weft_err weft_sparse_transpose(const weft_sparse *a, weft_sparse *out, uint64_t **from,
                               weft_error *err)
{
    size_t nnz = weft_sparse_nnz(a);
    weft_sparse t;
    uint64_t *src = NULL;
    weft_err rc = sparse_alloc(&t, a->n_cols, a->n_rows, nnz, err);
    if (rc != WEFT_OK)
        return rc;
    if (from && !(src = weft_alloc_array(nnz ? nnz : 1, sizeof *src))) {
        weft_sparse_fini(&t);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory transposing a sparse matrix");
    }
    for (size_t k = 0; k < nnz; k++)
        t.off[a->col[k] + 1]++;
    for (size_t j = 0; j < t.n_rows; j++)
        t.off[j + 1] += t.off[j];
    /* Rows of a in ascending order keep each row of the transpose sorted. */
    uint64_t *fill = t.off;   /* advanced per entry, then shifted back below */
    for (size_t i = 0; i < a->n_rows; i++)
        for (uint64_t k = a->off[i]; k < a->off[i + 1]; k++) {
            uint64_t at = fill[a->col[k]]++;
            t.col[at] = (uint32_t)i;
            t.val[at] = a->val[k];
            if (src)
                src[at] = k;
        }
    memmove(t.off + 1, t.off, t.n_rows * sizeof *t.off);
    t.off[0] = 0;
    *out = t;
    if (from)
        *from = src;
    return WEFT_OK;
}

struct mm_job {
    float *y;
    const weft_sparse *a;
    const float *val, *x;
    size_t d, row0, row1;
};

/* Rows row0..row1 of y = A x. Columns go in blocks of 16 held in a local accumulator, which
 * the vectoriser keeps in one register per block; the tail of a row (d % 16) runs plainly. */
WEFT_CLONES static void mm_rows(const struct mm_job *j)
{
    const weft_sparse *a = j->a;
    const float *restrict x = j->x, *restrict val = j->val;
    size_t d = j->d, d16 = d / 16 * 16;
    for (size_t i = j->row0; i < j->row1; i++) {
        float *restrict yi = j->y + i * d;
        uint64_t k0 = a->off[i], k1 = a->off[i + 1];
        for (size_t c0 = 0; c0 < d16; c0 += 16) {
            float acc[16] = { 0 };
            for (uint64_t k = k0; k < k1; k++) {
                const float *xr = x + (size_t)a->col[k] * d + c0;
                float v = val[k];
                for (size_t c = 0; c < 16; c++)
                    acc[c] += v * xr[c];
            }
            memcpy(yi + c0, acc, sizeof acc);
        }
        if (d16 == d)
            continue;
        memset(yi + d16, 0, (d - d16) * sizeof *yi);
        for (uint64_t k = k0; k < k1; k++) {
            const float *xr = x + (size_t)a->col[k] * d;
            float v = val[k];
            for (size_t c = d16; c < d; c++)
                yi[c] += v * xr[c];
        }
    }
}

static void *mm_thread(void *p)
{
    mm_rows(p);
    return NULL;
}

void weft_sparse_mm(float *y, const weft_sparse *a, const float *val, const float *x, size_t d,
                    size_t n_threads)
{
    size_t nnz = weft_sparse_nnz(a);
    struct mm_job jobs[MAX_THREADS];
    if (!val)
        val = a->val;
    if (n_threads > MAX_THREADS)
        n_threads = MAX_THREADS;
    if (n_threads <= 1 || (double)nnz * (double)d < PARALLEL_MIN_WORK || a->n_rows < n_threads)
        n_threads = 1;
    /* Split rows so that each thread gets about the same number of entries (and rows). */
    size_t row = 0;
    for (size_t t = 0; t < n_threads; t++) {
        double goal = (double)(nnz + a->n_rows) * (double)(t + 1) / (double)n_threads;
        size_t end = row;
        while (end < a->n_rows && (double)(a->off[end + 1] + end + 1) <= goal)
            end++;
        if (t + 1 == n_threads)
            end = a->n_rows;
        jobs[t] = (struct mm_job){ y, a, val, x, d, row, end };
        row = end;
    }
    pthread_t tids[MAX_THREADS];
    bool started[MAX_THREADS] = { false };
    for (size_t t = 1; t < n_threads; t++)
        started[t] = pthread_create(&tids[t], NULL, mm_thread, &jobs[t]) == 0;
    mm_rows(&jobs[0]);
    for (size_t t = 1; t < n_threads; t++) {
        if (started[t])
            pthread_join(tids[t], NULL);
        else
            mm_rows(&jobs[t]);   /* no thread: do its share here */
    }
}

/* ---- normalised adjacency ---- */

static const char *const norm_names[] = { [WEFT_SPARSE_NORM_SYM] = "sym",
                                          [WEFT_SPARSE_NORM_ROW] = "row",
                                          [WEFT_SPARSE_NORM_NONE] = "none" };

const char *weft_sparse_norm_name(weft_sparse_norm v)
{
    return v >= WEFT_SPARSE_NORM_SYM && v <= WEFT_SPARSE_NORM_NONE ? norm_names[v] : NULL;
}

bool weft_sparse_norm_parse(const char *s, weft_sparse_norm *out)
{
    for (int v = WEFT_SPARSE_NORM_SYM; v <= WEFT_SPARSE_NORM_NONE; v++)
        if (!strcmp(s, norm_names[v])) {
            *out = (weft_sparse_norm)v;
            return true;
        }
    return false;
}

static int cmp_pair(const void *pa, const void *pb)
{
    const uint64_t a = *(const uint64_t *)pa, b = *(const uint64_t *)pb;
    return a < b ? -1 : a > b;
}

weft_err weft_sparse_adjacency(const weft_triple *e, size_t m, size_t n, weft_sparse_norm norm,
                               bool has_self_loops, weft_sparse *out, size_t *n_one_way,
                               weft_error *err)
{
    if (n > UINT32_MAX)
        return weft_error_set(err, WEFT_ERR_LIMIT, "adjacency: %zu nodes is too many", n);
    for (size_t i = 0; i < m; i++)
        if (e[i].s >= n || e[i].t >= n)
            return weft_error_set(err, WEFT_ERR_INVALID, "adjacency: edge %zu names node %u of "
                                  "%zu", i, e[i].s >= n ? e[i].s : e[i].t, n);
    /* Every edge in both directions plus the self-loops, as (row << 32 | col), sorted and
     * unique. The one-way count comes from the directed pairs before symmetrising. */
    size_t cap = 2 * m + (has_self_loops ? n : 0);
    if (m > (SIZE_MAX - n) / 2)
        return weft_error_set(err, WEFT_ERR_LIMIT, "adjacency: too many edges");
    uint64_t *p = weft_alloc_array(cap ? cap : 1, sizeof *p);
    float *deg = weft_calloc_array(n ? n : 1, sizeof *deg);
    if (!p || !deg) {
        free(p);
        free(deg);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory building the adjacency");
    }
    size_t k = 0;
    for (size_t i = 0; i < m; i++)
        if (e[i].s != e[i].t)
            p[k++] = (uint64_t)e[i].s << 32 | e[i].t;
    qsort(p, k, sizeof *p, cmp_pair);
    size_t u = 0;
    for (size_t i = 0; i < k; i++)
        if (u == 0 || p[i] != p[u - 1])
            p[u++] = p[i];
    if (n_one_way) {
        /* a pair (s, t) is two-way when (t, s) is also present */
        size_t one_way = 0;
        for (size_t i = 0; i < u; i++) {
            uint64_t rev = (p[i] & 0xffffffffu) << 32 | p[i] >> 32;
            if (!bsearch(&rev, p, u, sizeof *p, cmp_pair))
                one_way++;
        }
        *n_one_way = one_way;
    }
    k = u;
    for (size_t i = 0; i < u; i++)
        p[k++] = (p[i] & 0xffffffffu) << 32 | p[i] >> 32;
    if (has_self_loops)
        for (size_t v = 0; v < n; v++)
            p[k++] = (uint64_t)v << 32 | v;
    qsort(p, k, sizeof *p, cmp_pair);
    u = 0;
    for (size_t i = 0; i < k; i++)
        if (u == 0 || p[i] != p[u - 1])
            p[u++] = p[i];

    weft_sparse a;
    weft_err rc = sparse_alloc(&a, n, n, u, err);
    if (rc == WEFT_OK) {
        for (size_t i = 0; i < u; i++) {
            uint32_t r = (uint32_t)(p[i] >> 32);
            a.off[r + 1]++;
            a.col[i] = (uint32_t)p[i];
            deg[r] += 1.0f;
        }
        for (size_t v = 0; v < n; v++)
            a.off[v + 1] += a.off[v];
        for (size_t v = 0; v < n; v++)
            for (uint64_t j = a.off[v]; j < a.off[v + 1]; j++) {
                float w = 1.0f;
                if (norm == WEFT_SPARSE_NORM_ROW)
                    w = 1.0f / deg[v];
                else if (norm == WEFT_SPARSE_NORM_SYM)
                    w = (float)(1.0 / sqrt((double)deg[v] * (double)deg[a.col[j]]));
                a.val[j] = w;
            }
        *out = a;
    }
    free(p);
    free(deg);
    return rc;
}
