/* weft eval: filtered ranking of a stored snapshot on a test file, beside the popularity
 * baseline. Also the evaluation `weft train` runs after training (cmd_eval_split_run), so
 * that both print and store the same figures the same way. */
#include <cblas.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "weft/alloc.h"
#include "weft/baseline.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/snapshot.h"
#include "weft/store.h"

#define SUB "eval"

/* ---- measuring one split ---- */

static weft_err scores_run(const cmd_eval_input *in, const weft_triple *edges, size_t n,
                           const weft_triple *neg, size_t n_neg, weft_eval_score_fn fn,
                           void *ctx, cmd_eval_scores *out, weft_error *err)
{
    out->per_relation = weft_calloc_array(in->n_relations, sizeof *out->per_relation);
    if (!out->per_relation)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for per-relation metrics");
    weft_err rc = weft_eval_ranking_by_relation(edges, n, in->n_nodes, in->n_relations,
                                                in->both_directions, in->filter, fn, ctx,
                                                in->n_threads, &out->overall, out->per_relation,
                                                err);
    if (rc == WEFT_OK && neg && n_neg > 0) {
        rc = weft_eval_binary(edges, n, neg, n_neg, in->n_nodes, fn, ctx, in->n_threads,
                              &out->binary, err);
        out->has_binary = rc == WEFT_OK;
    }
    return rc;
}

weft_err cmd_eval_split_run(const cmd_eval_input *in, const char *name, const weft_triple *edges,
                            size_t n, const weft_triple *known, size_t n_known,
                            cmd_eval_split *out, weft_error *err)
{
    memset(out, 0, sizeof *out);
    out->name = name;
    out->n_edges = n;
    weft_baseline_popularity pop = { 0 };
    weft_triple *neg = NULL;
    size_t n_neg = 0;
    weft_err rc = weft_baseline_popularity_init(&pop, known, n_known, in->n_nodes,
                                                in->n_relations, err);
    /* AUC and AP only where every edge has the same meaning (common practice for
     * one-relation graphs); the negatives depend on the seed and the split's name only. */
    if (rc == WEFT_OK && in->n_relations == 1)
        rc = weft_eval_sample_negatives(edges, n, CMD_EVAL_NEGATIVES_PER_EDGE, in->n_nodes,
                                        in->filter, in->seed ^ weft_names_hash(name, strlen(name)),
                                        &neg, &n_neg, err);
    if (rc == WEFT_OK)
        rc = scores_run(in, edges, n, neg, n_neg, weft_eval_model_scores, (void *)in->model,
                        &out->model, err);
    if (rc == WEFT_OK)
        rc = scores_run(in, edges, n, neg, n_neg, weft_baseline_popularity_scores, &pop,
                        &out->popularity, err);
    free(neg);
    weft_baseline_popularity_fini(&pop);
    if (rc != WEFT_OK)
        cmd_eval_split_fini(out);
    return rc;
}

void cmd_eval_split_fini(cmd_eval_split *s)
{
    if (!s)
        return;
    free(s->model.per_relation);
    free(s->popularity.per_relation);
    s->model.per_relation = s->popularity.per_relation = NULL;
}

bool cmd_eval_beats_baseline(const cmd_eval_split *s)
{
    if (!(s->model.overall.mrr > s->popularity.overall.mrr))
        return false;
    return !s->model.has_binary || s->model.binary.auc > s->popularity.binary.auc;
}

/* ---- the table ---- */

static void print_row(const char *label, int decimals, double model, double pop)
{
    printf("  %-28s %10.*f | %.*f\n", label, decimals, model, decimals, pop);
}

static void print_relations(const cmd_eval_split *s, const weft_names_view *relations)
{
    printf("  %-28s %7s %10s | %-10s %10s | %s\n", "relation", "queries", "MRR", "popularity",
           "Hits@10", "popularity");
    for (size_t r = 0; r < relations->n; r++) {
        const weft_rank_metrics *mr = &s->model.per_relation[r];
        const weft_rank_metrics *pr = &s->popularity.per_relation[r];
        if (mr->n_queries == 0)
            continue;
        printf("  %-28.28s %7zu %10.4f | %-10.4f %10.4f | %.4f\n",
               weft_names_get(relations, (uint32_t)r, NULL), mr->n_queries, mr->mrr, pr->mrr,
               mr->hits10, pr->hits10);
    }
}

