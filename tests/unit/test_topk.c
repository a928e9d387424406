/* Top-k selection and the scans, checked against a full sort (qsort) of the same scores,
 * which shares no code with the heap. The scans' scores are recomputed here by ref_dot, a
 * plain scalar reading of the summation order include/weft/topk.h documents (16 lanes,
 * rounded products added in turn, lanes added pairwise), so lists and scores must match bit
 * for bit, on the AVX-512 kernels and on the portable loops alike. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/kernels.h"
#include "weft/rng.h"
#include "weft/topk.h"

struct scored {
    uint32_t id;
    float score;
};

/* Reference order: higher score first, lower id first on ties. */
static int by_rank(const void *a, const void *b)
{
    const struct scored *x = a, *y = b;
    if (x->score != y->score)
        return x->score > y->score ? -1 : 1;
    return x->id < y->id ? -1 : x->id > y->id;
}

static void check_against_sort(const float *scores, size_t n, size_t k)
{
    struct scored *all = malloc(n * sizeof *all);
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (!isnan(scores[i]))
            all[m++] = (struct scored){ (uint32_t)i, scores[i] };
    qsort(all, m, sizeof *all, by_rank);
    uint32_t *id = malloc((k + 1) * sizeof *id);
    float *sc = malloc((k + 1) * sizeof *sc);
    size_t got = weft_topk_select(scores, n, k, id, sc);
    size_t want = k < m ? k : m;
    cr_assert_eq(got, want, "count %zu, want %zu", got, want);
    for (size_t i = 0; i < got; i++) {
        cr_assert_eq(id[i], all[i].id, "position %zu: id %u, want %u", i, id[i], all[i].id);
        cr_assert_eq(sc[i], all[i].score);
    }
    free(all);
    free(id);
    free(sc);
}

Test(topk, matches_full_sort_on_random_scores)
{
    weft_rng rng;
    weft_rng_seed(&rng, 7);
    float scores[1000];
    for (size_t i = 0; i < 1000; i++)
        scores[i] = weft_rng_float(&rng) * 2.0f - 1.0f;
    size_t ks[] = { 0, 1, 2, 10, 999, 1000, 1500 };
    for (size_t j = 0; j < sizeof ks / sizeof ks[0]; j++)
        check_against_sort(scores, 1000, ks[j]);
}

Test(topk, ties_keep_lower_id_first)
{
    /* Coarse values: many exact ties. */
    weft_rng rng;
    weft_rng_seed(&rng, 11);
    float scores[500];
    for (size_t i = 0; i < 500; i++)
        scores[i] = (float)weft_rng_below(&rng, 5);
    check_against_sort(scores, 500, 37);
    float flat[6] = { 1, 1, 1, 1, 1, 1 };
    uint32_t id[3];
    float sc[3];
    cr_assert_eq(weft_topk_select(flat, 6, 3, id, sc), 3);
    cr_assert(id[0] == 0 && id[1] == 1 && id[2] == 2, "got %u %u %u", id[0], id[1], id[2]);
}

Test(topk, nan_scores_never_enter)
{
    float scores[5] = { NAN, 0.5f, NAN, -1.0f, NAN };
    uint32_t id[5];
    float sc[5];
    cr_assert_eq(weft_topk_select(scores, 5, 5, id, sc), 2);
    cr_assert_eq(id[0], 1);
    cr_assert_eq(id[1], 3);
}

