/* Filtered ranks on crafted scores, worked by hand (the rule: rank = 1 + #higher +
 * #equal / 2, the mean of the optimistic and pessimistic ranks, after filtering). */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/baseline.h"
#include "weft/eval.h"
#include "weft/names.h"
#include "weft/rng.h"

Test(eval, rank_counts_higher_candidates)
{
    float s[5] = { 0.1f, 0.9f, 0.5f, 0.7f, 0.2f };
    /* target 2 (0.5): higher are 1 and 3 -> rank 3 */
    cr_assert_eq(weft_eval_rank(s, 5, 2, NULL, 0, false, 0), 3.0);
}

Test(eval, ties_take_the_mean_of_optimistic_and_pessimistic)
{
    float s[6] = { 1, 1, 1, 1, 0, 2 };
    /* target 0: one higher (5), three equal others (1, 2, 3): optimistic 2, pessimistic 5 */
    cr_assert_eq(weft_eval_rank(s, 6, 0, NULL, 0, false, 0), 3.5);
    float flat[4] = { 0, 0, 0, 0 };
    /* all equal: a constant model ranks in the middle, (1 + 4) / 2 */
    cr_assert_eq(weft_eval_rank(flat, 4, 3, NULL, 0, false, 0), 2.5);
}

Test(eval, filter_removes_known_answers_but_never_the_target)
{
    float s[6] = { 0.9f, 0.8f, 0.7f, 0.6f, 0.5f, 0.4f };
    uint32_t known[] = { 0, 2, 4 };   /* 4 is the target itself: stays */
    /* target 4: higher are 0,1,2,3; 0 and 2 filtered -> rank 3 */
    cr_assert_eq(weft_eval_rank(s, 6, 4, known, 3, false, 0), 3.0);
    /* and excluding self (1) too -> rank 2 */
    cr_assert_eq(weft_eval_rank(s, 6, 4, known, 3, true, 1), 2.0);
}

Test(eval, nan_target_ranks_last)
{
    float s[4] = { NAN, 0.1f, 0.2f, NAN };
    cr_assert_eq(weft_eval_rank(s, 4, 0, NULL, 0, false, 0), 4.0);
}

/* Scores for the ranking test: candidate c scores c, so the answer's rank is known. */
static void score_by_id(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out)
{
    (void)ctx;
    (void)anchor;
    (void)r;
    (void)is_head;
    for (size_t c = 0; c < 10; c++)
        out[c] = (float)c;
}

Test(eval, ranking_metrics_match_hand_computation)
{
    /* 10 nodes scored by id. Test triples (s, 0, t); known edges only the test ones.
     * Tail of (0,0,9): nothing above 9, rank 1. Tail of (1,0,5): 6..9 above -> rank 5.
     * Tail of (2,0,0): 1..9 above except self 2 -> 8 above, rank 9. */
    weft_triple test[3] = { { 0, 0, 9 }, { 1, 0, 5 }, { 2, 0, 0 } };
    uint64_t off[11] = { 0, 1, 2, 3, 3, 3, 3, 3, 3, 3, 3 };
    uint32_t rel[3] = { 0, 0, 0 }, nbr[3] = { 9, 5, 0 };
    weft_csr out = { 10, off, rel, nbr };
    weft_eval_filter f = { &out, NULL, true };
    weft_rank_metrics m;
    for (size_t threads = 1; threads <= 3; threads++) {
        cr_assert_eq(weft_eval_ranking(test, 3, 10, false, &f, score_by_id, NULL, threads, &m,
                                       NULL),
                     WEFT_OK);
        cr_assert_eq(m.n_queries, 3);
        cr_assert_float_eq(m.mrr, (1.0 + 1.0 / 5 + 1.0 / 9) / 3, 1e-12);
        cr_assert_float_eq(m.mean_rank, 15.0 / 3, 1e-12);
        cr_assert_float_eq(m.hits1, 1.0 / 3, 1e-12);
        cr_assert_float_eq(m.hits10, 1.0, 1e-12);
    }
}

