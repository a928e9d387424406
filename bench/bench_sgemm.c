/* OpenBLAS sgemm throughput on the shapes of one 1-vs-all training batch (B queries against
 * N nodes in d dimensions): S = Q E^T, dQ = G E, dE = G^T Q. Prints one JSON line with
 * GFLOP/s, the yardstick for the trainer's own effective rate.
 * usage: bench_sgemm B N D [threads] */
#include <cblas.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/rng.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

int main(int argc, char **argv)
{
    if (argc < 4) {
        fprintf(stderr, "usage: bench_sgemm B N D [threads]\n");
        return 2;
    }
    int b = atoi(argv[1]), n = atoi(argv[2]), d = atoi(argv[3]);
    if (argc > 4)
        openblas_set_num_threads(atoi(argv[4]));
    float *q = weft_alloc_array((size_t)b * d, sizeof *q), *e = weft_alloc_array((size_t)n * d, sizeof *e);
    float *s = weft_alloc_array((size_t)b * n, sizeof *s), *de = weft_alloc_array((size_t)n * d, sizeof *de);
    float *dq = weft_alloc_array((size_t)b * d, sizeof *dq);
    if (!q || !e || !s || !de || !dq || b <= 0 || n <= 0 || d <= 0)
        return 1;
    weft_rng rng;
    weft_rng_seed(&rng, 1);
    for (size_t i = 0; i < (size_t)n * d; i++)
        e[i] = weft_rng_float(&rng) - 0.5f;
    for (size_t i = 0; i < (size_t)b * d; i++)
        q[i] = weft_rng_float(&rng) - 0.5f;
    int reps = 5;
    double best = 1e30;
    for (int r = 0; r < reps + 1; r++) {   /* the first round warms up and is not counted */
        double t0 = now();
        cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, b, n, d, 1.0f, q, d, e, d, 0.0f, s, n);
        cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, b, d, n, 1.0f, s, n, e, d, 0.0f, dq, d);
        cblas_sgemm(CblasRowMajor, CblasTrans, CblasNoTrans, n, d, b, 1.0f, s, n, q, d, 0.0f, de, d);
        double t = now() - t0;
        if (r > 0 && t < best)
            best = t;
    }
    double flops = 3.0 * 2.0 * b * (double)n * d;
    printf("{\"mode\":\"openblas_sgemm_batch\",\"B\":%d,\"N\":%d,\"d\":%d,\"seconds\":%.4f,"
           "\"gflops\":%.1f}\n", b, n, d, best, flops / best / 1e9);
    return 0;
}
