/* Evaluation (core/eval.c) against figures from outside weft: filtered ranks and their
 * metrics recomputed by brute force with numpy (ranks_numpy.py), AUC-ROC and average
 * precision from scikit-learn (binary_sklearn.py), and worked examples with ties whose
 * ranks are derived by hand below. The python scripts run under /usr/bin/python3. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../unit/fixture.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/rng.h"

TestSuite(reference_eval, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* Path of @p name beside this source file (relative to where the build ran, or absolute). */
static const char *script_path(const char *name)
{
    static char path[1024];
    const char *src = __FILE__;
    const char *slash = strrchr(src, '/');
    int dir_len = slash ? (int)(slash - src) : 1;
    snprintf(path, sizeof path, "%.*s/%s", dir_len, slash ? src : ".", name);
    return path;
}

/* Scores looked up in a table: [r][is_head][anchor][candidate], (n_rel, 2, n, n). */
typedef struct score_table {
    size_t n, n_rel;
    float *s;
} score_table;

static void table_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out)
{
    const score_table *tb = ctx;
    size_t n = tb->n;
    memcpy(out, tb->s + (((size_t)r * 2 + is_head) * n + anchor) * n, n * sizeof *out);
}

static weft_csr csr_of(const weft_triple *e, size_t m, size_t n, bool by_target)
{
    weft_csr c;
    weft_error err;
    cr_assert_eq(weft_graph_build_csr(&c, e, m, n, by_target, &err), WEFT_OK, "%s", err.msg);
    return c;
}

static void write_triples(const char *name, const weft_triple *e, size_t m)
{
    FILE *f = fopen(fixture_path(name), "w");
    cr_assert_not_null(f);
    for (size_t i = 0; i < m; i++)
        fprintf(f, "%lu %lu %lu\n", (unsigned long)e[i].s, (unsigned long)e[i].r,
                (unsigned long)e[i].t);
    cr_assert_eq(fclose(f), 0);
}

static void expect_metrics(const weft_rank_metrics *got, size_t n, double mrr, double mr,
                           double h1, double h3, double h10, const char *what)
{
    cr_assert_eq(got->n_queries, n, "%s: %zu queries, want %zu", what, got->n_queries, n);
    cr_assert_float_eq(got->mrr, mrr, 1e-12, "%s: MRR %.17g, want %.17g", what, got->mrr, mrr);
    cr_assert_float_eq(got->mean_rank, mr, 1e-9, "%s: mean rank %.17g, want %.17g", what,
                       got->mean_rank, mr);
    cr_assert_float_eq(got->hits1, h1, 1e-12, "%s: Hits@1", what);
    cr_assert_float_eq(got->hits3, h3, 1e-12, "%s: Hits@3", what);
    cr_assert_float_eq(got->hits10, h10, 1e-12, "%s: Hits@10", what);
}

/* A random typed graph with scores on a coarse grid (many ties), ranked by weft and by the
 * numpy script; every rank must agree exactly (they are multiples of 1/2) and the metrics
 * to rounding. */
