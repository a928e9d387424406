/* Exact top-10 over an N x D float32 matrix: one query at a time with weft_topk_scan, and
 * batches of 64 with weft_topk_scan_batch. Prints JSON lines shaped like
 * ../shared/bench/ref_topk.c's, for side-by-side runs; the matrix is allocated as there and
 * in ../shared/bench/bandwidth.c (2 MiB aligned, MADV_HUGEPAGE, filled before timing), so
 * the three read memory the same way.
 * usage: bench_topk N D [queries [batch_reps [portable]]]
 *   queries     one-query scans timed (default 16 when N >= 500000, else 64)
 *   batch_reps  batches of 64 timed (default 3; 0 skips the batch)
 *   portable    1: also time the portable loops (weft_topk_allow_native(false))
 * Each mode reports the median time. Every batch's lists are compared with the one-query
 * lists of the same queries; a mismatch exits 1. */
#define _DEFAULT_SOURCE   /* madvise */
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <time.h>

#include "weft/rng.h"
#include "weft/topk.h"

enum { K = 10, B = 64 };

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *t, size_t n)
{
    qsort(t, n, sizeof *t, cmp_double);
    return n % 2 ? t[n / 2] : 0.5 * (t[n / 2 - 1] + t[n / 2]);
}

/* As ref_topk.c and bandwidth.c allocate: 2 MiB aligned, huge pages asked for, touched. */
static float *big_alloc(size_t n_floats)
{
    void *p = NULL;
    if (n_floats > SIZE_MAX / sizeof(float) ||
        posix_memalign(&p, (size_t)2 << 20, n_floats * sizeof(float)) != 0)
        return NULL;
    madvise(p, n_floats * sizeof(float), MADV_HUGEPAGE);
    memset(p, 0, n_floats * sizeof(float));
    return p;
}

/* Median seconds of one weft_topk_scan over nq queries (cycling through the 64 of q);
 * the lists of the first 64 go to id1 / sc1 / n1. */
static double time_one(const float *e, size_t n, size_t d, const float *q, size_t nq,
                       uint32_t *id1, float *sc1, size_t *n1, unsigned long *chk)
{
    double *t = malloc(nq * sizeof *t);
    if (!t)
        return -1;
    weft_topk_scan(e, n, d, q, K, NULL, id1, sc1);   /* warm */
    for (size_t r = 0; r < nq; r++) {
        size_t j = r % B;
        double t0 = now();
        size_t got = weft_topk_scan(e, n, d, q + j * d, K, NULL, id1 + j * K, sc1 + j * K);
        t[r] = now() - t0;
        n1[j] = got;
        *chk += id1[j * K];
    }
    for (size_t j = nq; j < B; j++)   /* fill the lists the timed loop did not reach */
        n1[j] = weft_topk_scan(e, n, d, q + j * d, K, NULL, id1 + j * K, sc1 + j * K);
    double m = median(t, nq);
    free(t);
    return m;
}

/* Median seconds of one weft_topk_scan_batch of the 64 queries; false when any list differs
 * from the one-query lists. */
static bool time_batch(const float *e, size_t n, size_t d, const float *q, size_t reps,
                       const uint32_t *id1, const float *sc1, const size_t *n1, double *secs,
                       unsigned long *chk)
{
    uint32_t id[B * K];
    float sc[B * K];
    size_t cnt[B];
    double t[64];
    if (reps > 64)
        reps = 64;
    weft_topk_scan_batch(e, n, d, q, B, K, NULL, id, sc, cnt);   /* warm */
    bool same = true;
    for (size_t r = 0; r < reps; r++) {
        double t0 = now();
        weft_topk_scan_batch(e, n, d, q, B, K, NULL, id, sc, cnt);
        t[r] = now() - t0;
        for (size_t j = 0; j < B; j++) {
            same &= cnt[j] == n1[j];
            same &= memcmp(id + j * K, id1 + j * K, n1[j] * sizeof *id) == 0;
            same &= memcmp(sc + j * K, sc1 + j * K, n1[j] * sizeof *sc) == 0;
            *chk += id[j * K];
        }
    }
    *secs = median(t, reps);
    return same;
}

static int run(const float *e, size_t n, size_t d, const float *q, size_t nq, size_t reps,
               const char *path)
{
    uint32_t id1[B * K];
    float sc1[B * K];
    size_t n1[B];
    unsigned long chk = 0;
    double gb = (double)n * (double)d * sizeof(float) / 1e9;
    double t1 = time_one(e, n, d, q, nq, id1, sc1, n1, &chk);
    if (t1 < 0)
        return 1;
    printf("{\"mode\":\"weft_topk_scan\",\"path\":\"%s\",\"N\":%zu,\"d\":%zu,\"queries\":%zu,"
           "\"ms_per_query\":%.3f,\"qps\":%.1f,\"eff_GBps\":%.2f,\"chk\":%lu}\n",
           path, n, d, nq, t1 * 1e3, 1 / t1, gb / t1, chk);
    fflush(stdout);
    if (reps == 0)
        return 0;
    double tb = 0;
    chk = 0;
    bool same = time_batch(e, n, d, q, reps, id1, sc1, n1, &tb, &chk);
    printf("{\"mode\":\"weft_topk_scan_batch64\",\"path\":\"%s\",\"N\":%zu,\"d\":%zu,\"reps\":%zu,"
           "\"ms_per_batch\":%.3f,\"qps\":%.1f,\"GFLOPS\":%.1f,\"same_as_one_query\":%s,"
           "\"chk\":%lu}\n",
           path, n, d, reps, tb * 1e3, B / tb, 2.0 * B * (double)n * (double)d / tb / 1e9,
           same ? "true" : "false", chk);
    fflush(stdout);
    if (!same)
        fprintf(stderr, "bench_topk: a batch list differs from the one-query list\n");
    return same ? 0 : 1;
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: bench_topk N D [queries [batch_reps [portable]]]\n");
        return 2;
    }
    size_t n = strtoul(argv[1], NULL, 10), d = strtoul(argv[2], NULL, 10);
    size_t nq = argc > 3 ? strtoul(argv[3], NULL, 10) : (n >= 500000 ? 16 : 64);
    size_t reps = argc > 4 ? strtoul(argv[4], NULL, 10) : 3;
    bool portable = argc > 5 && strcmp(argv[5], "1") == 0;
    if (n == 0 || d == 0 || nq == 0 || n > UINT32_MAX || d > SIZE_MAX / n) {
        fprintf(stderr, "bench_topk: bad sizes\n");
        return 2;
    }
    float *e = big_alloc(n * d), *q = big_alloc(B * d);
    if (!e || !q) {
        fprintf(stderr, "bench_topk: out of memory\n");
        return 1;
    }
    weft_rng rng;
    weft_rng_seed(&rng, 1);
    for (size_t i = 0; i < n * d; i++)
        e[i] = weft_rng_float(&rng) - 0.5f;
    for (size_t i = 0; i < B * d; i++)
        q[i] = weft_rng_float(&rng) - 0.5f;
    int rc = run(e, n, d, q, nq, reps, weft_topk_is_native() ? "avx512" : "portable");
    if (rc == 0 && portable && weft_topk_is_native()) {
        weft_topk_allow_native(false);
        rc = run(e, n, d, q, nq, reps, "portable");
        weft_topk_allow_native(true);
    }
    free(e);
    free(q);
    return rc;
}