void cmd_eval_print(const cmd_eval_split *s, const weft_names_view *relations)
{
    const weft_rank_metrics *m = &s->model.overall, *p = &s->popularity.overall;
    printf("\n%s: %zu edges, %zu filtered ranking queries\n", s->name, s->n_edges,
           m->n_queries);
    printf("  %-28s %10s | %s\n", "", "model", "popularity");
    print_row("MRR", 4, m->mrr, p->mrr);
    print_row("mean rank", 2, m->mean_rank, p->mean_rank);
    print_row("Hits@1", 4, m->hits1, p->hits1);
    print_row("Hits@3", 4, m->hits3, p->hits3);
    print_row("Hits@10", 4, m->hits10, p->hits10);
    if (s->model.has_binary && s->popularity.has_binary) {
        char label[64];
        snprintf(label, sizeof label, "AUC-ROC (%zu non-edges)", s->model.binary.n_neg);
        print_row(label, 4, s->model.binary.auc, s->popularity.binary.auc);
        print_row("average precision", 4, s->model.binary.ap, s->popularity.binary.ap);
    }
    if (relations->n > 1)
        print_relations(s, relations);
    if (!cmd_eval_beats_baseline(s))
        printf("  warning: on %s the model does not beat the popularity baseline\n", s->name);
}

/* ---- JSON ---- */

/* Ranking figures with "auc" and "ap" added where measured: metric name -> value. */
static json_t *scores_json(const cmd_eval_scores *sc)
{
    json_t *j = weft_eval_metrics_json(&sc->overall);
    if (j && sc->has_binary &&
        (json_object_set_new(j, "auc", json_real(sc->binary.auc)) ||
         json_object_set_new(j, "ap", json_real(sc->binary.ap)) ||
         json_object_set_new(j, "negatives", json_integer((json_int_t)sc->binary.n_neg)))) {
        json_decref(j);
        return NULL;
    }
    return j;
}

json_t *cmd_eval_metrics_json(const cmd_eval_split *test, const cmd_eval_split *valid,
                              const weft_names_view *relations)
{
    json_t *j = json_pack(
        "{s:o, s:o, s:o, s:o, s:{s:o}, s:{s:o}, s:{s:o}, s:b}", "test",
        scores_json(&test->model), "valid", valid ? scores_json(&valid->model) : json_object(),
        "per_relation", weft_eval_per_relation_json(test->model.per_relation, relations),
        "valid_per_relation",
        valid ? weft_eval_per_relation_json(valid->model.per_relation, relations) : json_object(),
        "baselines", "popularity", scores_json(&test->popularity), "valid_baselines",
        "popularity", valid ? scores_json(&valid->popularity) : json_object(),
        "per_relation_baselines", "popularity",
        weft_eval_per_relation_json(test->popularity.per_relation, relations),
        "beats_baselines", cmd_eval_beats_baseline(test));
    return j;
}

/* ---- weft eval ---- */

struct eval_opts {
    const char *store;
    const char *test;
    uint64_t version;    /* 0: the live one */
    size_t n_threads;
    bool is_json;
};

static void print_help(void)
{
    printf("usage: weft eval --store DIR --test FILE [--version V] [--json] [--threads N]\n\n"
           "Evaluates a stored snapshot on the edges of FILE (TSV or CSV, 2 columns\n"
           "source,target or 3 source,relation,target, gzip allowed; every name must be in the\n"
           "snapshot): filtered MRR, mean rank and Hits@1/3/10 overall and per relation, and\n"
           "for one-relation graphs AUC-ROC and average precision against sampled non-edges,\n"
           "each beside the popularity baseline. The filter is every link the snapshot knows\n"
           "plus the test edges; the baseline counts the known links that are not test edges.\n"
           "A snapshot evaluated on its own test file gives the figures weft train reported.\n\n"
           "options:\n"
           "  --store DIR     snapshot store (required)\n"
           "  --test FILE     edges to evaluate on (required)\n"
           "  --version V     snapshot version (default: the live one)\n"
           "  --json          print one JSON object instead of tables\n"
           "  --threads N     evaluation threads, 1 to 256 (default: the online CPUs)\n"
           "  --help          print this help\n\n"
           "Exit status: 0 done, 1 failed (no live snapshot, a name not in it, I/O),\n"
           "2 bad arguments.\n");
}