Test(topk, scan_matches_naive_scores_and_exclusions)
{
    enum { N = 1000, D = 7, K = 15 };   /* N spans several scan blocks and a partial one */
    weft_rng rng;
    weft_rng_seed(&rng, 3);
    static float e[N * D], q[D], naive[N];
    for (size_t i = 0; i < N * D; i++)
        e[i] = weft_rng_float(&rng) - 0.5f;
    for (size_t j = 0; j < D; j++)
        q[j] = weft_rng_float(&rng) - 0.5f;
    uint32_t excluded[] = { 3, 17, 256, 511, 512, 998 };
    weft_topk_exclude ex = { excluded, 6, true, 42 };
    /* Reference: scores summed in double, excluded ids pushed to -inf. */
    for (size_t i = 0; i < N; i++) {
        double acc = 0;
        for (size_t j = 0; j < D; j++)
            acc += (double)e[i * D + j] * q[j];
        naive[i] = (float)acc;
    }
    for (size_t i = 0; i < 6; i++)
        naive[excluded[i]] = -INFINITY;
    naive[42] = -INFINITY;
    uint32_t id[K], want_id[K];
    float sc[K], want_sc[K];
    size_t got = weft_topk_scan(e, N, D, q, K, &ex, id, sc);
    weft_topk_select(naive, N, K, want_id, want_sc);
    cr_assert_eq(got, (size_t)K);
    for (size_t i = 0; i < K; i++) {
        cr_assert_eq(id[i], want_id[i], "position %zu: id %u, want %u", i, id[i], want_id[i]);
        cr_assert_float_eq(sc[i], want_sc[i], 1e-5f);
    }
}

/* The documented score of one row, written out independently of the library: lane l sums
 * e[p] * q[p] for p = l, l + 16, ... (each product rounded to float before the add; this
 * file is built without FMA contraction, -std=c11), then lanes are added pairwise. */
static float ref_dot(const float *e, const float *q, size_t d)
{
    float lane[16] = { 0 };
    for (size_t p = 0; p < d; p++) {
        float prod = e[p] * q[p];
        lane[p % 16] = lane[p % 16] + prod;
    }
    for (size_t w = 8; w > 0; w /= 2)
        for (size_t j = 0; j < w; j++)
            lane[j] = lane[j] + lane[j + w];
    return lane[0];
}

static bool ref_excluded(const weft_topk_exclude *ex, uint32_t id)
{
    if (!ex)
        return false;
    if (ex->has_self && ex->self == id)
        return true;
    for (size_t i = 0; i < ex->n_sorted; i++)   /* linear: no shared code with the search */
        if (ex->sorted[i] == id)
            return true;
    return false;
}

/* Reference list of one query: ref_dot for every row not excluded and not NaN, fully sorted
 * by by_rank; returns its length (all of it; callers take the first k). Caller frees *out. */
static size_t ref_list(const float *e, size_t n, size_t d, const float *q,
                       const weft_topk_exclude *ex, struct scored **out)
{
    struct scored *all = malloc((n + 1) * sizeof *all);
    cr_assert(all);
    size_t m = 0;
    for (size_t i = 0; i < n; i++) {
        float s = ref_dot(e + i * d, q, d);
        if (!isnan(s) && !ref_excluded(ex, (uint32_t)i))
            all[m++] = (struct scored){ (uint32_t)i, s };
    }
    qsort(all, m, sizeof *all, by_rank);
    *out = all;
    return m;
}

/* Lists must agree in length, ids and scores (bitwise: memcmp, so -0 != +0 too). */
static void assert_same_list(const char *what, const uint32_t *id, const float *sc, size_t got,
                             const struct scored *want, size_t m, size_t k)
{
    size_t n_want = k < m ? k : m;
    cr_assert_eq(got, n_want, "%s: count %zu, want %zu", what, got, n_want);
    for (size_t i = 0; i < got; i++) {
        cr_assert_eq(id[i], want[i].id, "%s: position %zu: id %u, want %u", what, i, id[i],
                     want[i].id);
        cr_assert(memcmp(&sc[i], &want[i].score, sizeof(float)) == 0,
                  "%s: position %zu (id %u): score %a, want %a", what, i, id[i], (double)sc[i],
                  (double)want[i].score);
    }
}

static float *random_floats(weft_rng *rng, size_t n, float lo, float hi)
{
    float *x = malloc((n ? n : 1) * sizeof *x);
    cr_assert(x);
    for (size_t i = 0; i < n; i++)
        x[i] = lo + (hi - lo) * weft_rng_float(rng);
    return x;
}

