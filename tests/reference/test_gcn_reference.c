/* GCN layers (core/model_gcn.c) on Zachary's karate club (tests/data/karate, provenance in
 * tests/data/README.md) against numpy: fixed weights, evaluation mode (no dropout), the
 * forward output and the last-layer attributions recomputed from the edge file by
 * tests/reference/gcn_numpy.py with the propagation rule of Kipf & Welling 2017 (ICLR),
 * eq. (2). The script runs under /usr/bin/python3. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../unit/fixture.h"
#include "weft/features.h"
#include "weft/graph.h"
#include "weft/model_gcn.h"
#include "weft/rng.h"
#include "weft/sparse.h"

TestSuite(gcn_reference, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* float32 forward against float64 numpy: a few float roundings per term, some 40 terms. */
#define GCN_TOL 1e-5

typedef enum input_kind {
    INPUT_IDENTITY,    /* one-hot features: X = I (n, n), built here */
    INPUT_PATTERN,     /* a sparse pattern written to a file, read by weft_features_load */
    INPUT_EMBEDDING    /* a dense (n, 6) embedding: has_embedding */
} input_kind;

typedef struct gcn_case {
    weft_sparse_norm norm;
    size_t n_layers;          /* 2 or 3 */
    weft_gcn_act act;
    bool has_bias;
    input_kind input;
    bool row_normalise;       /* INPUT_PATTERN: weft_features_load divides rows by their sum */
    bool attribute;           /* also check weft_gcn_attribute on every node */
} gcn_case;

/* What one case built and computed. */
typedef struct gcn_run {
    weft_gcn_shape shape;
    weft_gcn_params p;
    weft_gcn_cache c;
    weft_sparse adj, adj_t, x, x_t;
    uint64_t *x_t_from;
} gcn_run;

enum { PATTERN_WIDTH = 12, EMBEDDING_WIDTH = 6 };