static int parse_opts(int argc, char **argv, struct eval_opts *o)
{
    memset(o, 0, sizeof *o);
    o->n_threads = cmd_online_cpus();
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        uint64_t u;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            print_help();
            return -1;
        } else if (!strcmp(argv[i], "--json")) {
            o->is_json = true;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--store", &bad))) {
            o->store = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--test", &bad))) {
            o->test = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--version", &bad))) {
            if (!cmd_parse_u64(SUB, "--version", v, 1, UINT64_MAX, &u))
                return CMD_USAGE;
            o->version = u;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--threads", &bad))) {
            if (!cmd_parse_u64(SUB, "--threads", v, 1, 256, &u))
                return CMD_USAGE;
            o->n_threads = u;
        } else if (!bad) {
            return cmd_usage_error(SUB, "unknown option '%s'", argv[i]);
        }
        if (bad)
            return CMD_USAGE;
    }
    if (!o->store)
        return cmd_usage_error(SUB, "--store DIR is required");
    if (!o->test)
        return cmd_usage_error(SUB, "--test FILE is required");
    return CMD_OK;
}

/* The known links of a snapshot, and the test edges it does not know yet. */
struct known_links {
    weft_csr out, in;          /* built only when some test edge is new */
    bool is_built;
    weft_eval_filter filter;
};

static weft_err known_with_test(const weft_link_view *v, const weft_triple *test, size_t n,
                                struct known_links *k, weft_error *err)
{
    bool has_new = false, has_loop = v->has_self_loops;
    for (size_t i = 0; i < n; i++) {
        has_new |= !weft_csr_has(&v->known_out, test[i].s, test[i].r, test[i].t);
        has_loop |= test[i].s == test[i].t;
    }
    k->filter = (weft_eval_filter){ &v->known_out, &v->known_in, !has_loop };
    if (!has_new)
        return WEFT_OK;
    weft_triple *known = NULL, *all = NULL;
    size_t n_known = 0, n_all = 0;
    weft_err rc = weft_csr_triples_except(&v->known_out, NULL, 0, &known, &n_known, err);
    if (rc == WEFT_OK && n_known > SIZE_MAX - n)
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "too many edges");
    if (rc == WEFT_OK && !(all = weft_alloc_array(n_known + n, sizeof *all)))
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu edges", n_known + n);
    if (rc == WEFT_OK) {
        memcpy(all, known, n_known * sizeof *all);
        memcpy(all + n_known, test, n * sizeof *all);
        n_all = n_known + n;
        rc = weft_graph_build_csr(&k->out, all, n_all, v->n_nodes, false, err);
    }
    if (rc == WEFT_OK)
        rc = weft_graph_build_csr(&k->in, all, n_all, v->n_nodes, true, err);
    if (rc == WEFT_OK) {
        k->is_built = true;
        k->filter.known_out = &k->out;
        k->filter.known_in = &k->in;
    } else {
        weft_csr_fini(&k->out);
    }
    free(known);
    free(all);
    return rc;
}

static void known_links_fini(struct known_links *k)
{
    if (k->is_built) {
        weft_csr_fini(&k->out);
        weft_csr_fini(&k->in);
    }
}

/* What the snapshot's manifest says about its graph and its seed. */
static void manifest_facts(const json_t *manifest, bool *is_undirected, uint64_t *seed)
{
    const json_t *graph = json_object_get(manifest, "graph");
    *is_undirected = json_is_true(json_object_get(graph, "undirected"));
    const json_t *hyper = json_object_get(json_object_get(manifest, "model"), "hyper");
    const json_t *s = json_object_get(hyper, "seed");
    *seed = json_is_integer(s) ? (uint64_t)json_integer_value(s) : 1;
}

