/* Approximate top-k indexes (core/index.c): codes, the int8 and clustered searches against
 * the exact scan (weft_topk_scan), their boundaries and filters. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/index.h"
#include "weft/kernels.h"
#include "weft/rng.h"
#include "weft/topk.h"

enum { K = 10 };

static float gauss(weft_rng *r)
{
    double u = weft_rng_double(r), v = weft_rng_double(r);
    return (float)(sqrt(-2.0 * log(u > 1e-300 ? u : 1e-300)) * cos(6.283185307179586 * v));
}

static float *random_rows(size_t n, size_t d, uint64_t seed)
{
    weft_rng r;
    weft_rng_seed(&r, seed);
    float *e = malloc(n * d * sizeof *e);
    cr_assert_not_null(e);
    for (size_t i = 0; i < n * d; i++)
        e[i] = gauss(&r);
    return e;
}

/* n rows around n_centres centres, norms spread over a factor of about 3, like trained
 * embeddings. */
static float *clustered_rows(size_t n, size_t d, size_t n_centres, uint64_t seed)
{
    weft_rng r;
    weft_rng_seed(&r, seed);
    float *c = malloc(n_centres * d * sizeof *c), *e = malloc(n * d * sizeof *e);
    cr_assert(c && e);
    for (size_t i = 0; i < n_centres * d; i++)
        c[i] = gauss(&r);
    for (size_t i = 0; i < n; i++) {
        size_t a = weft_rng_below(&r, (uint32_t)n_centres);
        float len = 0.5f + weft_rng_float(&r);
        for (size_t j = 0; j < d; j++)
            e[i * d + j] = len * (c[a * d + j] + 0.35f * gauss(&r));
    }
    free(c);
    return e;
}

struct codes {
    uint8_t *code;
    float *scale;
    weft_index_codes view;
};

static struct codes encode(const float *e, size_t n, size_t d)
{
    struct codes c;
    c.code = malloc(n && d ? weft_index_code_bytes(n, d) : 1);
    c.scale = malloc((n ? n : 1) * sizeof *c.scale);
    cr_assert(c.code && c.scale);
    weft_index_encode(e, n, d, c.code, c.scale);
    c.view = (weft_index_codes){ .n = n, .d = d, .code = c.code, .scale = c.scale };
    return c;
}

static void codes_free(struct codes *c)
{
    free(c->code);
    free(c->scale);
}

/* Share of the exact top-k ids found in @p got. */
static double recall(const uint32_t *want, size_t n_want, const uint32_t *got, size_t n_got)
{
    size_t hit = 0;
    for (size_t i = 0; i < n_want; i++)
        for (size_t j = 0; j < n_got; j++)
            if (want[i] == got[j]) {
                hit++;
                break;
            }
    return n_want ? (double)hit / (double)n_want : 1.0;
}

Test(index, codes_reconstruct_within_half_a_step)
{
    enum { N = 50, D = 37 };
    float *e = random_rows(N, D, 3);
    e[5 * D + 2] = 0.0f;
    memset(e + 7 * D, 0, D * sizeof *e);   /* a zero row */
    struct codes c = encode(e, N, D);
    for (size_t i = 0; i < N; i++) {
        if (i == 7) {
            cr_assert_eq(c.scale[i], 0.0f);
            continue;
        }
        float m = 0.0f;
        for (size_t j = 0; j < D; j++)
            m = fmaxf(m, fabsf(e[i * D + j]));
        cr_assert_float_eq(c.scale[i], m / 127.0f, 1e-9f);
        for (size_t j = 0; j < D; j++) {
            int code = (int)c.code[weft_index_code_at(D, i, j)] - 128;
            cr_assert(code >= -127 && code <= 127);
            cr_assert_leq(fabsf(code * c.scale[i] - e[i * D + j]), 0.5f * c.scale[i] * 1.0001f);
        }
    }
    cr_assert_eq(c.code[weft_index_code_at(D, 5, 2)], 128);
    /* the padding: rows 50..63 of the last block, values 37..39 of each row's last group */
    for (size_t j = 0; j < 40; j++)
        cr_assert_eq(c.code[weft_index_code_at(D, 55, j)], 128);
    for (size_t j = D; j < 40; j++)
        cr_assert_eq(c.code[weft_index_code_at(D, 3, j)], 128);
    codes_free(&c);
    free(e);
}