Test(eval, popularity_scores_are_training_degrees)
{
    weft_triple train[4] = { { 0, 0, 1 }, { 2, 0, 1 }, { 0, 0, 2 }, { 1, 1, 0 } };
    weft_baseline_popularity p;
    cr_assert_eq(weft_baseline_popularity_init(&p, train, 4, 3, 2, NULL), WEFT_OK);
    float s[3];
    weft_baseline_popularity_scores(&p, 0, 0, false, s);   /* in-degree under relation 0 */
    cr_assert(s[0] == 0 && s[1] == 2 && s[2] == 1);
    weft_baseline_popularity_scores(&p, 0, 0, true, s);    /* out-degree under relation 0 */
    cr_assert(s[0] == 2 && s[1] == 0 && s[2] == 1);
    weft_baseline_popularity_fini(&p);
}

/* Scores that depend on every argument, so that a query answered from the wrong anchor,
 * relation or direction shows: a hash of (anchor, r, is_head, c) onto 8 levels (ties). */
static float hashed_score(uint32_t anchor, uint32_t r, bool is_head, size_t c)
{
    uint64_t x = (uint64_t)anchor * 1000003u + r * 7919u + (is_head ? 104729u : 0u);
    x ^= c * 2654435761u;
    x ^= x >> 29;
    x *= 0xbf58476d1ce4e5b9ull;
    x ^= x >> 32;
    return (float)(x % 8) / 8.0f;
}

static void hashed_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out)
{
    size_t n = *(const size_t *)ctx;
    for (size_t c = 0; c < n; c++)
        out[c] = hashed_score(anchor, r, is_head, c);
}

Test(eval, per_relation_metrics_group_queries_by_relation)
{
    /* The scores of ranking_matches_hand_computation (candidate c scores c), two relations,
     * no filter, self excluded. Tails: (0,0,9) rank 1; (1,1,5) rank 5; (2,0,0): 9..3 and 1
     * above (self 2 left out), rank 9; (3,1,8): 9 above, rank 2.
     * Relation 0: ranks 1, 9. Relation 1: ranks 5, 2. Relation 2: none. */
    weft_triple test[4] = { { 0, 0, 9 }, { 1, 1, 5 }, { 2, 0, 0 }, { 3, 1, 8 } };
    weft_eval_filter f = { NULL, NULL, true };
    weft_rank_metrics all, rel[3];
    cr_assert_eq(weft_eval_ranking_by_relation(test, 4, 10, 3, false, &f, score_by_id, NULL, 2,
                                               &all, rel, NULL), WEFT_OK);
    cr_assert_eq(all.n_queries, 4);
    cr_assert_float_eq(all.mrr, (1.0 + 1.0 / 5 + 1.0 / 9 + 1.0 / 2) / 4, 1e-12);
    cr_assert_eq(rel[0].n_queries, 2);
    cr_assert_float_eq(rel[0].mrr, (1.0 + 1.0 / 9) / 2, 1e-12);
    cr_assert_float_eq(rel[0].mean_rank, 5.0, 1e-12);
    cr_assert_float_eq(rel[0].hits1, 0.5, 1e-12);
    cr_assert_eq(rel[1].n_queries, 2);
    cr_assert_float_eq(rel[1].mrr, (1.0 / 5 + 1.0 / 2) / 2, 1e-12);
    cr_assert_float_eq(rel[1].hits3, 0.5, 1e-12);
    cr_assert_eq(rel[2].n_queries, 0);
    cr_assert_eq(rel[2].mrr, 0.0);
}

Test(eval, per_relation_rejects_unknown_relation_ids)
{
    weft_triple test[1] = { { 0, 3, 1 } };
    weft_eval_filter f = { NULL, NULL, false };
    weft_rank_metrics all, rel[3];
    cr_assert_eq(weft_eval_ranking_by_relation(test, 1, 10, 3, false, &f, score_by_id, NULL, 1,
                                               &all, rel, NULL), WEFT_ERR_INVALID);
}

