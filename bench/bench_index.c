/* The approximate indexes (include/weft/index.h) beside the exact scan, on one core: an
 * N x D float32 matrix with cluster structure (rows around N / 1000 centres, norms spread
 * over a factor of three, as trained embeddings have), queries drawn from its rows (a node's
 * own row, itself left out, as a dot model asks). Prints one JSON line per measurement:
 * build time, memory, queries/s and recall@10 against the exact scan's lists.
 * usage: bench_index N D [queries [seed]]   (defaults: 200 queries, seed 1) */
#define _DEFAULT_SOURCE   /* madvise */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <time.h>

#include "weft/index.h"
#include "weft/rng.h"
#include "weft/topk.h"

enum { K = 10, OVERSAMPLE = 4 };

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static float gauss(weft_rng *r)
{
    double u = weft_rng_double(r), v = weft_rng_double(r);
    return (float)(sqrt(-2.0 * log(u > 1e-300 ? u : 1e-300)) * cos(6.283185307179586 * v));
}

/* As bench_topk.c allocates: 2 MiB aligned, huge pages asked for, touched. */
static void *big_alloc(size_t bytes)
{
    void *p = NULL;
    if (posix_memalign(&p, (size_t)2 << 20, bytes ? bytes : 1) != 0)
        return NULL;
    madvise(p, bytes, MADV_HUGEPAGE);
    memset(p, 0, bytes);
    return p;
}

