/* One-query top-10 over an N x D float32 matrix with weft_topk_scan (blocked sgemv with the
 * heap fused in). Prints one JSON line like ../shared/bench/ref_topk.c, for side-by-side runs.
 * usage: bench_topk N D [queries] */
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/rng.h"
#include "weft/topk.h"

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

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: bench_topk N D [queries]\n");
        return 2;
    }
    size_t n = strtoul(argv[1], NULL, 10), d = strtoul(argv[2], NULL, 10);
    size_t nq = argc > 3 ? strtoul(argv[3], NULL, 10) : (n >= 500000 ? 16 : 64);
    float *e = weft_alloc_array(n * d, sizeof *e), *q = weft_alloc_array(64 * d, sizeof *q);
    double *t = weft_alloc_array(nq, sizeof *t);
    if (!e || !q || !t || n == 0 || d == 0 || nq == 0) {
        fprintf(stderr, "bench_topk: bad sizes or out of memory\n");
        return 1;
    }
    weft_rng rng;
    weft_rng_seed(&rng, 1);
    for (size_t i = 0; i < n * d; i++)
        e[i] = weft_rng_float(&rng) - 0.5f;
    for (size_t i = 0; i < 64 * d; i++)
        q[i] = weft_rng_float(&rng) - 0.5f;
    uint32_t id[10];
    float score[10];
    unsigned long chk = 0;
    weft_topk_scan(e, n, d, q, 10, NULL, id, score);   /* warm */
    for (size_t r = 0; r < nq; r++) {
        double t0 = now();
        weft_topk_scan(e, n, d, q + (r % 64) * d, 10, NULL, id, score);
        t[r] = now() - t0;
        chk += id[0];
    }
    qsort(t, nq, sizeof *t, cmp_double);
    double med = nq % 2 ? t[nq / 2] : 0.5 * (t[nq / 2 - 1] + t[nq / 2]);
    double gb = (double)n * (double)d * 4 / 1e9;
    printf("{\"mode\":\"weft_topk_scan\",\"N\":%zu,\"d\":%zu,\"queries\":%zu,\"ms_per_query\":%.3f,"
           "\"qps\":%.1f,\"eff_GBps\":%.2f,\"chk\":%lu}\n",
           n, d, nq, med * 1e3, 1 / med, gb / med, chk);
    free(e);
    free(q);
    free(t);
    return 0;
}
