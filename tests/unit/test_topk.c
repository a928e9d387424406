/* Top-k selection and the blocked scan, checked against a full sort (qsort) of the same
 * scores, which shares no code with the heap. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>

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