Test(index, a_non_finite_row_is_never_a_candidate)
{
    enum { N = 40, D = 8 };
    float *e = random_rows(N, D, 4);
    e[3 * D + 1] = INFINITY;
    e[9 * D] = NAN;
    struct codes c = encode(e, N, D);
    cr_assert(isnan(c.scale[3]) && isnan(c.scale[9]));
    uint32_t id[N];
    float score[N];
    size_t n = 0;
    weft_error err;
    cr_assert_eq(weft_index_int8_search(&c.view, e, e, N, 1, NULL, id, score, &n, &err), WEFT_OK);
    cr_assert_eq(n, N - 2);
    for (size_t i = 0; i < n; i++)
        cr_assert(id[i] != 3 && id[i] != 9);
    codes_free(&c);
    free(e);
}

/* With room for every row among the candidates, the int8 search is the exact scan. */
Test(index, int8_with_every_row_a_candidate_is_the_exact_scan)
{
    static const size_t dims[] = { 1, 15, 63, 64, 65, 128, 200 };
    for (size_t t = 0; t < sizeof dims / sizeof dims[0]; t++) {
        size_t n = 333, d = dims[t];
        float *e = random_rows(n, d, 10 + t), *q = random_rows(1, d, 99 + t);
        struct codes c = encode(e, n, d);
        uint32_t want[K], got[K];
        float want_s[K], got_s[K];
        size_t n_want = weft_topk_scan(e, n, d, q, K, NULL, want, want_s), n_got = 0;
        weft_error err;
        cr_assert_eq(weft_index_int8_search(&c.view, e, q, K, 34, NULL, got, got_s, &n_got,
                                            &err), WEFT_OK);
        cr_assert_eq(n_got, n_want, "d = %zu", d);
        for (size_t i = 0; i < n_got; i++) {
            cr_assert_eq(got[i], want[i], "d = %zu, rank %zu", d, i);
            cr_assert_eq(got_s[i], want_s[i], "the exact score, bit for bit");
        }
        codes_free(&c);
        free(e);
        free(q);
    }
}

/* The approximate scores rank like the exact ones: the int8 search at its usual oversampling
 * finds the exact top 10 (common practice for int8 with re-scoring: recall@10 near 1). */
Test(index, int8_recall_on_random_and_clustered_rows)
{
    enum { N = 20000, D = 64, Q = 50 };
    for (int kind = 0; kind < 2; kind++) {
        float *e = kind ? clustered_rows(N, D, 40, 5) : random_rows(N, D, 5);
        float *q = kind ? clustered_rows(Q, D, 40, 6) : random_rows(Q, D, 6);
        struct codes c = encode(e, N, D);
        double sum = 0.0;
        for (size_t j = 0; j < Q; j++) {
            uint32_t want[K], got[K];
            float ws[K], gs[K];
            size_t nw = weft_topk_scan(e, N, D, q + j * D, K, NULL, want, ws), ng = 0;
            weft_error err;
            cr_assert_eq(weft_index_int8_search(&c.view, e, q + j * D, K, 4, NULL, got, gs, &ng,
                                                &err), WEFT_OK);
            sum += recall(want, nw, got, ng);
        }
        cr_assert_geq(sum / Q, 0.99, "%s rows: recall@10 %.3f", kind ? "clustered" : "random",
                      sum / Q);
        codes_free(&c);
        free(e);
        free(q);
    }
}

