/* weft_gemm against the plain triple loop of weft_gemm_ref (sums in double), on every
 * transpose combination, edge sizes that leave partial 12 x 32 tiles, alpha and beta, and
 * the same result whatever the thread count, the number of callers at once, or a fork. */
#include <criterion/criterion.h>
#include <criterion/parameterized.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

#include "weft/gemm.h"
#include "weft/rng.h"

struct gemm_case {
    bool ta, tb;
    size_t m, n, k;
    float alpha, beta;
};

static struct gemm_case cases[] = {
    { false, true, 37, 100, 19, 1.0f, 0.0f },     /* S = Q E^T, partial tiles */
    { false, false, 25, 33, 300, 1.0f, 0.0f },    /* dQ = G E, depth over one panel */
    { true, false, 130, 20, 27, 1.0f, 0.0f },     /* dE = G^T Q */
    { true, true, 13, 65, 7, -0.5f, 1.0f },       /* accumulate into C */
    { false, false, 12, 32, 256, 2.0f, 0.25f },   /* exact tiles, beta scaling */
    { false, true, 1, 1, 1, 1.0f, 0.0f },
    { false, true, 300, 2100, 5, 1.0f, 0.0f },    /* more columns than one packed block */
};

ParameterizedTestParameters(gemm, matches_reference)
{
    return cr_make_param_array(struct gemm_case, cases, sizeof cases / sizeof cases[0]);
}

ParameterizedTestParameters(gemm, blas_fallback_matches_reference)
{
    return cr_make_param_array(struct gemm_case, cases, sizeof cases / sizeof cases[0]);
}

static float *random_matrix(weft_rng *rng, size_t n)
{
    float *x = malloc(n * sizeof *x);
    for (size_t i = 0; i < n; i++)
        x[i] = weft_rng_float(rng) * 2 - 1;
    return x;
}

static void check_case(const struct gemm_case *t, bool is_native)
{
    weft_gemm_allow_native(is_native);
    weft_rng rng;
    weft_rng_seed(&rng, 3);
    size_t lda = t->ta ? t->m : t->k, ldb = t->tb ? t->k : t->n;
    float *a = random_matrix(&rng, t->m * t->k), *b = random_matrix(&rng, t->k * t->n);
    float *c0 = random_matrix(&rng, t->m * t->n);
    float *want = malloc(t->m * t->n * sizeof *want), *got = malloc(t->m * t->n * sizeof *got);
    float *got3 = malloc(t->m * t->n * sizeof *got3);
    memcpy(want, c0, t->m * t->n * sizeof *want);
    memcpy(got, c0, t->m * t->n * sizeof *got);
    memcpy(got3, c0, t->m * t->n * sizeof *got3);
    if (t->beta == 0.0f)   /* beta 0 must not read C: poison it */
        for (size_t i = 0; i < t->m * t->n; i++)
            got[i] = got3[i] = NAN;
    weft_gemm_ref(t->ta, t->tb, t->m, t->n, t->k, t->alpha, a, lda, b, ldb, t->beta, want, t->n);
    weft_gemm(t->ta, t->tb, t->m, t->n, t->k, t->alpha, a, lda, b, ldb, t->beta, got, t->n, 1);
    weft_gemm(t->ta, t->tb, t->m, t->n, t->k, t->alpha, a, lda, b, ldb, t->beta, got3, t->n, 3);
    for (size_t i = 0; i < t->m * t->n; i++) {
        double tol = 1e-5 * (double)t->k + 1e-6;
        cr_assert(fabs(got[i] - want[i]) <= tol, "element %zu: %g, want %g", i, got[i], want[i]);
        if (is_native)   /* the library's own threading gives no such promise */
            cr_assert_eq(got[i], got3[i], "element %zu differs with 3 threads", i);
    }
    free(a);
    free(b);
    free(c0);
    free(want);
    free(got);
    free(got3);
}

ParameterizedTest(struct gemm_case *t, gemm, matches_reference)
{
    check_case(t, true);
}

/* The cblas_sgemm path CPUs without AVX-512 take, forced here. */
ParameterizedTest(struct gemm_case *t, gemm, blas_fallback_matches_reference)
{
    check_case(t, false);
}

/* Callers at once: one has the kept helper threads, the others start threads of their own;
 * the helper set grows from 2 to 4 threads between products. Every product equals the same
 * product on one thread, bit for bit. */
struct caller {
    const float *a, *b, *want;
    size_t m, n, k, n_threads;
    bool is_equal;
};

static void *caller_main(void *arg)
{
    struct caller *c = arg;
    float *got = malloc(c->m * c->n * sizeof *got);
    c->is_equal = got != NULL;
    for (int round = 0; round < 20 && c->is_equal; round++) {
        weft_gemm(false, true, c->m, c->n, c->k, 1.0f, c->a, c->k, c->b, c->k, 0.0f, got, c->n,
                  c->n_threads + (size_t)round % 3);
        c->is_equal = memcmp(got, c->want, c->m * c->n * sizeof *got) == 0;
    }
    free(got);
    return NULL;
}

Test(gemm, callers_at_once_get_the_one_thread_product, .timeout = 60)
{
    weft_gemm_allow_native(true);
    weft_rng rng;
    weft_rng_seed(&rng, 5);
    enum { M = 150, N = 90, K = 70, CALLERS = 4 };
    float *a = random_matrix(&rng, M * K), *b = random_matrix(&rng, N * K);
    float *want = malloc(M * N * sizeof *want);
    weft_gemm(false, true, M, N, K, 1.0f, a, K, b, K, 0.0f, want, N, 1);
    struct caller c[CALLERS];
    pthread_t tid[CALLERS];
    for (size_t i = 0; i < CALLERS; i++) {
        c[i] = (struct caller){ a, b, want, M, N, K, 2, false };
        cr_assert_eq(pthread_create(&tid[i], NULL, caller_main, &c[i]), 0);
    }
    for (size_t i = 0; i < CALLERS; i++) {
        pthread_join(tid[i], NULL);
        cr_assert(c[i].is_equal, "caller %zu got another product", i);
    }
    /* A child of fork() has none of the parent's helper threads: its products still finish. */
    pid_t pid = fork();
    cr_assert_neq(pid, -1);
    if (pid == 0) {
        alarm(30);   /* a product waiting for helpers that are not there fails, not hangs */
        float *got = malloc(M * N * sizeof *got);
        weft_gemm(false, true, M, N, K, 1.0f, a, K, b, K, 0.0f, got, N, 3);
        _exit(got && memcmp(got, want, M * N * sizeof *got) == 0 ? 0 : 1);
    }
    int status = 0;
    cr_assert_eq(waitpid(pid, &status, 0), pid);
    cr_assert(WIFEXITED(status) && WEXITSTATUS(status) == 0, "the child's product differs");
    free(a);
    free(b);
    free(want);
}