static weft_err print_json(const struct eval_opts *o, uint64_t version, const cmd_eval_split *s,
                           const weft_names_view *relations, weft_error *err)
{
    json_t *j = cmd_eval_metrics_json(s, NULL, relations);
    if (j && (json_object_set_new(j, "version", json_integer((json_int_t)version)) ||
              json_object_set_new(j, "test_file", json_string(o->test)))) {
        json_decref(j);
        j = NULL;
    }
    if (!j)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for JSON output");
    int bad = json_dumpf(j, stdout, JSON_INDENT(2) | JSON_REAL_PRECISION(10));
    json_decref(j);
    if (bad || fputc('\n', stdout) == EOF)
        return weft_error_set(err, WEFT_ERR_IO, "stdout: write failed");
    return WEFT_OK;
}

static weft_err open_version(weft_store *store, const struct eval_opts *o, uint64_t *version,
                             weft_snapshot **snap, weft_error *err)
{
    uint64_t v = o->version, previous = 0;
    weft_err rc = WEFT_OK;
    if (v == 0 && (rc = weft_store_head(store, &v, &previous, err)) != WEFT_OK)
        return rc;
    if (v == 0)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND,
                              "%s: no snapshot is live; name one with --version", o->store);
    *version = v;
    return weft_snapshot_open(store, v, snap, err);
}

static weft_err evaluate(const struct eval_opts *o, weft_error *err)
{
    weft_store *store = NULL;
    weft_snapshot *snap = NULL;
    weft_triple *raw = NULL, *test = NULL, *known = NULL;
    size_t n_raw = 0, n_test = 0, n_known = 0, n_dup = 0;
    struct known_links k = { 0 };
    cmd_eval_split res = { 0 };
    uint64_t version = 0, seed = 1;
    bool is_undirected = false;
    weft_link_view v;
    weft_err rc = weft_store_open(o->store, WEFT_STORE_READONLY, 0, &store, err);
    if (rc == WEFT_OK)
        rc = open_version(store, o, &version, &snap, err);
    if (rc == WEFT_OK)
        rc = weft_snapshot_link_view(snap, &v, err);
    if (rc != WEFT_OK)
        goto done;
    manifest_facts(weft_snapshot_manifest(snap), &is_undirected, &seed);
    if ((rc = weft_graph_read_triples(o->test, &v.nodes, &v.relations, &raw, &n_raw, err)))
        goto done;
    if (n_raw == 0) {
        rc = weft_error_set(err, WEFT_ERR_INVALID, "%s: no edges to evaluate on", o->test);
        goto done;
    }
    /* The form weft train evaluates: unique, and both directions when undirected. */
    if ((rc = weft_graph_unique_triples(raw, n_raw, is_undirected, &test, &n_test, &n_dup,
                                        err)) ||
        (rc = known_with_test(&v, test, n_test, &k, err)) ||
        (rc = weft_csr_triples_except(&v.known_out, test, n_test, &known, &n_known, err)))
        goto done;
    if (n_dup)
        fprintf(stderr, "weft: warning: %s: %zu duplicate edges counted once\n", o->test, n_dup);
    openblas_set_num_threads(1);   /* the evaluation threads each run their own sgemm */
    cmd_eval_input in = { v.n_nodes, v.n_relations, !is_undirected, &k.filter, &v.model,
                          o->n_threads, seed };
    if ((rc = cmd_eval_split_run(&in, "test", test, n_test, known, n_known, &res, err)))
        goto done;
    if (o->is_json) {
        rc = print_json(o, version, &res, &v.relations, err);
    } else {
        printf("snapshot %llu (%s, %zu nodes, %zu relations) on %s\n",
               (unsigned long long)version, weft_model_kind_name(v.kind), v.n_nodes,
               v.n_relations, o->test);
        cmd_eval_print(&res, &v.relations);
    }
done:
    cmd_eval_split_fini(&res);
    known_links_fini(&k);
    free(raw);
    free(test);
    free(known);
    weft_snapshot_release(snap);
    weft_store_close(store);
    return rc;
}

int cmd_eval_main(int argc, char **argv)
{
    struct eval_opts o;
    int prc = parse_opts(argc, argv, &o);
    if (prc != CMD_OK)
        return prc < 0 ? CMD_OK : prc;
    weft_error err;
    weft_error_clear(&err);
    weft_err rc = evaluate(&o, &err);
    if (rc == WEFT_OK && fflush(stdout) != 0)
        rc = weft_error_set(&err, WEFT_ERR_IO, "stdout: write failed");
    return rc == WEFT_OK ? CMD_OK : cmd_report_error(&err);
}