static void check_against_numpy(uint64_t seed, bool exclude_self)
{
    enum { N = 40, R = 3, M_KNOWN = 240, M_TEST = 60 };
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    weft_triple raw[M_KNOWN], *known = NULL;
    for (size_t i = 0; i < M_KNOWN; i++) {
        raw[i] = (weft_triple){ weft_rng_below(&rng, N), weft_rng_below(&rng, R),
                                weft_rng_below(&rng, N) };
        if (exclude_self && raw[i].s == raw[i].t)
            raw[i].t = (raw[i].t + 1) % N;
    }
    size_t n_known = 0;
    cr_assert_eq(weft_graph_unique_triples(raw, M_KNOWN, false, &known, &n_known, NULL, NULL),
                 WEFT_OK);
    cr_assert_geq(n_known, M_TEST);
    weft_triple test[M_TEST];   /* every fourth known triple: sorted and unique */
    for (size_t i = 0; i < M_TEST; i++)
        test[i] = known[i * n_known / M_TEST];

    score_table tb = { N, R, calloc((size_t)R * 2 * N * N, sizeof(float)) };
    cr_assert_not_null(tb.s);
    for (size_t i = 0; i < (size_t)R * 2 * N * N; i++)
        tb.s[i] = (float)weft_rng_below(&rng, 6) / 4.0f;   /* 6 levels: ties everywhere */

    weft_csr out = csr_of(known, n_known, N, false), in = csr_of(known, n_known, N, true);
    weft_eval_filter f = { &out, &in, exclude_self };
    double ranks[2 * M_TEST];
    weft_rank_metrics overall, per_rel[R];
    cr_assert_eq(weft_eval_ranks(test, M_TEST, N, true, &f, table_scores, &tb, 3, ranks, NULL),
                 WEFT_OK);
    cr_assert_eq(weft_eval_ranking_by_relation(test, M_TEST, N, R, true, &f, table_scores, &tb,
                                               2, &overall, per_rel, NULL), WEFT_OK);

    FILE *meta = fopen(fixture_path("meta.txt"), "w");
    cr_assert_not_null(meta);
    fprintf(meta, "%d %d %d\n", N, R, exclude_self ? 1 : 0);
    cr_assert_eq(fclose(meta), 0);
    write_triples("known.tsv", known, n_known);
    write_triples("test.tsv", test, M_TEST);
    fixture_write("scores.f32", tb.s, (size_t)R * 2 * N * N * sizeof(float));

    char cmd[2048];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s %s", script_path("ranks_numpy.py"),
             fixture_dir);
    FILE *py = popen(cmd, "r");
    cr_assert_not_null(py, "cannot run %s", cmd);
    for (size_t i = 0; i < M_TEST; i++) {
        double tail, head;
        cr_assert_eq(fscanf(py, "%lf %lf", &tail, &head), 2, "numpy output ended at query %zu", i);
        cr_assert_eq(ranks[2 * i], tail, "query %zu tail: weft %g, numpy %g", i, ranks[2 * i],
                     tail);
        cr_assert_eq(ranks[2 * i + 1], head, "query %zu head: weft %g, numpy %g", i,
                     ranks[2 * i + 1], head);
    }
    size_t n;
    double m[5];
    cr_assert_eq(fscanf(py, " overall %zu %lf %lf %lf %lf %lf", &n, &m[0], &m[1], &m[2], &m[3],
                        &m[4]), 6);
    expect_metrics(&overall, n, m[0], m[1], m[2], m[3], m[4], "overall");
    bool seen[R] = { false };
    unsigned r;
    while (fscanf(py, " relation %u %zu %lf %lf %lf %lf %lf", &r, &n, &m[0], &m[1], &m[2], &m[3],
                  &m[4]) == 7) {
        cr_assert_lt(r, R);
        seen[r] = true;
        expect_metrics(&per_rel[r], n, m[0], m[1], m[2], m[3], m[4], "relation");
    }
    cr_assert_eq(pclose(py), 0, "%s failed", cmd);
    for (size_t k = 0; k < R; k++)
        if (!seen[k])
            cr_assert_eq(per_rel[k].n_queries, 0, "relation %zu has queries numpy did not see", k);
    weft_csr_fini(&out);
    weft_csr_fini(&in);
    free(known);
    free(tb.s);
}

Test(reference_eval, filtered_ranks_match_numpy_brute_force,
     .description = "ranks and MRR / mean rank / Hits@k, overall and per relation, against a "
                    "brute-force numpy computation (tests/reference/ranks_numpy.py)")
{
    check_against_numpy(11, true);
}

Test(reference_eval, filtered_ranks_with_self_candidates_match_numpy,
     .description = "the same with self-loops allowed (the anchor stays a candidate), "
                    "against tests/reference/ranks_numpy.py")
{
    check_against_numpy(12, false);
}

/* One case for scikit-learn: @p n scores on @p levels distinct values (0: continuous), a
 * positive share of about @p pos_share, positives lifted by @p lift. Writes "label score"
 * lines. */
static void write_binary_case(const char *name, weft_rng *rng, size_t n, unsigned levels,
                              double pos_share, float lift, float *scores, bool *labels)
{
    FILE *f = fopen(fixture_path(name), "w");
    cr_assert_not_null(f);
    for (size_t i = 0; i < n; i++) {
        labels[i] = weft_rng_double(rng) < pos_share;
        float base = levels ? (float)weft_rng_below(rng, levels) / (float)levels
                            : weft_rng_float(rng);
        scores[i] = base + (labels[i] ? lift : 0.0f);
        fprintf(f, "%d %.9g\n", labels[i] ? 1 : 0, (double)scores[i]);
    }
    cr_assert_eq(fclose(f), 0);
}