Test(index, int8_filters_exclusions_and_types)
{
    enum { N = 500, D = 16 };
    float *e = random_rows(N, D, 7), *q = random_rows(1, D, 8);
    struct codes c = encode(e, N, D);
    uint32_t *type_of = malloc(N * sizeof *type_of);
    cr_assert_not_null(type_of);
    for (uint32_t i = 0; i < N; i++)
        type_of[i] = i % 3;
    type_of[123] = 7;   /* a type with one node */
    uint32_t sorted[N];
    for (uint32_t i = 0; i < N; i++)
        sorted[i] = i;
    uint32_t id[K];
    float score[K];
    size_t n = 99;
    weft_error err;

    weft_topk_exclude all = { .sorted = sorted, .n_sorted = N };
    weft_index_filter f = { .ex = &all };
    cr_assert_eq(weft_index_int8_search(&c.view, e, q, K, 4, &f, id, score, &n, &err), WEFT_OK);
    cr_assert_eq(n, 0, "every candidate left out: an empty list");

    f = (weft_index_filter){ .type_of = type_of, .type = 7 };
    cr_assert_eq(weft_index_int8_search(&c.view, e, q, K, 4, &f, id, score, &n, &err), WEFT_OK);
    cr_assert_eq(n, 1);
    cr_assert_eq(id[0], 123);
    cr_assert_eq(score[0], weft_kernel_dot(e + 123 * D, q, D));

    weft_topk_exclude some = { .sorted = sorted + 100, .n_sorted = 300, .has_self = true,
                               .self = 5 };   /* 100 .. 399 and 5 */
    f = (weft_index_filter){ .ex = &some, .type_of = type_of, .type = 1 };
    cr_assert_eq(weft_index_int8_search(&c.view, e, q, K, 200, &f, id, score, &n, &err),
                 WEFT_OK);
    cr_assert_eq(n, K);
    /* The reference: every kept row scored exactly. */
    weft_topk t;
    uint32_t want[K];
    float ws[K];
    weft_topk_init(&t, K, want, ws);
    for (uint32_t r = 0; r < N; r++)
        if (type_of[r] == 1 && r != 5 && (r < 100 || r >= 400))
            weft_topk_push(&t, r, weft_kernel_dot(e + (size_t)r * D, q, D));
    cr_assert_eq(weft_topk_finish(&t), K);
    for (size_t i = 0; i < K; i++)
        cr_assert_eq(id[i], want[i]);
    free(type_of);
    codes_free(&c);
    free(e);
    free(q);
}

/* One pass for many queries gives each the list of its own search: different k, filters, a
 * query with no finite value, k = 0; over enough rows for several chunks of the pass. */
Test(index, many_queries_in_one_pass_answer_as_one_at_a_time)
{
    enum { N = 5000, D = 200, M = 6 };
    float *e = random_rows(N, D, 11), *q = random_rows(M, D, 12);
    q[4 * D + 3] = NAN;
    struct codes c = encode(e, N, D);
    uint32_t *type_of = malloc(N * sizeof *type_of);
    cr_assert_not_null(type_of);
    for (uint32_t i = 0; i < N; i++)
        type_of[i] = i % 4;
    weft_topk_exclude ex = { .has_self = true, .self = 17 };
    weft_index_filter typed = { .ex = &ex, .type_of = type_of, .type = 2 };
    static const size_t ks[M] = { 10, 1, 37, 10, 10, 0 };
    const weft_index_filter *fs[M] = { NULL, &typed, NULL, &typed, NULL, NULL };
    uint32_t id[M][40];
    float score[M][40];
    weft_index_query qs[M];
    for (size_t i = 0; i < M; i++)
        qs[i] = (weft_index_query){ .q = q + i * D, .k = ks[i], .f = fs[i], .id = id[i],
                                    .score = score[i] };
    weft_error err;
    cr_assert_eq(weft_index_int8_search_many(&c.view, e, 2, qs, M, &err), WEFT_OK);
    for (size_t i = 0; i < M; i++) {
        uint32_t one[40];
        float one_s[40];
        size_t n = 99;
        cr_assert_eq(weft_index_int8_search(&c.view, e, q + i * D, ks[i], 2, fs[i], one, one_s,
                                            &n, &err), WEFT_OK);
        cr_assert_eq(qs[i].n_out, n, "query %zu", i);
        if (i != 4)   /* a query with a NaN gets what the exact scan gives it */
            cr_assert_eq(n, ks[i], "query %zu: a full list", i);
        for (size_t j = 0; j < n; j++)
            cr_assert(qs[i].id[j] == one[j] && qs[i].score[j] == one_s[j], "query %zu rank %zu",
                      i, j);
    }
    free(type_of);
    codes_free(&c);
    free(e);
    free(q);
}

