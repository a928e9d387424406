/* Throughput of weft_gemm and of OpenBLAS sgemm on the shapes of one 1-vs-all training batch
 * (B queries against N nodes in d dimensions): S = Q E^T, dQ = G E, dE = G^T Q, side by side
 * in one process. Prints one JSON line per implementation with GFLOP/s, and the largest
 * difference between their results.
 * usage: bench_sgemm B N D [threads] */
#include <cblas.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/gemm.h"
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
    float *s2 = weft_alloc_array((size_t)b * n, sizeof *s2), *de2 = weft_alloc_array((size_t)n * d, sizeof *de2);
    float *dq2 = weft_alloc_array((size_t)b * d, sizeof *dq2);
    if (!s2 || !de2 || !dq2)
        return 1;
    int threads = argc > 4 ? atoi(argv[4]) : 2;
    double flops = 3.0 * 2.0 * b * (double)n * d;
    for (int impl = 0; impl < 2; impl++) {
        float *ss = impl ? s2 : s, *dqq = impl ? dq2 : dq, *dee = impl ? de2 : de;
        double best = 1e30;
        for (int r = 0; r < 6; r++) {   /* the first round warms up and is not counted */
            double t0 = now();
            if (impl) {
                weft_gemm(false, true, b, n, d, 1.0f, q, d, e, d, 0.0f, ss, n, threads);
                weft_gemm(false, false, b, d, n, 1.0f, ss, n, e, d, 0.0f, dqq, d, threads);
                weft_gemm(true, false, n, d, b, 1.0f, ss, n, q, d, 0.0f, dee, d, threads);
            } else {
                cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, b, n, d, 1.0f, q, d, e, d, 0.0f, ss, n);
                cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, b, d, n, 1.0f, ss, n, e, d, 0.0f, dqq, d);
                cblas_sgemm(CblasRowMajor, CblasTrans, CblasNoTrans, n, d, b, 1.0f, ss, n, q, d, 0.0f, dee, d);
            }
            double t = now() - t0;
            if (r > 0 && t < best)
                best = t;
        }
        printf("{\"mode\":\"%s\",\"B\":%d,\"N\":%d,\"d\":%d,\"threads\":%d,\"seconds\":%.4f,"
               "\"gflops\":%.1f}\n", impl ? (weft_gemm_is_native() ? "weft_gemm" : "weft_gemm_via_blas")
               : "openblas_sgemm", b, n, d, threads, best, flops / best / 1e9);
    }
    double worst = 0;
    for (size_t i = 0; i < (size_t)n * d; i++) {
        double diff = de[i] - de2[i];
        diff = diff < 0 ? -diff : diff;
        worst = diff > worst ? diff : worst;
    }
    printf("{\"mode\":\"agreement\",\"max_abs_diff_dE\":%.3g}\n", worst);
    return 0;
}