/* One scan checked against the reference, on the current path. */
static void check_scan(const char *path, const float *e, size_t n, size_t d, const float *q,
                       size_t k, const weft_topk_exclude *ex)
{
    struct scored *want = NULL;
    size_t m = ref_list(e, n, d, q, ex, &want);
    uint32_t *id = malloc((k + 1) * sizeof *id);
    float *sc = malloc((k + 1) * sizeof *sc);
    cr_assert(id && sc);
    size_t got = weft_topk_scan(e, n, d, q, k, ex, id, sc);
    char what[96];
    snprintf(what, sizeof what, "%s scan n=%zu d=%zu k=%zu", path, n, d, k);
    assert_same_list(what, id, sc, got, want, m, k);
    free(want);
    free(id);
    free(sc);
}

/* The AVX-512 kernels when the CPU has them, then the portable loops. */
static const char *use_path(int i)
{
    weft_topk_allow_native(i == 0);
    return i == 0 ? (weft_topk_is_native() ? "avx512" : "portable") : "portable";
}

Test(topk, scan_matches_full_sort_across_sizes_and_paths)
{
    /* Row counts around the 16-row step and the batch's 4-row tile; widths around the
     * 16-float chunk, including no full chunk and a partial last one. */
    size_t ns[] = { 1, 3, 15, 16, 17, 100, 1037 };
    size_t ds[] = { 1, 7, 16, 31, 128, 200 };
    weft_rng rng;
    weft_rng_seed(&rng, 5);
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        for (size_t a = 0; a < sizeof ns / sizeof ns[0]; a++)
            for (size_t b = 0; b < sizeof ds / sizeof ds[0]; b++) {
                size_t n = ns[a], d = ds[b];
                float *e = random_floats(&rng, n * d, -1.0f, 1.0f);
                float *q = random_floats(&rng, d, -1.0f, 1.0f);
                size_t ks[] = { 1, 10, n, n + 5 };
                for (size_t c = 0; c < 4; c++)
                    check_scan(path, e, n, d, q, ks[c], NULL);
                free(e);
                free(q);
            }
    }
    weft_topk_allow_native(true);
}

Test(topk, scan_of_rows_32_bytes_off_a_line_matches_full_sort)
{
    /* d % 16 == 8 on a 64-byte aligned matrix takes the AVX-512 path that assembles odd rows
     * from aligned loads; the same data one float further on takes the plain loads. */
    size_t ds[] = { 8, 24, 200 };
    size_t ns[] = { 16, 17, 40, 333 };
    weft_rng rng;
    weft_rng_seed(&rng, 37);
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        for (size_t b = 0; b < sizeof ds / sizeof ds[0]; b++)
            for (size_t a = 0; a < sizeof ns / sizeof ns[0]; a++) {
                size_t n = ns[a], d = ds[b], bytes = (n * d + 16) * sizeof(float);
                float *mem = aligned_alloc(64, (bytes + 63) / 64 * 64);
                cr_assert(mem);
                for (size_t i = 0; i < n * d + 16; i++)
                    mem[i] = 2.0f * weft_rng_float(&rng) - 1.0f;
                float *q = random_floats(&rng, d, -1.0f, 1.0f);
                uint32_t excluded[] = { 1, 3 };
                weft_topk_exclude ex = { excluded, 2, true, 7 };
                for (size_t off = 0; off < 2; off++) {
                    check_scan(path, mem + off, n, d, q, 10, NULL);
                    check_scan(path, mem + off, n, d, q, n, &ex);
                }
                free(mem);
                free(q);
            }
    }
    weft_topk_allow_native(true);
}