Test(eval, results_do_not_depend_on_the_thread_count)
{
    enum { N = 50, M = 301, R = 4 };
    weft_triple test[M];
    weft_rng rng;
    weft_rng_seed(&rng, 5);
    for (size_t i = 0; i < M; i++)
        test[i] = (weft_triple){ weft_rng_below(&rng, N), weft_rng_below(&rng, R),
                                 weft_rng_below(&rng, N) };
    size_t n = N;
    weft_eval_filter f = { NULL, NULL, true };
    weft_rank_metrics all1, rel1[R];
    cr_assert_eq(weft_eval_ranking_by_relation(test, M, N, R, true, &f, hashed_scores, &n, 1,
                                               &all1, rel1, NULL), WEFT_OK);
    for (size_t threads = 2; threads <= 8; threads += 3) {
        weft_rank_metrics all, rel[R];
        cr_assert_eq(weft_eval_ranking_by_relation(test, M, N, R, true, &f, hashed_scores, &n,
                                                   threads, &all, rel, NULL), WEFT_OK);
        cr_assert_eq(memcmp(&all, &all1, sizeof all), 0, "%zu threads: overall differs", threads);
        cr_assert_eq(memcmp(rel, rel1, sizeof rel), 0, "%zu threads: per relation differs",
                     threads);
    }
    weft_rank_metrics plain;
    cr_assert_eq(weft_eval_ranking(test, M, N, true, &f, hashed_scores, &n, 3, &plain, NULL),
                 WEFT_OK);
    cr_assert_eq(memcmp(&plain, &all1, sizeof plain), 0, "weft_eval_ranking differs");
}

Test(eval, triple_scores_read_the_tail_query_of_each_triple)
{
    enum { N = 30, M = 97 };
    weft_triple e[M];
    weft_rng rng;
    weft_rng_seed(&rng, 9);
    for (size_t i = 0; i < M; i++)   /* few sources and relations: groups share a query */
        e[i] = (weft_triple){ weft_rng_below(&rng, 5), weft_rng_below(&rng, 2),
                              weft_rng_below(&rng, N) };
    size_t n = N;
    for (size_t threads = 1; threads <= 4; threads++) {
        float out[M];
        cr_assert_eq(weft_eval_triple_scores(e, M, N, hashed_scores, &n, threads, out, NULL),
                     WEFT_OK);
        for (size_t i = 0; i < M; i++)
            cr_assert_eq(out[i], hashed_score(e[i].s, e[i].r, false, e[i].t),
                         "%zu threads, triple %zu", threads, i);
    }
}

/* Every (s, 0, t) with s + t even is known in a 12-node graph without self-loops. */
static weft_triple *even_pairs(size_t *m)
{
    weft_triple *e = calloc(144, sizeof *e);
    cr_assert_not_null(e);
    size_t k = 0;
    for (uint32_t s = 0; s < 12; s++)
        for (uint32_t t = 0; t < 12; t++)
            if (s != t && (s + t) % 2 == 0)
                e[k++] = (weft_triple){ s, 0, t };
    *m = k;
    return e;
}

Test(eval, negatives_are_neither_known_edges_nor_self_loops)
{
    size_t m = 0;
    weft_triple *known = even_pairs(&m);
    weft_csr out;
    cr_assert_eq(weft_graph_build_csr(&out, known, m, 12, false, NULL), WEFT_OK);
    weft_eval_filter f = { &out, NULL, true };
    weft_triple *a = NULL, *b = NULL, *c = NULL;
    size_t na = 0, nb = 0, nc = 0;
    cr_assert_eq(weft_eval_sample_negatives(known, 20, 3, 12, &f, 7, &a, &na, NULL), WEFT_OK);
    cr_assert_eq(weft_eval_sample_negatives(known, 20, 3, 12, &f, 7, &b, &nb, NULL), WEFT_OK);
    cr_assert_eq(weft_eval_sample_negatives(known, 20, 3, 12, &f, 8, &c, &nc, NULL), WEFT_OK);
    cr_assert_eq(na, 60);   /* half of all pairs are free: 64 tries never all fail here */
    for (size_t i = 0; i < na; i++) {
        cr_assert_neq(a[i].s, a[i].t, "negative %zu is a self-loop", i);
        cr_assert_eq((a[i].s + a[i].t) % 2, 1, "negative %zu (%u, %u) is known", i, a[i].s, a[i].t);
        /* one end of the edge it corrupts stays */
        const weft_triple *p = &known[i / 3];
        cr_assert(a[i].s == p->s || a[i].t == p->t);
    }
    cr_assert_eq(nb, na);
    cr_assert_eq(memcmp(a, b, na * sizeof *a), 0, "same seed, other negatives");
    cr_assert_neq(memcmp(a, c, na * sizeof *a), 0, "another seed, the same negatives");
    free(a);
    free(b);
    free(c);
    free(known);
    weft_csr_fini(&out);
}

