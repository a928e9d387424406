/* Label propagation (core/baseline.c) on Cora with the Planetoid split (tests/data/cora,
 * provenance in tests/data/README.md) against scikit-learn 1.2's LabelPropagation, run by
 * tests/reference/label_prop_sklearn.py under /usr/bin/python3. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../unit/fixture.h"
#include "weft/baseline.h"
#include "weft/graph.h"
#include "weft/labels.h"
#include "weft/sparse.h"

TestSuite(label_prop_reference, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* scikit-learn's defaults for LabelPropagation (max_iter=1000, tol=1e-3). */
enum { LP_MAX_ITER = 1000 };
#define LP_TOL 1e-3

/* float32 probabilities against float64 scikit-learn after some thousand steps (they agreed
 * within 1e-6 when this test was written). */
#define LP_PROB_TOL 1e-5

/* Cora as weft reads it: the graph, its labels and the split. */
typedef struct cora {
    weft_graph *g;
    weft_labels labels;
    uint8_t *part;
} cora;

static void cora_load(cora *c)
{
    weft_error err;
    char path[1024];
    cr_assert_eq(weft_graph_new(WEFT_GRAPH_UNDIRECTED, &c->g, &err), WEFT_OK);
    snprintf(path, sizeof path, "%s", fixture_beside(__FILE__, "../data/cora/edges.tsv"));
    cr_assert_eq(weft_graph_load_edges(c->g, path, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_graph_finalize(c->g, &err), WEFT_OK, "%s", err.msg);
    weft_names_view nodes = weft_names_as_view(&c->g->nodes);
    cr_assert_eq(nodes.n, 2708, "Sen et al. 2008 count 2,708 papers");
    snprintf(path, sizeof path, "%s", fixture_beside(__FILE__, "../data/cora/labels.tsv"));
    cr_assert_eq(weft_labels_load(path, &nodes, &c->labels, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(c->labels.classes.n, 7);
    c->part = calloc(nodes.n, sizeof *c->part);
    cr_assert_not_null(c->part);
    snprintf(path, sizeof path, "%s", fixture_beside(__FILE__, "../data/cora/split.tsv"));
    cr_assert_eq(weft_labels_read_split(path, &nodes, &c->labels, c->part, &err), WEFT_OK, "%s",
                 err.msg);
}

static void cora_fini(cora *c)
{
    weft_graph_free(c->g);
    weft_labels_fini(&c->labels);
    free(c->part);
}

/* nodes.txt (names in id order), train.txt and test.txt ("id class" lines) for the script. */
static void write_inputs(const cora *c)
{
    weft_names_view nodes = weft_names_as_view(&c->g->nodes);
    FILE *fn = fopen(fixture_path("nodes.txt"), "w");
    cr_assert_not_null(fn);
    for (uint32_t v = 0; v < nodes.n; v++)
        fprintf(fn, "%s\n", weft_names_get(&nodes, v, NULL));
    cr_assert_eq(fclose(fn), 0);
    static const char *const file[2] = { "train.txt", "test.txt" };
    static const uint8_t which[2] = { WEFT_LABEL_TRAIN, WEFT_LABEL_TEST };
    size_t count[2] = { 0, 0 };
    for (size_t i = 0; i < 2; i++) {
        FILE *f = fopen(fixture_path(file[i]), "w");
        cr_assert_not_null(f);
        for (uint32_t v = 0; v < nodes.n; v++)
            if (c->part[v] == which[i]) {
                fprintf(f, "%u %d\n", v, c->labels.y[v]);
                count[i]++;
            }
        cr_assert_eq(fclose(f), 0);
    }
    /* The Planetoid split: 20 training nodes per class, 1,000 test nodes. */
    cr_assert_eq(count[0], 140);
    cr_assert_eq(count[1], 1000);
}

/* Largest and second largest of @p p[0..n). */
static void top_two(const double *p, size_t n, size_t *best, double *gap)
{
    size_t b = 0;
    for (size_t j = 1; j < n; j++)
        if (p[j] > p[b])
            b = j;
    double second = -1.0;
    for (size_t j = 0; j < n; j++)
        if (j != b && p[j] > second)
            second = p[j];
    *best = b;
    *gap = p[b] - second;
}

Test(label_prop_reference, cora_matches_scikit_learn,
     .description = "label propagation from the 140 Planetoid training nodes of Cora against "
                    "scikit-learn 1.2 LabelPropagation (dense 0/1 adjacency kernel, max_iter "
                    "1000, tol 1e-3; tests/reference/label_prop_sklearn.py): distributions of "
                    "reached nodes to 1e-4, their argmax, step count, unreached nodes at the "
                    "training class shares; test accuracy in a sanity band around the 68.0% "
                    "Kipf & Welling 2017 (Table 2) cite for label propagation",
     .timeout = 120)
{
    cora c = { 0 };
    cora_load(&c);
    weft_error err;
    size_t n = c.g->nodes.n, k = c.labels.classes.n, n_iter = 0;
    weft_sparse adj = { 0 };
    cr_assert_eq(weft_sparse_adjacency(c.g->edges, c.g->n_edges, n, WEFT_SPARSE_NORM_NONE, false,
                                       &adj, NULL, &err), WEFT_OK, "%s", err.msg);
    float *prob = calloc(n * k, sizeof *prob);
    cr_assert_not_null(prob);
    cr_assert_eq(weft_baseline_label_propagation(&adj, c.labels.y, c.part, k, LP_MAX_ITER, LP_TOL,
                                                 prob, &n_iter, &err), WEFT_OK, "%s", err.msg);
    write_inputs(&c);

    char script[1024], cmd[4096];   /* fixture_beside(__FILE__, ) answers in one static buffer */
    snprintf(script, sizeof script, "%s", fixture_beside(__FILE__, "label_prop_sklearn.py"));
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s %s %s %d %g", script,
             fixture_beside(__FILE__, "../data/cora/edges.tsv"), fixture_dir, LP_MAX_ITER, LP_TOL);
    FILE *py = fixture_run_script(cmd);
    size_t want_iter;
    cr_assert_eq(fscanf(py, " iter %zu", &want_iter), 1, "no output from %s", cmd);
    /* The stopping sum is taken over float32 values here, float64 there: the step at which it
     * crosses tol may move by one. */
    cr_assert(n_iter + 1 >= want_iter && n_iter <= want_iter + 1, "weft took %zu steps, "
              "scikit-learn %zu", n_iter, want_iter);
    double freq[16], want[16];
    cr_assert_leq(k, 16);
    cr_assert_eq(fscanf(py, " freq %lf", &freq[0]), 1);
    for (size_t j = 1; j < k; j++)
        cr_assert_eq(fscanf(py, "%lf", &freq[j]), 1);

    weft_names_view nodes = weft_names_as_view(&c.g->nodes);
    size_t n_reached = 0, n_near_tie = 0;
    for (uint32_t v = 0; v < n; v++) {
        unsigned pv;
        int reached;
        cr_assert_eq(fscanf(py, " node %u %d", &pv, &reached), 2, "scikit-learn ended at %u", v);
        cr_assert_eq(pv, v);
        for (size_t j = 0; j < k; j++)
            cr_assert_eq(fscanf(py, "%lf", &want[j]), 1);
        const float *got = prob + (size_t)v * k;
        if (!reached) {
            /* No training label reaches v: the header promises the training class shares. */
            for (size_t j = 0; j < k; j++)
                cr_assert_float_eq(got[j], freq[j], 1e-6, "unreached node %u class %zu: weft "
                                   "%.9g, training share %.9g", v, j, got[j], freq[j]);
            continue;
        }
        n_reached++;
        for (size_t j = 0; j < k; j++)
            cr_assert(fabs(got[j] - want[j]) <= LP_PROB_TOL, "node %u ('%s') class %zu: weft "
                      "%.9g, scikit-learn %.9g (weft %zu steps, scikit-learn %zu)", v,
                      weft_names_get(&nodes, v, NULL), j, got[j],
                      want[j], n_iter, want_iter);
        size_t best;
        double gap;
        top_two(want, k, &best, &gap);
        /* Classes within the tolerance of each other may swap order: either is right. */
        if (gap <= 2 * LP_PROB_TOL) {
            n_near_tie++;
            continue;
        }
        size_t mine = 0;
        for (size_t j = 1; j < k; j++)
            if (got[j] > got[mine])
                mine = j;
        cr_assert_eq(mine, best, "node %u: weft predicts class %zu, scikit-learn %zu", v, mine,
                     best);
    }
    double want_acc;
    cr_assert_eq(fscanf(py, " test_accuracy %lf", &want_acc), 1);
    cr_assert_eq(fclose(py), 0);
    /* Cora has 78 connected components; some hold no training node. */
    cr_assert_gt(n_reached, 2000, "only %zu nodes reached", n_reached);
    cr_assert_lt(n_reached, n);

    size_t correct = 0, n_test = 0;
    for (uint32_t v = 0; v < n; v++) {
        if (c.part[v] != WEFT_LABEL_TEST)
            continue;
        n_test++;
        size_t mine = 0;
        for (size_t j = 1; j < k; j++)
            if (prob[(size_t)v * k + j] > prob[(size_t)v * k + mine])
                mine = j;
        correct += (int32_t)mine == c.labels.y[v];
    }
    double acc = (double)correct / (double)n_test;
    cr_log_info("label propagation on Cora: test accuracy %.3f (scikit-learn %.3f), %zu steps, "
                "%zu of %zu nodes reached, %zu near ties", acc, want_acc, n_iter, n_reached, n,
                n_near_tie);
    /* Sanity band, not a reproduction: Kipf & Welling 2017, Table 2 (figures taken from Yang
     * et al. 2016), list 68.0% for label propagation (Zhu, Ghahramani & Lafferty 2003) on
     * this split; scikit-learn's form reaches 74.9% here. Within 8 points of 68.0: a broken
     * propagation falls far outside (one class for every node scores at most 31.9%, the
     * share of the largest class among the 1,000 test nodes). */
    cr_assert(acc >= 0.60 && acc <= 0.76, "test accuracy %.3f outside the sanity band "
              "[0.60, 0.76] around Kipf & Welling's 68.0%%", acc);
    /* Unreached test nodes: scikit-learn takes the argmax of a zero row (class 0), weft of
     * equal shares (class 0 too, 20 training nodes per class); near ties may swap a few. */
    cr_assert(fabs(acc - want_acc) <= 0.005, "test accuracy weft %.3f, scikit-learn %.3f", acc,
              want_acc);
    free(prob);
    weft_sparse_fini(&adj);
    cora_fini(&c);
}