Test(topk, scan_scores_equal_kernel_dot)
{
    /* The header promises weft_kernel_dot's value for each listed row. */
    enum { N = 300, D = 45, K = 300 };
    weft_rng rng;
    weft_rng_seed(&rng, 8);
    float *e = random_floats(&rng, N * D, -2.0f, 2.0f), *q = random_floats(&rng, D, -2.0f, 2.0f);
    uint32_t id[K];
    float sc[K];
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        size_t got = weft_topk_scan(e, N, D, q, K, NULL, id, sc);
        cr_assert_eq(got, (size_t)N);
        for (size_t i = 0; i < got; i++) {
            float want = weft_kernel_dot(e + (size_t)id[i] * D, q, D);
            cr_assert(memcmp(&sc[i], &want, sizeof want) == 0, "%s: id %u: %a, want %a", path,
                      id[i], (double)sc[i], (double)want);
        }
    }
    weft_topk_allow_native(true);
    free(e);
    free(q);
}

Test(topk, scan_leaves_out_exclusions)
{
    /* The excluded rows are made the best scoring ones, so leaving them in would show. */
    enum { N = 500, D = 19 };
    weft_rng rng;
    weft_rng_seed(&rng, 13);
    float *e = random_floats(&rng, N * D, -1.0f, 1.0f), *q = random_floats(&rng, D, 0.5f, 1.0f);
    uint32_t excluded[] = { 0, 15, 16, 17, 255, 256, 498, 499 };
    size_t n_ex = sizeof excluded / sizeof excluded[0];
    for (size_t i = 0; i < n_ex; i++)
        for (size_t j = 0; j < D; j++)
            e[excluded[i] * D + j] = 10.0f;
    for (size_t j = 0; j < D; j++)
        e[42 * D + j] = 20.0f;
    weft_topk_exclude ex = { excluded, n_ex, true, 42 };
    weft_topk_exclude only_self = { NULL, 0, true, 42 };
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        check_scan(path, e, N, D, q, 10, &ex);
        check_scan(path, e, N, D, q, N, &ex);
        check_scan(path, e, N, D, q, 10, &only_self);
        uint32_t id[10];
        float sc[10];
        weft_topk_scan(e, N, D, q, 10, &ex, id, sc);
        for (size_t i = 0; i < 10; i++)
            cr_assert(!ref_excluded(&ex, id[i]), "%s: excluded id %u listed", path, id[i]);
    }
    weft_topk_allow_native(true);
    free(e);
    free(q);
}

Test(topk, scan_with_k_over_candidates_lists_every_candidate)
{
    enum { N = 20, D = 5, K = 50 };
    weft_rng rng;
    weft_rng_seed(&rng, 17);
    float *e = random_floats(&rng, N * D, -1.0f, 1.0f), *q = random_floats(&rng, D, -1.0f, 1.0f);
    uint32_t excluded[] = { 2, 3, 5, 7 };
    weft_topk_exclude ex = { excluded, 4, true, 11 };
    uint32_t id[K];
    float sc[K];
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        cr_assert_eq(weft_topk_scan(e, N, D, q, K, &ex, id, sc), (size_t)(N - 5), "%s", path);
        check_scan(path, e, N, D, q, K, &ex);
        cr_assert_eq(weft_topk_scan(e, N, D, q, 0, &ex, id, sc), 0, "%s: k = 0", path);
        cr_assert_eq(weft_topk_scan(NULL, 0, D, q, K, NULL, id, sc), 0, "%s: no rows", path);
    }
    weft_topk_allow_native(true);
    free(e);
    free(q);
}

Test(topk, scan_ties_keep_lower_id_first)
{
    /* Rows drawn from 3 distinct vectors: many exactly equal scores, including ties that
     * straddle the entry bar. The reference's by_rank orders ties by id. */
    enum { N = 333, D = 20 };
    weft_rng rng;
    weft_rng_seed(&rng, 19);
    float *proto = random_floats(&rng, 3 * D, -1.0f, 1.0f);
    float *q = random_floats(&rng, D, -1.0f, 1.0f);
    float *e = malloc(N * D * sizeof *e);
    cr_assert(e);
    for (size_t i = 0; i < N; i++)
        memcpy(e + i * D, proto + weft_rng_below(&rng, 3) * D, D * sizeof *e);
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        size_t ks[] = { 1, 7, 37, 200 };
        for (size_t c = 0; c < 4; c++)
            check_scan(path, e, N, D, q, ks[c], NULL);
        /* All rows equal: the first k ids, in order. */
        float *same = malloc(N * D * sizeof *same);
        cr_assert(same);
        for (size_t i = 0; i < N; i++)
            memcpy(same + i * D, proto, D * sizeof *same);
        uint32_t id[5];
        float sc[5];
        cr_assert_eq(weft_topk_scan(same, N, D, q, 5, NULL, id, sc), 5);
        for (uint32_t i = 0; i < 5; i++)
            cr_assert_eq(id[i], i, "%s: all equal: position %u holds id %u", path, i, id[i]);
        free(same);
    }
    weft_topk_allow_native(true);
    free(proto);
    free(q);
    free(e);
}