Test(index, ivf_lists_partition_the_rows)
{
    enum { N = 3000, D = 24 };
    float *e = clustered_rows(N, D, 12, 11);
    weft_index_ivf_arrays a;
    weft_error err;
    cr_assert_eq(weft_index_ivf_build(e, N, D, 0, 8, 1, 1, WEFT_INDEX_LISTS_INT8, &a,
                                       &err), WEFT_OK, "%s", err.msg);
    const weft_index_ivf *ix = &a.ivf;
    cr_assert_eq(ix->n_lists, (size_t)(4.0 * sqrt(N)), "4 sqrt(n) lists by default");
    cr_assert_eq(ix->list_off[0], 0);
    cr_assert_eq(ix->list_off[ix->n_lists], N);
    char *seen = calloc(N, 1);
    cr_assert_not_null(seen);
    for (size_t l = 0; l < ix->n_lists; l++)
        for (uint64_t p = ix->list_off[l]; p < ix->list_off[l + 1]; p++) {
            cr_assert_lt(ix->row_id[p], N);
            cr_assert_not(seen[ix->row_id[p]], "row %u in two lists", ix->row_id[p]);
            seen[ix->row_id[p]] = 1;
            if (p > ix->list_off[l])
                cr_assert_gt(ix->row_id[p], ix->row_id[p - 1], "ids increase within a list");
        }
    free(seen);
    weft_index_ivf_fini(&a);
    free(e);
}

/* Scanning every list is the int8 search; few lists keep most of the exact top 10 on
 * clustered rows. */
Test(index, ivf_recall_and_every_list_is_the_int8_search)
{
    enum { N = 20000, D = 32, Q = 40 };
    float *e = clustered_rows(N, D, 30, 12), *q = clustered_rows(Q, D, 30, 13);
    weft_index_ivf_arrays a;
    weft_error err;
    cr_assert_eq(weft_index_ivf_build(e, N, D, 0, 10, 2, 1, WEFT_INDEX_LISTS_INT8, &a,
                                       &err), WEFT_OK, "%s", err.msg);
    struct codes c = encode(e, N, D);
    double sum_few = 0.0;
    for (size_t j = 0; j < Q; j++) {
        const float *qj = q + j * D;
        uint32_t want[K], all[K], few[K], i8[K];
        float ws[K], as[K], fs[K], is[K];
        size_t nw = weft_topk_scan(e, N, D, qj, K, NULL, want, ws), na = 0, nf = 0, ni = 0;
        cr_assert_eq(weft_index_ivf_search(&a.ivf, e, qj, K, a.ivf.n_lists, 4, NULL, all, as,
                                           &na, &err), WEFT_OK);
        cr_assert_eq(weft_index_int8_search(&c.view, e, qj, K, 4, NULL, i8, is, &ni, &err),
                     WEFT_OK);
        cr_assert_eq(na, ni);
        for (size_t i = 0; i < na; i++)
            cr_assert(all[i] == i8[i] && as[i] == is[i], "query %zu rank %zu", j, i);
        cr_assert_eq(weft_index_ivf_search(&a.ivf, e, qj, K, a.ivf.n_lists / 10, 4, NULL, few,
                                           fs, &nf, &err), WEFT_OK);
        sum_few += recall(want, nw, few, nf);
    }
    cr_assert_geq(sum_few / Q, 0.95, "recall@10 probing a tenth of the lists: %.3f", sum_few / Q);
    codes_free(&c);
    weft_index_ivf_fini(&a);
    free(e);
    free(q);
}