static weft_graph *karate_load(void)
{
    weft_graph *g = NULL;
    weft_error err;
    cr_assert_eq(weft_graph_new(0, &g, &err), WEFT_OK);
    cr_assert_eq(weft_graph_load_edges(g, fixture_beside(__FILE__, "../data/karate/edges.tsv"), &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(g->nodes.n, 34, "Zachary 1977 counts 34 members");
    return g;
}

static void write_node_names(const weft_graph *g)
{
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    FILE *f = fopen(fixture_path("nodes.txt"), "w");
    cr_assert_not_null(f);
    for (uint32_t v = 0; v < nodes.n; v++)
        fprintf(f, "%s\n", weft_names_get(&nodes, v, NULL));
    cr_assert_eq(fclose(f), 0);
}

static void write_floats(const char *name, const float *x, size_t n)
{
    fixture_write(name, x, n * sizeof *x);
}

/* X = I, and the same matrix as a features file "name<TAB>v" for the script. */
static void build_identity(weft_sparse *x, const weft_graph *g, size_t k)
{
    size_t n = g->nodes.n;
    x->n_rows = x->n_cols = n;
    x->off = calloc(n + 1, sizeof *x->off);
    x->col = calloc(n, sizeof *x->col);
    x->val = calloc(n, sizeof *x->val);
    cr_assert(x->off && x->col && x->val);
    char name[64];
    snprintf(name, sizeof name, "c%zu_x.tsv", k);
    FILE *f = fopen(fixture_path(name), "w");
    cr_assert_not_null(f);
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    for (size_t v = 0; v < n; v++) {
        x->off[v + 1] = v + 1;
        x->col[v] = (uint32_t)v;
        x->val[v] = 1.0f;
        fprintf(f, "%s\t%zu\n", weft_names_get(&nodes, (uint32_t)v, NULL), v);
    }
    cr_assert_eq(fclose(f), 0);
}

/*
 * A deterministic sparse pattern over PATTERN_WIDTH columns: node v lists 1 + v % 4 indices
 * (v * 5 + 7 j) % 12, j = 0, 1, ... (distinct because 7 j mod 12 is 0, 7, 2, 9), unsorted,
 * with values 0.5, 0.75, 1 (written without ":value"), 1.25. Nodes with v % 9 == 4 get no line,
 * so their rows are zero: 4, 13, 22, 31.
 */
static void build_pattern(weft_sparse *x, const weft_graph *g, size_t k, bool row_normalise)
{
    static const char *const value[4] = { ":0.5", ":0.75", "", ":1.25" };
    char name[64];
    snprintf(name, sizeof name, "c%zu_x.tsv", k);
    FILE *f = fopen(fixture_path(name), "w");
    cr_assert_not_null(f);
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    for (size_t v = 0; v < nodes.n; v++) {
        if (v % 9 == 4)
            continue;
        fprintf(f, "%s\t", weft_names_get(&nodes, (uint32_t)v, NULL));
        for (size_t j = 0; j <= v % 4; j++)
            fprintf(f, "%s%zu%s", j ? " " : "", (v * 5 + 7 * j) % PATTERN_WIDTH,
                    value[(v + j) % 4]);
        fputc('\n', f);
    }
    cr_assert_eq(fclose(f), 0);
    weft_features_stats st;
    weft_error err;
    cr_assert_eq(weft_features_load(fixture_path(name), &nodes, row_normalise, x, &st, &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(x->n_rows, nodes.n);
    cr_assert_eq(x->n_cols, PATTERN_WIDTH, "max index 11 appears (v = 7 lists 35 % 12)");
    cr_assert_eq(st.n_missing, 4, "nodes 4, 13, 22, 31 have no line");
}

/* Weights uniform in +-1.5 / sqrt(fan-in), biases in +-0.5, an embedding in +-1: values
 * that keep sigmoid and relu away from saturation and from all-zero layers. */
static void fill_params(gcn_run *r, uint64_t seed)
{
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    const weft_gcn_shape *s = &r->shape;
    if (r->p.embedding)
        for (size_t i = 0; i < s->n_nodes * s->dims[0]; i++)
            r->p.embedding[i] = 2.0f * weft_rng_float(&rng) - 1.0f;
    for (size_t l = 0; l < s->n_layers; l++) {
        float scale = 1.5f / sqrtf((float)s->dims[l]);
        for (size_t i = 0; i < s->dims[l] * s->dims[l + 1]; i++)
            r->p.w[l][i] = scale * (2.0f * weft_rng_float(&rng) - 1.0f);
        if (s->has_bias)
            for (size_t i = 0; i < s->dims[l + 1]; i++)
                r->p.b[l][i] = weft_rng_float(&rng) - 0.5f;
    }
}

static void write_case(const gcn_run *r, const gcn_case *cs, size_t k)
{
    const weft_gcn_shape *s = &r->shape;
    char name[64];
    snprintf(name, sizeof name, "c%zu_meta.txt", k);
    FILE *f = fopen(fixture_path(name), "w");
    cr_assert_not_null(f);
    fprintf(f, "%zu %s %s %d %s %d %d\n", s->n_layers, weft_sparse_norm_name(cs->norm),
            weft_gcn_act_name(s->act), s->has_bias, s->has_embedding ? "embedding" : "features",
            cs->row_normalise, cs->attribute);
    for (size_t l = 0; l <= s->n_layers; l++)
        fprintf(f, "%s%zu", l ? " " : "", s->dims[l]);
    fputc('\n', f);
    cr_assert_eq(fclose(f), 0);
    if (s->has_embedding) {
        snprintf(name, sizeof name, "c%zu_emb.f32", k);
        write_floats(name, r->p.embedding, s->n_nodes * s->dims[0]);
    }
    for (size_t l = 0; l < s->n_layers; l++) {
        snprintf(name, sizeof name, "c%zu_w%zu.f32", k, l);
        write_floats(name, r->p.w[l], s->dims[l] * s->dims[l + 1]);
        if (s->has_bias) {
            snprintf(name, sizeof name, "c%zu_b%zu.f32", k, l);
            write_floats(name, r->p.b[l], s->dims[l + 1]);
        }
    }
}

/* Build case @p k, run the forward pass in evaluation mode and write its inputs. */
static void run_case(gcn_run *r, const gcn_case *cs, const weft_graph *g, size_t k)
{
    weft_error err;
    size_t n = g->nodes.n, n_one_way = 0;
    cr_assert_eq(weft_sparse_adjacency(g->edges, g->n_edges, n, cs->norm, true, &r->adj,
                                       &n_one_way, &err), WEFT_OK, "%s", err.msg);
    /* Read as directed, edges.tsv lists each of its 78 undirected edges once. */
    cr_assert_eq(n_one_way, 78, "case %zu: %zu pairs linked one way", k, n_one_way);
    cr_assert_eq(weft_sparse_transpose(&r->adj, &r->adj_t, NULL, &err), WEFT_OK, "%s", err.msg);

    weft_gcn_shape *s = &r->shape;
    *s = (weft_gcn_shape){ .n_nodes = n, .n_layers = cs->n_layers, .has_bias = cs->has_bias,
                           .act = cs->act, .has_embedding = cs->input == INPUT_EMBEDDING };
    if (cs->input == INPUT_IDENTITY)
        build_identity(&r->x, g, k);
    else if (cs->input == INPUT_PATTERN)
        build_pattern(&r->x, g, k, cs->row_normalise);
    s->dims[0] = cs->input == INPUT_EMBEDDING ? EMBEDDING_WIDTH : r->x.n_cols;
    s->dims[1] = 8;
    s->dims[2] = cs->n_layers == 2 ? 3 : 5;
    s->dims[3] = 3;
    cr_assert_eq(weft_gcn_shape_check(s, &err), WEFT_OK, "%s", err.msg);
    if (!s->has_embedding)
        cr_assert_eq(weft_sparse_transpose(&r->x, &r->x_t, &r->x_t_from, &err), WEFT_OK, "%s",
                     err.msg);

    cr_assert_eq(weft_gcn_params_init(&r->p, s, &err), WEFT_OK, "%s", err.msg);
    fill_params(r, 1000 + k);
    const weft_sparse *x = s->has_embedding ? NULL : &r->x;
    cr_assert_eq(weft_gcn_cache_init(&r->c, s, x, &err), WEFT_OK, "%s", err.msg);
    weft_gcn_input in = { &r->adj, &r->adj_t, x, s->has_embedding ? NULL : &r->x_t,
                          r->x_t_from };
    /* A dropout rate with no generator: evaluation, so it must not apply. Threads vary; the
     * header promises the same sums whatever their number. */
    weft_gcn_forward(&r->c, s, &r->p, &in, 0.5f, NULL, 1 + 2 * (k % 2));
    write_case(r, cs, k);
}

static void run_fini(gcn_run *r)
{
    weft_gcn_cache_fini(&r->c);
    weft_gcn_params_fini(&r->p);
    weft_sparse_fini(&r->adj);
    weft_sparse_fini(&r->adj_t);
    weft_sparse_fini(&r->x);
    weft_sparse_fini(&r->x_t);
    free(r->x_t_from);
}

static bool close_enough(double got, double want)
{
    return fabs(got - want) <= GCN_TOL * fmax(1.0, fabs(want));
}

static const char *case_name(const gcn_case *cs)
{
    static char buf[128];
    static const char *const input[] = { "one-hot features", "pattern features", "embedding" };
    snprintf(buf, sizeof buf, "%s, %zu layers, %s, %s, %s%s", weft_sparse_norm_name(cs->norm),
             cs->n_layers, weft_gcn_act_name(cs->act), cs->has_bias ? "bias" : "no bias",
             input[cs->input], cs->input == INPUT_PATTERN && cs->row_normalise ?
             " (row-normalised)" : "");
    return buf;
}

/* Read node v's attributions from the script and check weft_gcn_attribute against them,
 * against the forward output and against their own sum. */
static void check_attribution(FILE *py, const gcn_run *r, const gcn_case *cs, size_t k,
                              const double *want_out, float *contrib)
{
    const weft_gcn_shape *s = &r->shape;
    size_t last = s->n_layers - 1, d = s->dims[s->n_layers];
    const float *fwd = r->c.h[s->n_layers];
    cr_assert_leq(d, 8, "out[] below holds 8 columns");
    for (uint32_t v = 0; v < s->n_nodes; v++) {
        unsigned pv;
        size_t want_count;
        cr_assert_eq(fscanf(py, " row %u %zu", &pv, &want_count), 2, "case %zu: numpy ended "
                     "before node %u's attribution", k, v);
        cr_assert_eq(pv, v);
        float out[8];
        size_t count = weft_gcn_attribute(contrib, out, r->adj.off, r->adj.col, r->adj.val,
                                          r->c.u[last], s->has_bias ? r->p.b[last] : NULL, d, v);
        cr_assert_eq(count, want_count, "case %zu (%s): node %u has %zu terms, numpy %zu", k,
                     case_name(cs), v, count, want_count);
        for (size_t j = 0; j < d; j++) {
            double sum = s->has_bias ? r->p.b[last][j] : 0.0;
            for (size_t e = 0; e < count; e++)
                sum += contrib[e * d + j];
            cr_assert(close_enough(out[j], sum), "case %zu: node %u column %zu: out %.9g, "
                      "terms plus bias %.9g", k, v, j, out[j], sum);
            cr_assert(close_enough(out[j], fwd[(size_t)v * d + j]), "case %zu: node %u column "
                      "%zu: attribution out %.9g, forward %.9g", k, v, j, out[j],
                      fwd[(size_t)v * d + j]);
            cr_assert(close_enough(out[j], want_out[(size_t)v * d + j]));
        }
        for (size_t e = 0; e < count; e++) {
            unsigned u;
            cr_assert_eq(fscanf(py, "%u", &u), 1);
            uint32_t col = r->adj.col[r->adj.off[v] + e];
            cr_assert_eq(col, u, "case %zu: node %u term %zu is neighbour %u, numpy %u", k, v,
                         e, col, u);
            for (size_t j = 0; j < d; j++) {
                double want;
                cr_assert_eq(fscanf(py, "%lf", &want), 1);
                cr_assert(close_enough(contrib[e * d + j], want), "case %zu (%s): node %u, "
                          "neighbour %u, column %zu: weft %.9g, numpy A'[v,u] (H W)[u] %.9g",
                          k, case_name(cs), v, u, j, contrib[e * d + j], want);
            }
        }
    }
}

/* Run every case, then the script once over all of them, and compare. */
static void check_cases(const gcn_case *cases, size_t n_cases)
{
    weft_graph *g = karate_load();
    write_node_names(g);
    gcn_run *runs = calloc(n_cases, sizeof *runs);
    cr_assert_not_null(runs);
    for (size_t k = 0; k < n_cases; k++)
        run_case(&runs[k], &cases[k], g, k);

    char script[1024], cmd[4096];   /* fixture_beside(__FILE__, ) answers in one static buffer */
    snprintf(script, sizeof script, "%s", fixture_beside(__FILE__, "gcn_numpy.py"));
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s %s %s %zu", script,
             fixture_beside(__FILE__, "../data/karate/edges.tsv"), fixture_dir, n_cases);
    FILE *py = fixture_run_script(cmd);
    size_t n = g->nodes.n;
    double *want = calloc(n * 8, sizeof *want);
    float *contrib = calloc(n * 8, sizeof *contrib);
    cr_assert(want && contrib);
    for (size_t k = 0; k < n_cases; k++) {
        const weft_gcn_shape *s = &runs[k].shape;
        size_t d = s->dims[s->n_layers], pk;
        const float *got = runs[k].c.h[s->n_layers];
        cr_assert_eq(fscanf(py, " case %zu", &pk), 1, "numpy ended before case %zu", k);
        cr_assert_eq(pk, k);
        for (uint32_t v = 0; v < n; v++) {
            unsigned pv;
            cr_assert_eq(fscanf(py, " out %u", &pv), 1, "case %zu: numpy ended at node %u", k, v);
            cr_assert_eq(pv, v);
            for (size_t j = 0; j < d; j++) {
                cr_assert_eq(fscanf(py, "%lf", &want[v * d + j]), 1);
                cr_assert(close_enough(got[v * d + j], want[v * d + j]),
                          "case %zu (%s): output[%u][%zu] weft %.9g, numpy %.9g", k,
                          case_name(&cases[k]), v, j, got[v * d + j], want[v * d + j]);
            }
        }
        if (cases[k].attribute)
            check_attribution(py, &runs[k], &cases[k], k, want, contrib);
    }
    cr_assert_eq(fclose(py), 0);
    for (size_t k = 0; k < n_cases; k++)
        run_fini(&runs[k]);
    free(runs);
    free(want);
    free(contrib);
    weft_graph_free(g);
}

/* Layers {2, 3} x activations {relu, sigmoid, linear} x inputs {one-hot, embedding}. */
static void check_grid(weft_sparse_norm norm)
{
    static const weft_gcn_act acts[3] = { WEFT_GCN_ACT_RELU, WEFT_GCN_ACT_SIGMOID,
                                          WEFT_GCN_ACT_LINEAR };
    gcn_case cases[12];
    size_t k = 0;
    for (size_t layers = 2; layers <= 3; layers++)
        for (size_t a = 0; a < 3; a++)
            for (int emb = 0; emb <= 1; emb++)
                cases[k++] = (gcn_case){ norm, layers, acts[a], true,
                                         emb ? INPUT_EMBEDDING : INPUT_IDENTITY, false, false };
    check_cases(cases, k);
}

Test(gcn_reference, forward_sym_norm_matches_numpy,
     .description = "karate club (Zachary 1977), A' = D^-1/2 (A + I) D^-1/2 (Kipf & Welling "
                    "2017, eq. 2): 2 and 3 layers, relu / sigmoid / linear, bias, one-hot "
                    "features and a dense embedding, against numpy (tests/reference/"
                    "gcn_numpy.py) to 1e-5")
{
    check_grid(WEFT_SPARSE_NORM_SYM);
}

Test(gcn_reference, forward_row_norm_matches_numpy,
     .description = "the same grid with A' = D^-1 (A + I), the mean over self and neighbours, "
                    "against numpy (tests/reference/gcn_numpy.py) to 1e-5")
{
    check_grid(WEFT_SPARSE_NORM_ROW);
}

Test(gcn_reference, forward_file_features_match_numpy,
     .description = "sparse features read from a file (some rows missing, optionally "
                    "row-normalised as Kipf & Welling 2017 do), with and without bias, "
                    "against numpy parsing the same file (tests/reference/gcn_numpy.py)")
{
    static const gcn_case cases[] = {
        { WEFT_SPARSE_NORM_SYM, 2, WEFT_GCN_ACT_RELU, false, INPUT_PATTERN, true, false },
        { WEFT_SPARSE_NORM_ROW, 3, WEFT_GCN_ACT_SIGMOID, true, INPUT_PATTERN, false, false },
        { WEFT_SPARSE_NORM_SYM, 3, WEFT_GCN_ACT_LINEAR, false, INPUT_PATTERN, false, false },
        { WEFT_SPARSE_NORM_ROW, 2, WEFT_GCN_ACT_RELU, true, INPUT_PATTERN, true, false },
    };
    check_cases(cases, sizeof cases / sizeof cases[0]);
}

Test(gcn_reference, attribution_matches_numpy,
     .description = "weft_gcn_attribute on every karate node: one term per entry of A' row v, "
                    "each A'[v,u] (H W)[u] as numpy computes it (tests/reference/"
                    "gcn_numpy.py), summing with the bias to the forward output")
{
    static const gcn_case cases[] = {
        { WEFT_SPARSE_NORM_SYM, 2, WEFT_GCN_ACT_RELU, true, INPUT_IDENTITY, false, true },
        { WEFT_SPARSE_NORM_ROW, 3, WEFT_GCN_ACT_SIGMOID, true, INPUT_EMBEDDING, false, true },
        { WEFT_SPARSE_NORM_SYM, 3, WEFT_GCN_ACT_LINEAR, false, INPUT_PATTERN, true, true },
    };
    check_cases(cases, sizeof cases / sizeof cases[0]);
}