Test(topk, scan_nan_never_enters_and_infinities_rank)
{
    /* Row scores with q = 1: -inf, 1, NaN (inf - inf), -inf, +inf, NaN (a NaN entry), 0. */
    enum { N = 7, D = 2 };
    float e[N * D] = { -INFINITY, 0, 1, 0, INFINITY, -INFINITY, -INFINITY, 0,
                       INFINITY, 0, NAN, 1, 0, 0 };
    float q[D] = { 1, 1 };
    uint32_t id[N];
    float sc[N];
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        size_t got = weft_topk_scan(e, N, D, q, N, NULL, id, sc);
        uint32_t want[] = { 4, 1, 6, 0, 3 };   /* +inf, 1, 0, then the two -inf by id */
        cr_assert_eq(got, 5, "%s: count %zu", path, got);
        for (size_t i = 0; i < 5; i++)
            cr_assert_eq(id[i], want[i], "%s: position %zu: id %u, want %u", path, i, id[i],
                         want[i]);
        /* A full selection at -inf still refuses a later -inf (it ranks after by id). */
        got = weft_topk_scan(e, N, D, q, 4, NULL, id, sc);
        cr_assert(got == 4 && id[3] == 0, "%s: k = 4 ends with id %u", path, id[3]);
        check_scan(path, e, N, D, q, 3, NULL);
        /* A NaN in the query makes every score NaN: nothing to list. */
        float qn[D] = { NAN, 1 };
        cr_assert_eq(weft_topk_scan(e, N, D, qn, N, NULL, id, sc), 0, "%s: NaN query", path);
    }
    weft_topk_allow_native(true);
}

Test(topk, scan_of_zero_width_scores_every_row_zero)
{
    float e[1] = { 0 };
    uint32_t id[3];
    float sc[3];
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        cr_assert_eq(weft_topk_scan(e, 40, 0, NULL, 3, NULL, id, sc), 3, "%s", path);
        cr_assert(id[0] == 0 && id[1] == 1 && id[2] == 2 && sc[0] == 0.0f && !signbit(sc[0]),
                  "%s: %u %u %u %g", path, id[0], id[1], id[2], (double)sc[0]);
    }
    weft_topk_allow_native(true);
}

/* A batch against the reference for each query and against one-query scans. */
static void check_batch(const char *path, const float *e, size_t n, size_t d, const float *q,
                        size_t nq, size_t k, const weft_topk_exclude *ex)
{
    uint32_t *id = malloc((nq * k + 1) * sizeof *id), *id1 = malloc((k + 1) * sizeof *id1);
    float *sc = malloc((nq * k + 1) * sizeof *sc), *sc1 = malloc((k + 1) * sizeof *sc1);
    size_t *count = malloc((nq + 1) * sizeof *count);
    cr_assert(id && id1 && sc && sc1 && count);
    weft_topk_scan_batch(e, n, d, q, nq, k, ex, id, sc, count);
    for (size_t j = 0; j < nq; j++) {
        const weft_topk_exclude *exj = ex ? ex + j : NULL;
        struct scored *want = NULL;
        size_t m = ref_list(e, n, d, q + j * d, exj, &want);
        char what[128];
        snprintf(what, sizeof what, "%s batch n=%zu d=%zu nq=%zu k=%zu query %zu", path, n, d,
                 nq, k, j);
        assert_same_list(what, id + j * k, sc + j * k, count[j], want, m, k);
        size_t got1 = weft_topk_scan(e, n, d, q + j * d, k, exj, id1, sc1);
        cr_assert(got1 == count[j] && memcmp(id1, id + j * k, got1 * sizeof *id1) == 0 &&
                      memcmp(sc1, sc + j * k, got1 * sizeof *sc1) == 0,
                  "%s: differs from the one-query scan", what);
        free(want);
    }
    free(id);
    free(id1);
    free(sc);
    free(sc1);
    free(count);
}