/* @p n rows cycling through the @p n_base rows of @p base (d values each). */
static float *repeated_rows(const float *base, size_t n_base, size_t n, size_t d)
{
    float *e = malloc(n * d * sizeof *e);
    cr_assert_not_null(e);
    for (size_t i = 0; i < n; i++)
        memcpy(e + i * d, base + (i % n_base) * d, d * sizeof *e);
    return e;
}

static size_t empty_lists(const weft_index_ivf *ix)
{
    size_t n = 0;
    for (size_t l = 0; l < ix->n_lists; l++)
        n += ix->list_off[l] == ix->list_off[l + 1];
    return n;
}

Test(index, ivf_boundaries)
{
    enum { N = 64, D = 8 };
    /* Four distinct rows repeated: asked for 16 lists, most stay empty. */
    float *base = random_rows(4, D, 21), *e = repeated_rows(base, 4, N, D);
    weft_index_ivf_arrays a;
    weft_error err;
    cr_assert_eq(weft_index_ivf_build(e, N, D, 16, 5, 3, 1, WEFT_INDEX_LISTS_INT8, &a,
                                       &err), WEFT_OK, "%s", err.msg);
    cr_assert_geq(empty_lists(&a.ivf), 1, "duplicate rows leave lists empty");
    uint32_t id[N];
    float score[N];
    size_t n = 0;
    /* k larger than one list: the one list probed gives what it has. */
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, N, 1, 4, NULL, id, score, &n, &err),
                 WEFT_OK);
    cr_assert_eq(n, N / 4, "the best list holds the 16 copies of the query's row");
    for (size_t i = 0; i < n; i++)
        cr_assert_eq(id[i] % 4, 0);
    /* k = 0, and one row. */
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, 0, 1, 4, NULL, id, score, &n, &err),
                 WEFT_OK);
    cr_assert_eq(n, 0);
    weft_index_ivf_fini(&a);
    cr_assert_eq(weft_index_ivf_build(e, 1, D, 0, 5, 3, 1, WEFT_INDEX_LISTS_INT8, &a,
                                       &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(a.ivf.n_lists, 1);
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, K, 3, 4, NULL, id, score, &n, &err),
                 WEFT_OK);
    cr_assert_eq(n, 1);
    cr_assert_eq(id[0], 0);
    weft_index_ivf_fini(&a);
    cr_assert_eq(weft_index_ivf_build(e, 0, D, 0, 5, 3, 1, WEFT_INDEX_LISTS_INT8, &a,
                                       &err), WEFT_ERR_INVALID);
    free(base);
    free(e);
}

/* The VNNI kernel and the portable loops sum the same integers: the same candidates, so the
 * same lists even with no room to spare (oversample 1). */
Test(index, native_and_portable_scans_agree)
{
    static const size_t dims[] = { 7, 64, 100, 128, 200 };
    for (size_t t = 0; t < sizeof dims / sizeof dims[0]; t++) {
        size_t n = 1000 + 7 * t, d = dims[t];
        float *e = random_rows(n, d, 30 + t), *q = random_rows(3, d, 40 + t);
        struct codes c = encode(e, n, d);
        for (size_t j = 0; j < 3; j++) {
            uint32_t a[K], b[K];
            float as[K], bs[K];
            size_t na = 0, nb = 0;
            weft_error err;
            weft_index_allow_native(true);
            cr_assert_eq(weft_index_int8_search(&c.view, e, q + j * d, K, 1, NULL, a, as, &na,
                                                &err), WEFT_OK);
            weft_index_allow_native(false);
            cr_assert_eq(weft_index_int8_search(&c.view, e, q + j * d, K, 1, NULL, b, bs, &nb,
                                                &err), WEFT_OK);
            weft_index_allow_native(true);
            cr_assert_eq(na, nb);
            for (size_t i = 0; i < na; i++)
                cr_assert(a[i] == b[i] && as[i] == bs[i], "d = %zu query %zu rank %zu", d, j, i);
        }
        /* lists of a clustered index begin and end inside blocks of 16 */
        weft_index_ivf_arrays ivf;
        weft_error err;
        cr_assert_eq(weft_index_ivf_build(e, n, d, 37, 5, 3, 1, WEFT_INDEX_LISTS_INT8, &ivf,
                                           &err), WEFT_OK);
        for (size_t j = 0; j < 3; j++) {
            uint32_t a[K], b[K];
            float as[K], bs[K];
            size_t na = 0, nb = 0;
            weft_index_allow_native(true);
            cr_assert_eq(weft_index_ivf_search(&ivf.ivf, e, q + j * d, K, 5, 1, NULL, a, as,
                                               &na, &err), WEFT_OK);
            weft_index_allow_native(false);
            cr_assert_eq(weft_index_ivf_search(&ivf.ivf, e, q + j * d, K, 5, 1, NULL, b, bs,
                                               &nb, &err), WEFT_OK);
            weft_index_allow_native(true);
            cr_assert_eq(na, nb);
            for (size_t i = 0; i < na; i++)
                cr_assert(a[i] == b[i] && as[i] == bs[i], "ivf d = %zu query %zu rank %zu", d, j,
                          i);
        }
        weft_index_ivf_fini(&ivf);
        codes_free(&c);
        free(e);
        free(q);
    }
}