Test(eval, negatives_give_up_when_every_pair_is_known)
{
    weft_triple all[6] = { { 0, 0, 1 }, { 0, 0, 2 }, { 1, 0, 0 },
                           { 1, 0, 2 }, { 2, 0, 0 }, { 2, 0, 1 } };
    weft_csr out;
    cr_assert_eq(weft_graph_build_csr(&out, all, 6, 3, false, NULL), WEFT_OK);
    weft_eval_filter f = { &out, NULL, true };
    weft_triple *neg = NULL;
    size_t n = 99;
    cr_assert_eq(weft_eval_sample_negatives(all, 6, 2, 3, &f, 1, &neg, &n, NULL), WEFT_OK);
    cr_assert_eq(n, 0);
    free(neg);
    weft_csr_fini(&out);
}

Test(eval, auc_and_ap_need_both_classes)
{
    float s[3] = { 0.1f, 0.2f, 0.3f };
    bool pos[3] = { true, true, true }, neg[3] = { false, false, false };
    double x;
    weft_error err;
    cr_assert_eq(weft_eval_auc(s, pos, 3, &x, &err), WEFT_ERR_INVALID);
    cr_assert_eq(weft_eval_auc(s, neg, 3, &x, &err), WEFT_ERR_INVALID);
    cr_assert_eq(weft_eval_average_precision(s, neg, 3, &x, &err), WEFT_ERR_INVALID);
    cr_assert_eq(weft_eval_average_precision(s, pos, 3, &x, &err), WEFT_OK);
    cr_assert_float_eq(x, 1.0, 1e-15);   /* all positive: precision 1 at every threshold */
}

Test(eval, nan_scores_rank_below_every_number)
{
    /* A NaN positive loses to the negative: AUC 0; a NaN negative loses to the positive:
     * AUC 1. Two NaNs tie: AUC 1/2. AP of [pos NaN, neg 0.1]: the only threshold with the
     * positive also holds the negative, precision 1/2. */
    float a[2] = { NAN, 0.1f }, b[2] = { 0.1f, NAN }, c[2] = { NAN, NAN };
    bool l[2] = { true, false };
    double x;
    cr_assert_eq(weft_eval_auc(a, l, 2, &x, NULL), WEFT_OK);
    cr_assert_eq(x, 0.0);
    cr_assert_eq(weft_eval_auc(b, l, 2, &x, NULL), WEFT_OK);
    cr_assert_eq(x, 1.0);
    cr_assert_eq(weft_eval_auc(c, l, 2, &x, NULL), WEFT_OK);
    cr_assert_eq(x, 0.5);
    cr_assert_eq(weft_eval_average_precision(a, l, 2, &x, NULL), WEFT_OK);
    cr_assert_eq(x, 0.5);
}

Test(eval, binary_scores_positives_against_negatives)
{
    /* Candidate c scores c: positives (0,0,9), (1,0,8) score 9 and 8; negatives (0,0,3),
     * (2,0,8) score 3 and 8. Pairs: 9 beats both (2), 8 beats 3 and ties 8 (1.5): AUC
     * 3.5 / 4. AP: >= 9: 1/1, recall 1/2; >= 8: 2 of 3, recall 1 -> 1/2 + 1/2 * 2/3 = 5/6. */
    weft_triple pos[2] = { { 0, 0, 9 }, { 1, 0, 8 } }, neg[2] = { { 0, 0, 3 }, { 2, 0, 8 } };
    weft_binary_metrics b;
    cr_assert_eq(weft_eval_binary(pos, 2, neg, 2, 10, score_by_id, NULL, 2, &b, NULL), WEFT_OK);
    cr_assert_eq(b.n_pos, 2);
    cr_assert_eq(b.n_neg, 2);
    cr_assert_float_eq(b.auc, 0.875, 1e-15);
    cr_assert_float_eq(b.ap, 5.0 / 6.0, 1e-15);
    cr_assert_eq(weft_eval_binary(pos, 2, neg, 0, 10, score_by_id, NULL, 1, &b, NULL),
                 WEFT_ERR_INVALID);
}

