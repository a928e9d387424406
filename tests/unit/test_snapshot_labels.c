/* The label model in a snapshot (core/snapshot.c): weft_snapshot_put_labels then
 * weft_snapshot_label_view gives back what was put; a node table shared with a link model;
 * a GCN trained on Zachary's karate club (tests/data/karate) whose stored adjacency matches
 * D^-1/2 (A + I) D^-1/2 computed here from the edge list, and whose stored messages and bias
 * reproduce its stored probabilities; and every inconsistency between the blobs and the
 * manifest is refused as corrupt. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fixture.h"
#include "weft/graph.h"
#include "weft/labels.h"
#include "weft/model_gcn.h"
#include "weft/snapshot.h"
#include "weft/sparse.h"
#include "weft/store.h"
#include "weft/train_gcn.h"

TestSuite(snapshot_labels, .init = fixture_dir_create, .fini = fixture_dir_remove);

enum { N = 5, C = 3, HIDDEN = 4, IN = 6 };

/* A path a-b-c-d plus e joined to b: rows of one to three neighbours. */
static const char *const edge_pairs[][2] = { { "a", "b" }, { "b", "c" }, { "c", "d" },
                                             { "b", "e" } };
static const char *const class_names[C] = { "red", "green", "blue" };
/* a red (train), c blue (valid), e green (test); b and d unlabelled. */
static const int32_t labels_y[N] = { 0, -1, 2, -1, 1 };
static const uint8_t labels_part[N] = { WEFT_LABEL_TRAIN, WEFT_LABEL_NONE, WEFT_LABEL_VALID,
                                        WEFT_LABEL_NONE, WEFT_LABEL_TEST };

typedef struct fixture {
    weft_graph *g;
    weft_names classes;
    weft_sparse adj;
    weft_gcn_trained t;
} fixture;

static weft_graph *graph_of(const char *const (*pairs)[2], size_t m)
{
    weft_graph *g = NULL;
    weft_error err;
    cr_assert_eq(weft_graph_new(WEFT_GRAPH_UNDIRECTED, &g, &err), WEFT_OK);
    for (size_t i = 0; i < m; i++)
        cr_assert_eq(weft_graph_add_edge(g, pairs[i][0], strlen(pairs[i][0]), "link", 4,
                                         pairs[i][1], strlen(pairs[i][1]), &err),
                     WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK, "%s", err.msg);
    return g;
}

static void classes_of(weft_names *t, const char *const *names, size_t n)
{
    weft_error err;
    cr_assert_eq(weft_names_init(t, &err), WEFT_OK);
    for (size_t i = 0; i < n; i++) {
        uint32_t id;
        cr_assert_eq(weft_names_intern(t, names[i], strlen(names[i]), &id, NULL, &err), WEFT_OK);
        cr_assert_eq(id, i);
    }
}

/* A made-up trained model: distinct values everywhere, probabilities that are rows of a
 * softmax, a bias only with @p has_bias. */
static void fixture_init(fixture *f, bool has_bias)
{
    memset(f, 0, sizeof *f);
    weft_error err;
    f->g = graph_of(edge_pairs, sizeof edge_pairs / sizeof edge_pairs[0]);
    cr_assert_eq(f->g->nodes.n, N);
    classes_of(&f->classes, class_names, C);
    cr_assert_eq(weft_sparse_adjacency(f->g->edges, f->g->n_edges, N, WEFT_SPARSE_NORM_SYM, true,
                                       &f->adj, NULL, &err),
                 WEFT_OK, "%s", err.msg);
    weft_gcn_shape *s = &f->t.shape;
    *s = (weft_gcn_shape){ .n_nodes = N, .n_layers = 2, .dims = { IN, HIDDEN, C },
                           .has_embedding = false, .has_bias = has_bias,
                           .act = WEFT_GCN_ACT_RELU };
    cr_assert_eq(weft_gcn_params_init(&f->t.params, s, &err), WEFT_OK, "%s", err.msg);
    if (has_bias)
        for (size_t j = 0; j < C; j++)
            f->t.params.b[1][j] = 0.25f * (float)j - 0.3f;
    f->t.output = calloc(N * C, sizeof *f->t.output);
    f->t.message = calloc(N * C, sizeof *f->t.message);
    cr_assert(f->t.output && f->t.message);
    for (size_t v = 0; v < N; v++) {
        double z[C], sum = 0;
        for (size_t j = 0; j < C; j++) {
            f->t.message[v * C + j] = (float)v * 0.5f - (float)j * 0.75f + 0.125f;
            z[j] = exp(0.3 * (double)(v * C + j) - 1.0);
            sum += z[j];
        }
        for (size_t j = 0; j < C; j++)
            f->t.output[v * C + j] = (float)(z[j] / sum);
    }
}