/* ---- the clustered index with product-quantised lists (core/index_pq.c) ---- */

static void pq_build(const float *e, size_t n, size_t d, size_t n_lists,
                     weft_index_ivf_arrays *a)
{
    weft_error err;
    cr_assert_eq(weft_index_ivf_build(e, n, d, n_lists, 5, 3, 1, WEFT_INDEX_LISTS_PQ4, a, &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(a->ivf.list_codes, WEFT_INDEX_LISTS_PQ4);
}

/* Every row's code in every subspace is the nearest codeword to its residual from its
 * list's centroid (recomputed here from the layout of include/weft/index.h); padding rows
 * and subspaces past the row hold 0. Dimensions 7 and 10 leave a half-filled subspace and
 * padded ones; 1030 has subspaces of 3 values. */
Test(index, pq_codes_are_the_nearest_codewords)
{
    static const size_t dims[] = { 7, 10, 64, 1030 };
    for (size_t t = 0; t < sizeof dims / sizeof dims[0]; t++) {
        size_t d = dims[t], n = d > 1000 ? 150 : 700;
        float *e = random_rows(n, d, 50 + t);
        weft_index_ivf_arrays a;
        pq_build(e, n, d, 9, &a);
        const weft_index_ivf *ix = &a.ivf;
        const weft_index_pq *pq = &ix->pq;
        size_t s = pq->sub_dims, n_real = (d + s - 1) / s;
        cr_assert_eq(s, d > 1024 ? 3 : 2);
        cr_assert_eq(pq->n_sub % 4, 0);
        cr_assert_eq(pq->n_sub, (n_real + 3) / 4 * 4);
        size_t bytes = weft_index_pq_block_bytes(pq->n_sub);
        for (size_t l = 0; l < ix->n_lists; l++) {
            size_t rows = (size_t)(ix->list_off[l + 1] - ix->list_off[l]);
            cr_assert_eq(pq->list_block[l + 1] - pq->list_block[l], (rows + 31) / 32);
            for (size_t i = 0; i < (size_t)(pq->list_block[l + 1] - pq->list_block[l]) * 32; i++) {
                const uint8_t *blk = pq->code + (pq->list_block[l] + i / 32) * bytes;
                const float *x = i < rows ? e + (size_t)ix->row_id[ix->list_off[l] + i] * d : NULL;
                const float *c = ix->centroid + l * (d + 1);
                for (size_t m = 0; m < pq->n_sub; m++) {
                    uint8_t byte = blk[m / 4 * 64 + (m % 4) / 2 * 32 + i % 32];
                    unsigned got = m % 2 ? byte >> 4 : byte & 15u, want = 0;
                    if (x && m < n_real) {
                        float best = INFINITY;
                        for (unsigned j = 0; j < 16; j++) {
                            const float *cw = pq->codebook + (m * 16 + j) * s;
                            float dist = 0.0f;
                            for (size_t u = 0; u < s; u++) {
                                float r = m * s + u < d ? x[m * s + u] - c[m * s + u] : 0.0f;
                                dist += (r - cw[u]) * (r - cw[u]);
                            }
                            if (dist < best) {
                                best = dist;
                                want = j;
                            }
                        }
                    }
                    cr_assert_eq(got, want, "d %zu list %zu row %zu subspace %zu", d, l, i, m);
                }
            }
        }
        weft_index_ivf_fini(&a);
        free(e);
    }
}

/* With k x oversample >= n every row is a candidate: the answer is the exact scan's, ids and
 * scores, filters included. */
Test(index, pq_with_every_row_a_candidate_is_the_exact_scan)
{
    enum { N = 300, D = 24 };
    float *e = random_rows(N, D, 61), *q = random_rows(4, D, 62);
    weft_index_ivf_arrays a;
    pq_build(e, N, D, 0, &a);
    uint32_t excl[] = { 3, 17, 40, 41, 200 };
    weft_topk_exclude ex = { .sorted = excl, .n_sorted = 5 };
    uint32_t type_of[N];
    for (size_t i = 0; i < N; i++)
        type_of[i] = (uint32_t)(i % 3);
    weft_index_filter fs[2] = { { .ex = &ex }, { .ex = &ex, .type_of = type_of, .type = 2 } };
    for (size_t j = 0; j < 4; j++)
        for (size_t v = 0; v < 2; v++) {
            uint32_t want[K], got[K];
            float ws[K], gs[K];
            size_t nw = 0, ng = 0;
            weft_topk t;
            weft_topk_init(&t, K, want, ws);
            for (uint32_t r = 0; r < N; r++)
                if ((v == 0 || r % 3 == 2) && !weft_topk_is_excluded(&ex, r))
                    weft_topk_push(&t, r, weft_kernel_dot(e + r * D, q + j * D, D));
            nw = weft_topk_finish(&t);
            weft_error err;
            cr_assert_eq(weft_index_ivf_search(&a.ivf, e, q + j * D, K, a.ivf.n_lists, N, &fs[v],
                                               got, gs, &ng, &err), WEFT_OK);
            cr_assert_eq(ng, nw);
            for (size_t i = 0; i < ng; i++)
                cr_assert(got[i] == want[i] && gs[i] == ws[i], "query %zu rank %zu", j, i);
        }
    weft_index_ivf_fini(&a);
    free(e);
    free(q);
}

/* Recall@10 against the exact scan with weft train's oversample (16), every list scanned:
 * random rows (no structure at all) and clustered rows. */
Test(index, pq_recall_on_random_and_clustered_rows)
{
    enum { N = 20000, D = 32, Q = 40 };
    for (int kind = 0; kind < 2; kind++) {
        float *e = kind ? clustered_rows(N, D, 30, 70) : random_rows(N, D, 71);
        float *q = kind ? clustered_rows(Q, D, 30, 72) : random_rows(Q, D, 73);
        weft_index_ivf_arrays a;
        pq_build(e, N, D, 0, &a);
        double sum = 0.0;
        for (size_t j = 0; j < Q; j++) {
            uint32_t want[K], got[K];
            float ws[K], gs[K];
            size_t nw = weft_topk_scan(e, N, D, q + j * D, K, NULL, want, ws), ng = 0;
            weft_error err;
            cr_assert_eq(weft_index_ivf_search(&a.ivf, e, q + j * D, K, a.ivf.n_lists, 16, NULL,
                                               got, gs, &ng, &err), WEFT_OK);
            for (size_t i = 0; i < ng; i++)   /* every score returned is the exact one */
                cr_assert_eq(gs[i], weft_kernel_dot(e + (size_t)got[i] * D, q + j * D, D));
            sum += recall(want, nw, got, ng);
        }
        cr_assert_geq(sum / Q, 0.95, "%s rows: recall@10 %.3f", kind ? "clustered" : "random",
                      sum / Q);
        weft_index_ivf_fini(&a);
        free(e);
        free(q);
    }
}

/* Empty lists, k larger than a list and than the rows, every candidate filtered, a one-node
 * type, one row, and a non-finite row that is never returned. */
Test(index, pq_boundaries)
{
    enum { N = 64, D = 8 };
    float *base = random_rows(4, D, 81), *e = repeated_rows(base, 4, N, D);
    weft_index_ivf_arrays a;
    weft_error err;
    pq_build(e, N, D, 16, &a);
    cr_assert_geq(empty_lists(&a.ivf), 1, "duplicate rows leave lists empty");
    uint32_t id[N + 8];
    float score[N + 8];
    size_t n = 0;
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, N, 1, 4, NULL, id, score, &n, &err),
                 WEFT_OK);
    cr_assert_eq(n, N / 4, "the best list holds the 16 copies of the query's row");
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, N + 8, a.ivf.n_lists, 4, NULL, id, score,
                                       &n, &err), WEFT_OK);
    cr_assert_eq(n, N, "k past the rows: every row once");
    uint32_t all[N];
    for (uint32_t i = 0; i < N; i++)
        all[i] = i;
    weft_topk_exclude ex = { .sorted = all, .n_sorted = N };
    weft_index_filter none = { .ex = &ex };
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, K, a.ivf.n_lists, 4, &none, id, score,
                                       &n, &err), WEFT_OK);
    cr_assert_eq(n, 0, "every candidate filtered");
    uint32_t type_of[N] = { 0 };
    type_of[37] = 1;
    weft_index_filter one = { .type_of = type_of, .type = 1 };
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, K, a.ivf.n_lists, 4, &one, id, score,
                                       &n, &err), WEFT_OK);
    cr_assert(n == 1 && id[0] == 37, "a one-node type gives that node");
    weft_index_ivf_fini(&a);
    pq_build(e, 1, D, 0, &a);
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, base, K, 3, 4, NULL, id, score, &n, &err),
                 WEFT_OK);
    cr_assert(n == 1 && id[0] == 0);
    weft_index_ivf_fini(&a);
    e[5 * D + 2] = NAN;
    pq_build(e, N, D, 4, &a);
    cr_assert_eq(weft_index_ivf_search(&a.ivf, e, e + 1 * D, N, a.ivf.n_lists, 4, NULL,
                                       id, score, &n, &err), WEFT_OK);
    for (size_t i = 0; i < n; i++)
        cr_assert_neq(id[i], 5, "a row with NaN is never returned");
    weft_index_ivf_fini(&a);
    free(base);
    free(e);
}