Test(eval, per_relation_json_names_relations_with_queries)
{
    weft_names names;
    cr_assert_eq(weft_names_init(&names, NULL), WEFT_OK);
    uint32_t id;
    cr_assert_eq(weft_names_intern(&names, "likes", 5, &id, NULL, NULL), WEFT_OK);
    cr_assert_eq(weft_names_intern(&names, "owns", 4, &id, NULL, NULL), WEFT_OK);
    weft_rank_metrics rel[2] = { { 4, 0.5, 3.0, 0.25, 0.5, 1.0 }, { 0, 0, 0, 0, 0, 0 } };
    weft_names_view v = weft_names_as_view(&names);
    json_t *j = weft_eval_per_relation_json(rel, &v);
    cr_assert_not_null(j);
    cr_assert_eq(json_object_size(j), 1, "a relation without queries is left out");
    json_t *likes = json_object_get(j, "likes");
    cr_assert_float_eq(json_real_value(json_object_get(likes, "mrr")), 0.5, 1e-15);
    cr_assert_eq(json_integer_value(json_object_get(likes, "queries")), 4);
    cr_assert_float_eq(json_real_value(json_object_get(likes, "hits@3")), 0.5, 1e-15);
    json_decref(j);
    weft_names_fini(&names);
}

/* weft_eval_model_scores behind another pointer: ranked one query at a time (sgemv). */
static void model_scores_one_by_one(void *ctx, uint32_t anchor, uint32_t r, bool is_head,
                                    float *out)
{
    weft_eval_model_scores(ctx, anchor, r, is_head, out);
}

Test(eval, model_scores_in_blocks_rank_like_one_query_at_a_time)
{
    /* Small whole-number embeddings make every product exact in float, so the blocked sgemm
     * path and the one-by-one sgemv path must give identical ranks, ties included; 450
     * queries span several blocks of 128. */
    enum { N = 300, D = 8, R = 3, M = 225 };
    weft_rng rng;
    weft_rng_seed(&rng, 21);
    float *ent = calloc((size_t)N * D, sizeof *ent), rel[R * D];
    cr_assert_not_null(ent);
    for (size_t i = 0; i < (size_t)N * D; i++)
        ent[i] = (float)weft_rng_below(&rng, 5) - 2.0f;
    for (size_t i = 0; i < (size_t)R * D; i++)
        rel[i] = (float)weft_rng_below(&rng, 5) - 2.0f;
    weft_triple test[M];
    for (size_t i = 0; i < M; i++)
        test[i] = (weft_triple){ weft_rng_below(&rng, N), weft_rng_below(&rng, R),
                                 weft_rng_below(&rng, N) };
    weft_eval_filter f = { NULL, NULL, true };
    static const weft_link_kind kinds[2] = { WEFT_LINK_DOT, WEFT_LINK_DISTMULT };
    for (size_t k = 0; k < 2; k++) {
        weft_link_model model = { .kind = kinds[k], .n_entities = N, .n_relations = R,
                                  .dim = D, .entity = ent,
                                  .relation = kinds[k] == WEFT_LINK_DOT ? NULL : rel };
        double want[2 * M], got[2 * M];
        cr_assert_eq(weft_eval_ranks(test, M, N, true, &f, model_scores_one_by_one, &model, 1,
                                     want, NULL), WEFT_OK);
        for (size_t threads = 1; threads <= 4; threads++) {
            cr_assert_eq(weft_eval_ranks(test, M, N, true, &f, weft_eval_model_scores, &model,
                                         threads, got, NULL), WEFT_OK);
            for (size_t q = 0; q < 2 * M; q++)
                cr_assert_eq(got[q], want[q], "%s, %zu threads, query %zu: %g, one by one %g",
                             weft_model_kind_name(kinds[k]), threads, q, got[q], want[q]);
        }
    }
    free(ent);
}