Test(reference_eval, auc_and_ap_match_scikit_learn,
     .description = "AUC-ROC and average precision against scikit-learn 1.2's roc_auc_score "
                    "and average_precision_score on random scores with ties "
                    "(tests/reference/binary_sklearn.py)")
{
    static const struct { size_t n; unsigned levels; double pos_share; float lift; } cases[] = {
        { 7, 2, 0.5, 0.5f },      /* tiny, two score levels, positives tie negatives */
        { 200, 3, 0.3, 1.0f / 3 },   /* heavy ties */
        { 500, 20, 0.5, 0.15f },
        { 1000, 0, 0.1, 0.15f },  /* continuous scores, rare positives */
        { 1000, 5, 0.9, 0.2f },   /* mostly positive */
        { 64, 1, 0.5, 0.0f },     /* every score equal: AUC 1/2 */
    };
    enum { N_CASES = sizeof cases / sizeof cases[0] };
    weft_rng rng;
    weft_rng_seed(&rng, 2024);
    double auc[N_CASES], ap[N_CASES];
    char cmd[4096];
    int len = snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s", script_path("binary_sklearn.py"));
    for (size_t k = 0; k < N_CASES; k++) {
        float *s = calloc(cases[k].n, sizeof *s);
        bool *l = calloc(cases[k].n, sizeof *l);
        cr_assert(s && l);
        char name[32];
        snprintf(name, sizeof name, "case%zu.txt", k);
        write_binary_case(name, &rng, cases[k].n, cases[k].levels, cases[k].pos_share,
                          cases[k].lift, s, l);
        cr_assert_eq(weft_eval_auc(s, l, cases[k].n, &auc[k], NULL), WEFT_OK, "case %zu", k);
        cr_assert_eq(weft_eval_average_precision(s, l, cases[k].n, &ap[k], NULL), WEFT_OK);
        len += snprintf(cmd + len, sizeof cmd - (size_t)len, " %s", fixture_path(name));
        free(s);
        free(l);
    }
    FILE *py = popen(cmd, "r");
    cr_assert_not_null(py);
    for (size_t k = 0; k < N_CASES; k++) {
        double want_auc, want_ap;
        cr_assert_eq(fscanf(py, "%lf %lf", &want_auc, &want_ap), 2, "scikit-learn ended at %zu", k);
        cr_assert_float_eq(auc[k], want_auc, 1e-12, "case %zu: AUC weft %.17g, sklearn %.17g", k,
                           auc[k], want_auc);
        cr_assert_float_eq(ap[k], want_ap, 1e-12, "case %zu: AP weft %.17g, sklearn %.17g", k,
                           ap[k], want_ap);
    }
    cr_assert_eq(pclose(py), 0, "%s failed", cmd);
    cr_assert_float_eq(auc[N_CASES - 1], 0.5, 1e-15);
}

/*
 * Worked by hand. Five nodes 0..4, relations 0 and 1, no self-loops (exclude_self).
 * Known true triples: (0,0,1) (0,0,2) (3,0,1) (1,1,4). Test triples: (0,0,1) and (1,1,4).
 * rank = 1 + #higher + #tied / 2 over the candidates left after filtering.
 *
 * (0,0,?) tail scores [0.9 0.5 0.7 0.5 0.5], answer 1 (0.5): node 0 is the anchor (left
 *   out), node 2 is another known tail of (0,0) (filtered). Left: 3 and 4, both 0.5: no
 *   higher, two tied -> optimistic 1, pessimistic 3, rank 2.
 * (?,0,1) head scores [0.2 0.8 0.2 0.9 0.6], answer 0 (0.2): 1 is the anchor, 3 another
 *   known head of (?,0,1). Left: 2 (0.2, tied) and 4 (0.6, higher) -> 1 + 1 + 1/2 = 2.5.
 * (1,1,?) tail scores all 0.3, answer 4: 1 is the anchor. Left: 0, 2, 3, all tied ->
 *   1 + 0 + 3/2 = 2.5.
 * (?,1,4) head scores [0.1 0.9 0.4 0.4 0.0], answer 1 (0.9): 4 is the anchor. Left: 0, 2, 3,
 *   all lower -> rank 1.
 * Ranks 2, 2.5 (relation 0) and 2.5, 1 (relation 1).
 *   overall:    MRR (1/2 + 1/2.5 + 1/2.5 + 1) / 4 = 2.3 / 4 = 0.575, mean rank 8 / 4 = 2,
 *               Hits@1 1/4, Hits@3 1, Hits@10 1
 *   relation 0: MRR (0.5 + 0.4) / 2 = 0.45, mean rank 2.25, Hits@1 0
 *   relation 1: MRR (0.4 + 1) / 2 = 0.7, mean rank 1.75, Hits@1 1/2
 * Unfiltered, (0,0,?) would see node 2 (0.7) above its answer: rank 3 instead of 2.
 */