static double recall(const uint32_t *want, size_t nw, const uint32_t *got, size_t ng)
{
    size_t hit = 0;
    for (size_t i = 0; i < nw; i++)
        for (size_t j = 0; j < ng; j++)
            if (want[i] == got[j]) {
                hit++;
                break;
            }
    return nw ? (double)hit / (double)nw : 1.0;
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: bench_index N D [queries [seed]]\n");
        return 2;
    }
    size_t n = strtoull(argv[1], NULL, 10), d = strtoull(argv[2], NULL, 10);
    size_t nq = argc > 3 ? strtoull(argv[3], NULL, 10) : 200;
    uint64_t seed = argc > 4 ? strtoull(argv[4], NULL, 10) : 1;
    size_t n_centres = n / 1000 > 1 ? n / 1000 : 2;
    float *e = big_alloc(n * d * sizeof *e), *centre = malloc(n_centres * d * sizeof *centre);
    uint32_t *want = malloc(nq * K * sizeof *want), *got = malloc(nq * K * sizeof *got);
    size_t *n_want = malloc(nq * sizeof *n_want);
    float *sc = malloc(K * sizeof *sc);
    if (!e || !centre || !want || !got || !n_want || !sc) {
        fprintf(stderr, "bench_index: out of memory\n");
        return 1;
    }
    weft_rng r;
    weft_rng_seed(&r, seed);
    for (size_t i = 0; i < n_centres * d; i++)
        centre[i] = gauss(&r);
    for (size_t i = 0; i < n; i++) {
        size_t a = weft_rng_below(&r, (uint32_t)n_centres);
        float len = 0.5f + weft_rng_float(&r);
        for (size_t j = 0; j < d; j++)
            e[i * d + j] = len * (centre[a * d + j] + 0.35f * gauss(&r));
    }
    uint32_t *qrow = malloc(nq * sizeof *qrow);
    weft_topk_exclude *ex = malloc(nq * sizeof *ex);
    if (!qrow || !ex)
        return 1;
    for (size_t j = 0; j < nq; j++) {
        qrow[j] = weft_rng_below(&r, (uint32_t)n);
        ex[j] = (weft_topk_exclude){ .has_self = true, .self = qrow[j] };
    }
    printf("{\"mode\":\"setup\",\"N\":%zu,\"d\":%zu,\"centres\":%zu,\"queries\":%zu,"
           "\"vnni\":%s,\"exact_avx512\":%s}\n", n, d, n_centres, nq,
           weft_index_is_native() ? "true" : "false", weft_topk_is_native() ? "true" : "false");

    double t0 = now();
    for (size_t j = 0; j < nq; j++)
        n_want[j] = weft_topk_scan(e, n, d, e + (size_t)qrow[j] * d, K, &ex[j], want + j * K, sc);
    double exact_s = (now() - t0) / (double)nq;
    printf("{\"mode\":\"exact\",\"ms_per_query\":%.3f,\"qps\":%.1f,\"bytes\":%zu}\n",
           exact_s * 1e3, 1.0 / exact_s, n * d * sizeof *e);

    /* int8 */
    uint8_t *code = big_alloc(weft_index_code_bytes(n, d));
    float *scale = malloc(n * sizeof *scale);
    if (!code || !scale)
        return 1;
    t0 = now();
    weft_index_encode(e, n, d, code, scale);
    double build = now() - t0;
    weft_index_codes codes = { .n = n, .d = d, .code = code, .scale = scale };
    weft_error err;
    double rsum = 0.0;
    t0 = now();
    for (size_t j = 0; j < nq; j++) {
        size_t ng = 0;
        weft_index_filter f = { .ex = &ex[j] };
        if (weft_index_int8_search(&codes, e, e + (size_t)qrow[j] * d, K, OVERSAMPLE, &f,
                                   got + j * K, sc, &ng, &err) != WEFT_OK) {
            fprintf(stderr, "bench_index: %s\n", err.msg);
            return 1;
        }
        rsum += recall(want + j * K, n_want[j], got + j * K, ng);
    }
    double i8_s = (now() - t0) / (double)nq;
    printf("{\"mode\":\"int8\",\"oversample\":%d,\"build_s\":%.3f,\"bytes\":%zu,"
           "\"ms_per_query\":%.3f,\"qps\":%.1f,\"recall_at_10\":%.4f,\"speedup\":%.2f}\n",
           OVERSAMPLE, build, weft_index_code_bytes(n, d) + n * sizeof *scale, i8_s * 1e3,
           1.0 / i8_s, rsum / nq, exact_s / i8_s);

    /* clustered */
    weft_index_ivf_arrays ivf;
    t0 = now();
    if (weft_index_ivf_build(e, n, d, 0, 10, seed, 1, WEFT_INDEX_LISTS_INT8, &ivf, &err) != WEFT_OK) {
        fprintf(stderr, "bench_index: %s\n", err.msg);
        return 1;
    }
    build = now() - t0;
    size_t nl = ivf.ivf.n_lists;
    size_t bytes = nl * (d + 1) * sizeof(float) + (nl + 1) * sizeof(uint64_t)
                   + n * (sizeof(uint32_t) + d + sizeof(float));
    printf("{\"mode\":\"ivf_build\",\"lists\":%zu,\"build_s\":%.3f,\"bytes\":%zu}\n", nl, build,
           bytes);
    static const size_t probes[] = { 4, 8, 16, 32, 64, 128 };
    for (size_t p = 0; p < sizeof probes / sizeof probes[0]; p++) {
        if (probes[p] > nl)
            break;
        rsum = 0.0;
        t0 = now();
        for (size_t j = 0; j < nq; j++) {
            size_t ng = 0;
            weft_index_filter f = { .ex = &ex[j] };
            if (weft_index_ivf_search(&ivf.ivf, e, e + (size_t)qrow[j] * d, K, probes[p],
                                      OVERSAMPLE, &f, got + j * K, sc, &ng, &err) != WEFT_OK) {
                fprintf(stderr, "bench_index: %s\n", err.msg);
                return 1;
            }
            rsum += recall(want + j * K, n_want[j], got + j * K, ng);
        }
        double s = (now() - t0) / (double)nq;
        printf("{\"mode\":\"ivf\",\"nprobe\":%zu,\"ms_per_query\":%.4f,\"qps\":%.1f,"
               "\"recall_at_10\":%.4f,\"speedup\":%.2f}\n", probes[p], s * 1e3, 1.0 / s,
               rsum / nq, exact_s / s);
    }
    weft_index_ivf_fini(&ivf);
    return 0;
}