/* The AVX-512BW kernel and the portable loop sum the same integers, so they give the same
 * lists even with no room to spare (oversample 1). */
Test(index, pq_native_and_portable_scans_agree)
{
    static const size_t dims[] = { 7, 64, 200, 1030 };
    for (size_t t = 0; t < sizeof dims / sizeof dims[0]; t++) {
        size_t d = dims[t], n = d > 1000 ? 300 : 1500 + 7 * t;
        float *e = random_rows(n, d, 90 + t), *q = random_rows(3, d, 95 + t);
        weft_index_ivf_arrays a;
        pq_build(e, n, d, 13, &a);
        for (size_t j = 0; j < 3; j++)
            for (size_t over = 1; over <= 4; over += 3) {
                uint32_t x[K], y[K];
                float xs[K], ys[K];
                size_t nx = 0, ny = 0;
                weft_error err;
                weft_index_allow_native(true);
                cr_assert_eq(weft_index_ivf_search(&a.ivf, e, q + j * d, K, 7, over, NULL, x, xs,
                                                   &nx, &err), WEFT_OK);
                weft_index_allow_native(false);
                cr_assert_eq(weft_index_ivf_search(&a.ivf, e, q + j * d, K, 7, over, NULL, y, ys,
                                                   &ny, &err), WEFT_OK);
                weft_index_allow_native(true);
                cr_assert_eq(nx, ny);
                for (size_t i = 0; i < nx; i++)
                    cr_assert(x[i] == y[i] && xs[i] == ys[i], "d %zu query %zu rank %zu", d, j,
                              i);
            }
        weft_index_ivf_fini(&a);
        free(e);
        free(q);
    }
}