static void fixture_fini(fixture *f)
{
    weft_graph_free(f->g);
    weft_names_fini(&f->classes);
    weft_sparse_fini(&f->adj);
    weft_gcn_trained_fini(&f->t);
}

static weft_store *store_create(void)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK,
                 "%s", err.msg);
    return s;
}

/* put_labels of @p f into a new live snapshot; @return its version. */
static uint64_t store_labels(weft_store *s, const fixture *f)
{
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK, "%s", err.msg);
    json_t *m = json_object();
    cr_assert_eq(weft_snapshot_put_labels(w, m, f->g, &f->classes, &f->t, WEFT_SPARSE_NORM_SYM,
                                          &f->adj, labels_y, labels_part, &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_writer_commit(w, m, true, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(m);
    return version;
}

static weft_snapshot *open_version(weft_store *s, uint64_t version)
{
    weft_snapshot *snap = NULL;
    weft_error err;
    cr_assert_eq(weft_snapshot_open(s, version, &snap, &err), WEFT_OK, "%s", err.msg);
    return snap;
}

static void check_names(const weft_names_view *v, const weft_names *want)
{
    cr_assert_eq(v->n, want->n);
    weft_names_view w = weft_names_as_view(want);
    for (uint32_t i = 0; i < v->n; i++) {
        size_t len = 0, want_len = 0;
        const char *got = weft_names_get(v, i, &len);
        const char *exp = weft_names_get(&w, i, &want_len);
        cr_assert(len == want_len && !memcmp(got, exp, len), "name %u: '%s', want '%s'", i, got,
                  exp);
        uint32_t id;
        cr_assert(weft_names_find(v, exp, want_len, &id) && id == i);
    }
}

static void check_round_trip(bool has_bias)
{
    fixture f;
    fixture_init(&f, has_bias);
    weft_store *s = store_create();
    uint64_t version = store_labels(s, &f);
    weft_snapshot *snap = open_version(s, version);
    weft_label_view v;
    weft_error err;
    cr_assert_eq(weft_snapshot_label_view(snap, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert(v.n_nodes == N && v.n_classes == C);
    check_names(&v.nodes, &f.g->nodes);
    check_names(&v.classes, &f.classes);
    cr_assert_eq(memcmp(v.prob, f.t.output, N * C * sizeof(float)), 0);
    cr_assert_eq(memcmp(v.message, f.t.message, N * C * sizeof(float)), 0);
    if (has_bias)
        cr_assert(v.bias && !memcmp(v.bias, f.t.params.b[1], C * sizeof(float)));
    else
        cr_assert_null(v.bias);
    for (size_t i = 0; i < N; i++) {
        uint32_t want = labels_y[i] < 0 ? WEFT_LABEL_VIEW_NONE : (uint32_t)labels_y[i];
        cr_assert_eq(v.observed[i], want, "node %zu", i);
        cr_assert_eq(v.part[i], labels_part[i], "node %zu", i);
    }
    size_t nnz = weft_sparse_nnz(&f.adj);
    cr_assert_eq(memcmp(v.adj_off, f.adj.off, (N + 1) * sizeof(uint64_t)), 0);
    cr_assert_eq(memcmp(v.adj_col, f.adj.col, nnz * sizeof(uint32_t)), 0);
    cr_assert_eq(memcmp(v.adj_val, f.adj.val, nnz * sizeof(float)), 0);

    /* The manifest describes the model; a label-only snapshot has no link model. */
    const json_t *labels = json_object_get(weft_snapshot_manifest(snap), "labels");
    json_t *want = json_pack("{s:s, s:i, s:i, s:[i,i,i], s:s, s:s, s:b, s:s}", "kind", "gcn",
                             "classes", C, "layers", 2, "dims", IN, HIDDEN, C, "activation",
                             "relu", "normalisation", "sym", "bias", has_bias, "input",
                             "features");
    cr_assert(json_equal(labels, want), "labels: %s", json_dumps(labels, JSON_COMPACT));
    json_decref(want);
    weft_link_view lv;
    cr_assert_eq(weft_snapshot_link_view(snap, &lv, &err), WEFT_ERR_NOT_FOUND);
    weft_snapshot_release(snap);
    weft_store_close(s);
    fixture_fini(&f);
}

Test(snapshot_labels, round_trip_with_bias) { check_round_trip(true); }
Test(snapshot_labels, round_trip_without_bias) { check_round_trip(false); }

Test(snapshot_labels, shares_the_node_table_with_a_link_model)
{
    fixture f;
    fixture_init(&f, false);
    weft_store *s = store_create();
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    weft_error err;
    float entity[N * 2];
    for (size_t i = 0; i < N * 2; i++)
        entity[i] = (float)i;
    weft_link_model lm = { .kind = WEFT_LINK_DOT, .n_entities = N, .n_relations = 1, .dim = 2,
                           .entity = entity };
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK);
    json_t *m = json_object();
    cr_assert_eq(weft_snapshot_put_link(w, m, f.g, &lm, true, &err), WEFT_OK, "%s", err.msg);
    /* A second "nodes.off" would be refused by the writer as a repeated name. */
    cr_assert_eq(weft_snapshot_put_labels(w, m, f.g, &f.classes, &f.t, WEFT_SPARSE_NORM_SYM,
                                          &f.adj, labels_y, labels_part, &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_writer_commit(w, m, true, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(m);
    weft_snapshot *snap = open_version(s, version);
    weft_link_view lv;
    weft_label_view v;
    cr_assert_eq(weft_snapshot_link_view(snap, &lv, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_snapshot_label_view(snap, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert(lv.nodes.off == v.nodes.off && lv.nodes.bytes == v.nodes.bytes,
              "one node table serves both models");
    weft_snapshot_release(snap);
    weft_store_close(s);
    fixture_fini(&f);
}

Test(snapshot_labels, put_refuses_mismatched_shapes)
{
    fixture f;
    fixture_init(&f, true);
    weft_store *s = store_create();
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK);
    json_t *m = json_object();
    f.t.shape.dims[2] = C + 1;   /* four outputs for three classes */
    cr_assert_eq(weft_snapshot_put_labels(w, m, f.g, &f.classes, &f.t, WEFT_SPARSE_NORM_SYM,
                                          &f.adj, labels_y, labels_part, &err),
                 WEFT_ERR_INVALID);
    f.t.shape.dims[2] = C;
    int32_t bad_y[N];
    memcpy(bad_y, labels_y, sizeof bad_y);
    bad_y[3] = C;
    cr_assert_eq(weft_snapshot_put_labels(w, m, f.g, &f.classes, &f.t, WEFT_SPARSE_NORM_SYM,
                                          &f.adj, bad_y, labels_part, &err),
                 WEFT_ERR_INVALID);
    cr_assert_null(json_object_get(m, "labels"));
    weft_store_writer_abort(w);
    json_decref(m);
    weft_store_close(s);
    fixture_fini(&f);
}

/* ---- corruption: a copy of a good snapshot with one blob or the manifest changed ---- */

/* One change to a stored snapshot: blob @p name replaced (data NULL: left out), or the
 * manifest's "labels" member replaced by @p labels (when not NULL). */
typedef struct change {
    const char *name;
    weft_dtype dtype;
    size_t ndim;
    size_t shape[2];
    const void *data;
    json_t *labels;
} change;

/* Copy snapshot @p from into a new staged version with @p ch applied; @return the version. */
static uint64_t copy_changed(weft_store *s, uint64_t from, const change *ch)
{
    weft_snapshot *src = open_version(s, from);
    const json_t *manifest = weft_snapshot_manifest(src);
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK, "%s", err.msg);
    const char *name;
    json_t *desc;
    json_object_foreach((json_t *)json_object_get(manifest, "blobs"), name, desc) {
        (void)desc;
        if (ch->name && !strcmp(name, ch->name)) {
            if (ch->data)
                cr_assert_eq(weft_store_writer_put(w, name, ch->dtype, ch->ndim, ch->shape,
                                                   ch->data, &err),
                             WEFT_OK, "%s", err.msg);
            continue;
        }
        weft_blob b;
        cr_assert(weft_snapshot_blob(src, name, &b));
        cr_assert_eq(weft_store_writer_put(w, name, b.dtype, b.ndim, b.shape, b.data, &err),
                     WEFT_OK, "%s", err.msg);
    }
    json_t *labels = ch->labels ? ch->labels : json_deep_copy(json_object_get(manifest, "labels"));
    json_t *m = json_pack("{s:o}", "labels", labels);
    cr_assert_eq(weft_store_writer_commit(w, m, false, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(m);
    weft_snapshot_release(src);
    return version;
}

/* The label view of @p version fails with @p want; the message names @p blob when given. */
static void expect_view_error(weft_store *s, uint64_t version, weft_err want, const char *blob,
                              const char *what)
{
    weft_snapshot *snap = open_version(s, version);
    weft_label_view v;
    weft_error err;
    weft_error_clear(&err);
    cr_assert_eq(weft_snapshot_label_view(snap, &v, &err), want, "%s: got '%s'", what, err.msg);
    if (blob)
        cr_assert(strstr(err.msg, blob), "%s: message '%s' does not name '%s'", what, err.msg,
                  blob);
    weft_snapshot_release(snap);
}

/* The labels object of version 1 with member @p key set to @p value (taken). */
static json_t *labels_with(weft_store *s, const char *key, json_t *value)
{
    json_t *m = NULL;
    cr_assert_eq(weft_store_manifest(s, 1, &m, NULL), WEFT_OK);
    json_t *labels = json_deep_copy(json_object_get(m, "labels"));
    json_decref(m);
    cr_assert_eq(json_object_set_new(labels, key, value), 0);
    return labels;
}

Test(snapshot_labels, inconsistent_snapshots_are_corrupt)
{
    fixture f;
    fixture_init(&f, true);
    weft_store *s = store_create();
    cr_assert_eq(store_labels(s, &f), 1);
    size_t nnz = weft_sparse_nnz(&f.adj);

    /* An unchanged copy is fine: the helper itself changes nothing. */
    change same = { 0 };
    expect_view_error(s, copy_changed(s, 1, &same), WEFT_OK, NULL, "unchanged copy");

    float prob_short[(N - 1) * C];
    memcpy(prob_short, f.t.output, sizeof prob_short);
    change prob_rows = { "label.prob", WEFT_DTYPE_F32, 2, { N - 1, C }, prob_short, NULL };
    expect_view_error(s, copy_changed(s, 1, &prob_rows), WEFT_ERR_CORRUPT, "label.prob",
                      "probabilities of one node too few");

    change msg_cols = { "label.message", WEFT_DTYPE_F32, 2, { C, N }, f.t.message,
                        NULL };
    expect_view_error(s, copy_changed(s, 1, &msg_cols), WEFT_ERR_CORRUPT, "label.message",
                      "messages of a wrong width");

    float prob_bad[N * C];
    memcpy(prob_bad, f.t.output, sizeof prob_bad);
    prob_bad[4] = 1.5f;
    change prob_range = { "label.prob", WEFT_DTYPE_F32, 2, { N, C }, prob_bad, NULL };
    expect_view_error(s, copy_changed(s, 1, &prob_range), WEFT_ERR_CORRUPT, "label.prob",
                      "a probability above 1");

    uint32_t observed[N] = { 0, WEFT_LABEL_VIEW_NONE, 2, C, 1 };
    change obs = { "label.observed", WEFT_DTYPE_U32, 1, { N }, observed, NULL };
    expect_view_error(s, copy_changed(s, 1, &obs), WEFT_ERR_CORRUPT, "label.observed",
                      "an observed class out of range");

    uint8_t part[N] = { 1, 0, 2, 4, 3 };
    change parts = { "label.part", WEFT_DTYPE_U8, 1, { N }, part, NULL };
    expect_view_error(s, copy_changed(s, 1, &parts), WEFT_ERR_CORRUPT, "label.part",
                      "a part out of range");

    change part_type = { "label.part", WEFT_DTYPE_U32, 1, { N }, observed, NULL };
    expect_view_error(s, copy_changed(s, 1, &part_type), WEFT_ERR_CORRUPT, "label.part",
                      "parts of the wrong dtype");

    uint32_t *col = malloc(nnz * sizeof *col);
    memcpy(col, f.adj.col, nnz * sizeof *col);
    col[nnz - 1] = N;
    change cols = { "label.adj.col", WEFT_DTYPE_U32, 1, { nnz }, col, NULL };
    expect_view_error(s, copy_changed(s, 1, &cols), WEFT_ERR_CORRUPT, "label.adj",
                      "an adjacency column out of range");

    uint64_t off[N + 1];
    memcpy(off, f.adj.off, sizeof off);
    uint64_t tmp = off[1];
    off[1] = off[2];
    off[2] = tmp;
    change falling = { "label.adj.off", WEFT_DTYPE_U64, 1, { N + 1 }, off, NULL };
    expect_view_error(s, copy_changed(s, 1, &falling), WEFT_ERR_CORRUPT, "label.adj",
                      "adjacency offsets falling");

    memcpy(off, f.adj.off, sizeof off);
    off[N] = nnz + 1;
    change past = { "label.adj.off", WEFT_DTYPE_U64, 1, { N + 1 }, off, NULL };
    expect_view_error(s, copy_changed(s, 1, &past), WEFT_ERR_CORRUPT, "label.adj",
                      "adjacency offsets past the columns");

    change short_val = { "label.adj.val", WEFT_DTYPE_F32, 1, { nnz - 1 }, f.adj.val, NULL };
    expect_view_error(s, copy_changed(s, 1, &short_val), WEFT_ERR_CORRUPT, "label.adj",
                      "adjacency values one short");

    change no_bias = { "label.bias", WEFT_DTYPE_F32, 1, { C }, NULL, NULL };
    expect_view_error(s, copy_changed(s, 1, &no_bias), WEFT_ERR_CORRUPT, "label.bias",
                      "bias in the manifest, not stored");

    change classes_count = { .labels = labels_with(s, "classes", json_integer(C + 1)) };
    expect_view_error(s, copy_changed(s, 1, &classes_count), WEFT_ERR_CORRUPT, "classes",
                      "manifest counts another number of classes");

    change dims = { .labels = labels_with(s, "dims", json_pack("[i,i,i]", IN, HIDDEN, C + 2)) };
    expect_view_error(s, copy_changed(s, 1, &dims), WEFT_ERR_CORRUPT, NULL,
                      "output width other than the class count");

    change kind = { .labels = labels_with(s, "kind", json_string("forest")) };
    expect_view_error(s, copy_changed(s, 1, &kind), WEFT_ERR_CORRUPT, "forest",
                      "unknown label model kind");

    change unlisted = { "label.message", 0, 0, { 0 }, NULL, NULL };
    expect_view_error(s, copy_changed(s, 1, &unlisted), WEFT_ERR_CORRUPT, "label.message",
                      "messages missing");

    /* Without a labels object: no label model at all. */
    json_t *m = NULL;
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK);
    m = json_object();
    cr_assert_eq(weft_store_writer_commit(w, m, false, NULL, &err), WEFT_OK);
    json_decref(m);
    expect_view_error(s, version, WEFT_ERR_NOT_FOUND, NULL, "no labels object");

    free(col);
    weft_store_close(s);
    fixture_fini(&f);
}

/* A whole node table of another graph, shared through a link model put first: the label
 * blobs' rows then disagree with the node count. */
Test(snapshot_labels, label_rows_must_match_the_node_table)
{
    fixture f;
    fixture_init(&f, false);
    static const char *const six[][2] = { { "a", "b" }, { "b", "c" }, { "c", "d" },
                                          { "d", "e" }, { "e", "f" } };
    weft_graph *g6 = graph_of(six, 5);
    float entity[6 * 2] = { 0 };
    weft_link_model lm = { .kind = WEFT_LINK_DOT, .n_entities = 6, .n_relations = 1, .dim = 2,
                           .entity = entity };
    weft_store *s = store_create();
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK);
    json_t *m = json_object();
    cr_assert_eq(weft_snapshot_put_link(w, m, g6, &lm, true, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_snapshot_put_labels(w, m, f.g, &f.classes, &f.t, WEFT_SPARSE_NORM_SYM,
                                          &f.adj, labels_y, labels_part, &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_writer_commit(w, m, true, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(m);
    expect_view_error(s, version, WEFT_ERR_CORRUPT, "label.prob", "five rows for six nodes");
    weft_graph_free(g6);
    weft_store_close(s);
    fixture_fini(&f);
}

/* ---- a trained model on karate ---- */

/* tests/data/karate/NAME, found through __FILE__ (as tests/reference/test_karate.c does). */
static void karate_path(char *out, size_t cap, const char *name)
{
    const char *src = __FILE__;
    const char *slash = strrchr(src, '/');
    int dir_len = slash ? (int)(slash - src) : 1;
    snprintf(out, cap, "%.*s/../data/karate/%s", dir_len, slash ? src : ".", name);
}

Test(snapshot_labels, trained_model_explains_its_own_probabilities)
{
    char edges[1024], labels_file[1024];
    karate_path(edges, sizeof edges, "edges.tsv");
    karate_path(labels_file, sizeof labels_file, "labels.tsv");
    weft_graph *g = NULL;
    weft_error err;
    cr_assert_eq(weft_graph_new(WEFT_GRAPH_UNDIRECTED, &g, &err), WEFT_OK);
    cr_assert_eq(weft_graph_load_edges(g, edges, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK, "%s", err.msg);
    size_t n = g->nodes.n;
    cr_assert_eq(n, 34);
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_labels lab;
    cr_assert_eq(weft_labels_load(labels_file, &nodes, &lab, &err), WEFT_OK, "%s", err.msg);
    uint8_t *part = calloc(n, 1);
    cr_assert_eq(weft_labels_split(&lab, 0.2, 0.2, 7, part, &err), WEFT_OK, "%s", err.msg);
    weft_sparse adj;
    cr_assert_eq(weft_sparse_adjacency(g->edges, g->n_edges, n, WEFT_SPARSE_NORM_SYM, true, &adj,
                                       NULL, &err),
                 WEFT_OK, "%s", err.msg);
    weft_train_gcn_config cfg;
    weft_train_gcn_defaults(&cfg, false);
    cfg.has_bias = true;
    cfg.epochs = 30;
    cfg.in_dim = 8;
    weft_gcn_trained t;
    weft_gcn_result res;
    cr_assert_eq(weft_train_gcn_classify(&cfg, &adj, NULL, lab.y, part, lab.classes.n, NULL, NULL,
                                         &t, &res, &err),
                 WEFT_OK, "%s", err.msg);

    weft_store *s = store_create();
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK);
    json_t *m = json_object();
    cr_assert_eq(weft_snapshot_put_labels(w, m, g, &lab.classes, &t, cfg.norm, &adj, lab.y, part,
                                          &err),
                 WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_writer_commit(w, m, true, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(m);
    weft_snapshot *snap = open_version(s, version);
    weft_label_view v;
    cr_assert_eq(weft_snapshot_label_view(snap, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(v.n_classes, 2);
    cr_assert_str_eq(json_string_value(json_object_get(
                         json_object_get(weft_snapshot_manifest(snap), "labels"), "input")),
                     "embedding");

    /* A' read back against D^-1/2 (A + I) D^-1/2 worked out here from the edge list: entry
     * (u, w) is 1 / sqrt((deg u + 1)(deg w + 1)) for w a neighbour of u or u itself. */
    FILE *fe = fopen(edges, "r");
    cr_assert_not_null(fe);
    bool adjm[34][34] = { { false } };
    char a[32], b[32];
    while (fscanf(fe, "%31s %31s", a, b) == 2) {
        uint32_t ia, ib;
        cr_assert(weft_names_find(&v.nodes, a, strlen(a), &ia));
        cr_assert(weft_names_find(&v.nodes, b, strlen(b), &ib));
        adjm[ia][ib] = adjm[ib][ia] = true;
    }
    fclose(fe);
    double deg[34];
    for (size_t i = 0; i < n; i++) {
        adjm[i][i] = true;
        deg[i] = 0;
        for (size_t j = 0; j < n; j++)
            deg[i] += adjm[i][j];
    }
    for (size_t i = 0; i < n; i++) {
        size_t row = 0;
        for (size_t j = 0; j < n; j++)
            row += adjm[i][j];
        cr_assert_eq(v.adj_off[i + 1] - v.adj_off[i], row, "row %zu", i);
        for (uint64_t k = v.adj_off[i]; k < v.adj_off[i + 1]; k++) {
            uint32_t j = v.adj_col[k];
            cr_assert(adjm[i][j], "entry (%zu, %u) is not an edge", i, j);
            cr_assert_float_eq(v.adj_val[k], 1.0 / sqrt(deg[i] * deg[j]), 1e-6);
        }
    }

    /* The attribution over the stored row, messages and bias gives logits whose softmax is
     * the stored probability row (computed by the trainer's own forward pass). */
    float contrib[34 * 2], logit[2];
    for (uint32_t u = 0; u < n; u++) {
        size_t r = weft_gcn_attribute(contrib, logit, v.adj_off, v.adj_col, v.adj_val, v.message,
                                      v.bias, v.n_classes, u);
        cr_assert_eq(r, v.adj_off[u + 1] - v.adj_off[u]);
        double mx = fmax(logit[0], logit[1]);
        double e0 = exp(logit[0] - mx), e1 = exp(logit[1] - mx);
        cr_assert_float_eq(v.prob[u * 2 + 0], e0 / (e0 + e1), 1e-5, "node %u", u);
        cr_assert_float_eq(v.prob[u * 2 + 1], e1 / (e0 + e1), 1e-5, "node %u", u);
        uint32_t want = lab.y[u] < 0 ? WEFT_LABEL_VIEW_NONE : (uint32_t)lab.y[u];
        cr_assert_eq(v.observed[u], want);
        cr_assert_eq(v.part[u], part[u]);
    }
    weft_snapshot_release(snap);
    weft_store_close(s);
    weft_gcn_trained_fini(&t);
    weft_sparse_fini(&adj);
    free(part);
    weft_labels_fini(&lab);
    weft_graph_free(g);
}