Test(topk, batch_matches_full_sort_and_one_query_scans)
{
    /* Query counts around the 4-query tile and the 64-query group; rows around the 4-row
     * tile and the row block. */
    size_t nqs[] = { 1, 3, 4, 64, 70, 129 };
    size_t shapes[][2] = { { 1, 16 }, { 5, 7 }, { 17, 33 }, { 523, 128 }, { 301, 200 } };
    weft_rng rng;
    weft_rng_seed(&rng, 23);
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        for (size_t a = 0; a < sizeof shapes / sizeof shapes[0]; a++) {
            size_t n = shapes[a][0], d = shapes[a][1];
            float *e = random_floats(&rng, n * d, -1.0f, 1.0f);
            for (size_t b = 0; b < sizeof nqs / sizeof nqs[0]; b++) {
                size_t nq = nqs[b];
                float *q = random_floats(&rng, nq * d, -1.0f, 1.0f);
                check_batch(path, e, n, d, q, nq, 10, NULL);
                check_batch(path, e, n, d, q, nq, n + 2, NULL);
                free(q);
            }
            free(e);
        }
    }
    weft_topk_allow_native(true);
}

Test(topk, batch_applies_each_querys_exclusions_and_ties)
{
    enum { N = 260, D = 24, NQ = 67, K = 12 };
    weft_rng rng;
    weft_rng_seed(&rng, 29);
    /* Coarse entries: exact ties between rows and between queries. */
    float *e = malloc(N * D * sizeof *e), *q = malloc(NQ * D * sizeof *q);
    cr_assert(e && q);
    for (size_t i = 0; i < N * D; i++)
        e[i] = (float)weft_rng_below(&rng, 3) - 1.0f;
    for (size_t i = 0; i < NQ * D; i++)
        q[i] = (float)weft_rng_below(&rng, 2);
    /* Query j leaves out itself and ids j, j + 7, j + 14, ... below N. */
    uint32_t *lists = malloc(NQ * N * sizeof *lists);
    weft_topk_exclude *ex = malloc(NQ * sizeof *ex);
    cr_assert(lists && ex);
    for (size_t j = 0; j < NQ; j++) {
        size_t m = 0;
        for (size_t i = j; i < N; i += 7)
            lists[j * N + m++] = (uint32_t)i;
        ex[j] = (weft_topk_exclude){ lists + j * N, m, j % 2 == 0, (uint32_t)(N - 1 - j) };
    }
    for (int p = 0; p < 2; p++) {
        const char *path = use_path(p);
        check_batch(path, e, N, D, q, NQ, K, ex);
        check_batch(path, e, N, D, q, NQ, N, ex);
    }
    weft_topk_allow_native(true);
    free(e);
    free(q);
    free(lists);
    free(ex);
}

Test(topk, batch_with_nan_rows_lists_the_rest)
{
    enum { N = 40, D = 16, NQ = 5 };
    weft_rng rng;
    weft_rng_seed(&rng, 31);
    float *e = random_floats(&rng, N * D, -1.0f, 1.0f), *q = random_floats(&rng, NQ * D, -1.0f, 1.0f);
    for (size_t i = 0; i < N; i += 3)
        e[i * D + i % D] = NAN;
    for (int p = 0; p < 2; p++)
        check_batch(use_path(p), e, N, D, q, NQ, N, NULL);
    weft_topk_allow_native(true);
    free(e);
    free(q);
}