Test(reference_eval, worked_example_with_ties,
     .description = "filtered ranks with ties derived by hand in the comment above the test")
{
    weft_triple known[4] = { { 0, 0, 1 }, { 0, 0, 2 }, { 1, 1, 4 }, { 3, 0, 1 } };
    weft_triple test[2] = { { 0, 0, 1 }, { 1, 1, 4 } };
    float s[2][2][5][5] = { { { { 0 } } } };
    const float t001[5] = { 0.9f, 0.5f, 0.7f, 0.5f, 0.5f };
    const float h001[5] = { 0.2f, 0.8f, 0.2f, 0.9f, 0.6f };
    const float t114[5] = { 0.3f, 0.3f, 0.3f, 0.3f, 0.3f };
    const float h114[5] = { 0.1f, 0.9f, 0.4f, 0.4f, 0.0f };
    memcpy(s[0][0][0], t001, sizeof t001);   /* relation 0, tails, anchor 0 */
    memcpy(s[0][1][1], h001, sizeof h001);   /* relation 0, heads, anchor 1 */
    memcpy(s[1][0][1], t114, sizeof t114);   /* relation 1, tails, anchor 1 */
    memcpy(s[1][1][4], h114, sizeof h114);   /* relation 1, heads, anchor 4 */
    score_table tb = { 5, 2, &s[0][0][0][0] };
    weft_csr out = csr_of(known, 4, 5, false), in = csr_of(known, 4, 5, true);
    weft_eval_filter f = { &out, &in, true };
    double ranks[4];
    cr_assert_eq(weft_eval_ranks(test, 2, 5, true, &f, table_scores, &tb, 1, ranks, NULL), WEFT_OK);
    cr_assert_eq(ranks[0], 2.0);
    cr_assert_eq(ranks[1], 2.5);
    cr_assert_eq(ranks[2], 2.5);
    cr_assert_eq(ranks[3], 1.0);
    weft_rank_metrics all, rel[2];
    cr_assert_eq(weft_eval_ranking_by_relation(test, 2, 5, 2, true, &f, table_scores, &tb, 2,
                                               &all, rel, NULL), WEFT_OK);
    expect_metrics(&all, 4, 0.575, 2.0, 0.25, 1.0, 1.0, "overall");
    expect_metrics(&rel[0], 2, 0.45, 2.25, 0.0, 1.0, 1.0, "relation 0");
    expect_metrics(&rel[1], 2, 0.7, 1.75, 0.5, 1.0, 1.0, "relation 1");
    weft_eval_filter none = { NULL, NULL, true };
    cr_assert_eq(weft_eval_ranks(test, 1, 5, false, &none, table_scores, &tb, 1, ranks, NULL),
                 WEFT_OK);
    cr_assert_eq(ranks[0], 3.0);
    weft_csr_fini(&out);
    weft_csr_fini(&in);
}

/*
 * Worked by hand. Positives score 0.8, 0.5, 0.2; negatives 0.5, 0.3.
 * AUC: of the 3 x 2 pairs, 0.8 beats both (2), 0.5 ties one and beats 0.3 (1.5), 0.2 beats
 *   none (0): 3.5 / 6 = 7/12.
 * AP: thresholds from the top. >= 0.8: 1 of 1 positive, recall 1/3 -> 1/3 * 1.
 *   >= 0.5: 2 of 3 positive, recall step 1/3 -> 1/3 * 2/3. >= 0.3: no new positive.
 *   >= 0.2: 3 of 5, recall step 1/3 -> 1/3 * 3/5. AP = 1/3 + 2/9 + 1/5 = 34/45.
 */
Test(reference_eval, worked_example_auc_and_ap_with_a_tie,
     .description = "AUC-ROC and average precision derived by hand in the comment above")
{
    float s[5] = { 0.8f, 0.5f, 0.2f, 0.5f, 0.3f };
    bool l[5] = { true, true, true, false, false };
    double auc, ap;
    cr_assert_eq(weft_eval_auc(s, l, 5, &auc, NULL), WEFT_OK);
    cr_assert_eq(weft_eval_average_precision(s, l, 5, &ap, NULL), WEFT_OK);
    cr_assert_float_eq(auc, 7.0 / 12.0, 1e-15);
    cr_assert_float_eq(ap, 34.0 / 45.0, 1e-15);
}
