/* weft train: ingest, split, train, evaluate beside the baseline, write a snapshot, promote. */
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cmd.h"
#include "weft/baseline.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/io.h"
#include "weft/snapshot.h"
#include "weft/split.h"
#include "weft/store.h"
#include "weft/train_link.h"

#define SUB "train"
#define MAX_EDGE_FILES 64

struct train_opts {
    const char *store;
    const char *edges[MAX_EDGE_FILES];
    size_t n_edges;
    const char *report;
    double holdout;
    bool is_undirected;
    bool is_quiet;
    weft_train_link_config cfg;
};

static void print_help(void)
{
    printf("usage: weft train --store DIR --edges FILE [--edges FILE...] [options]\n\n"
           "Reads edge files (TSV or CSV, 2 columns source,target or 3 source,relation,target,\n"
           "gzip allowed), holds out a seeded share of edges for testing, trains a link model,\n"
           "reports filtered MRR and Hits@k beside the popularity baseline, stores the model as\n"
           "the next snapshot version and makes it live.\n\n"
           "options:\n"
           "  --store DIR        snapshot store (created if absent)\n"
           "  --edges FILE       edge file; repeat for several\n"
           "  --model KIND       link model: dot (default dot)\n"
           "  --undirected       each edge a-b also stands for b-a\n"
           "  --dim D            embedding size (default 64)\n"
           "  --epochs E         passes over the training edges (default 50)\n"
           "  --negatives N      corrupted edges per positive (default 5)\n"
           "  --lr X             Adagrad learning rate (default 0.1)\n"
           "  --l2 X             L2 penalty (default 1e-5)\n"
           "  --holdout F        share of edges held out for testing (default 0.1)\n"
           "  --seed S           seed of the split, initialisation and sampling (default 1)\n"
           "  --threads N        training and evaluation threads (default 1)\n"
           "  --report FILE      write the evaluation report as JSON\n"
           "  --quiet            no per-epoch progress\n");
}

static int parse_opts(int argc, char **argv, struct train_opts *o)
{
    memset(o, 0, sizeof *o);
    weft_train_link_defaults(&o->cfg);
    o->holdout = 0.1;
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        uint64_t u;
        double x;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            print_help();
            return -1;
        } else if (!strcmp(argv[i], "--undirected")) {
            o->is_undirected = true;
        } else if (!strcmp(argv[i], "--quiet")) {
            o->is_quiet = true;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--store", &bad))) {
            o->store = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--edges", &bad))) {
            if (o->n_edges == MAX_EDGE_FILES)
                return cmd_usage_error(SUB, "at most %d --edges files", MAX_EDGE_FILES);
            o->edges[o->n_edges++] = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--report", &bad))) {
            o->report = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--model", &bad))) {
            if (!weft_model_kind_parse(v, &o->cfg.kind))
                return cmd_usage_error(SUB, "--model: unknown kind '%s' (known: dot)", v);
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--dim", &bad))) {
            if (!cmd_parse_u64(SUB, "--dim", v, 1, 4096, &u))
                return CMD_USAGE;
            o->cfg.dim = u;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--epochs", &bad))) {
            if (!cmd_parse_u64(SUB, "--epochs", v, 1, 1000000, &u))
                return CMD_USAGE;
            o->cfg.epochs = u;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--negatives", &bad))) {
            if (!cmd_parse_u64(SUB, "--negatives", v, 1, 10000, &u))
                return CMD_USAGE;
            o->cfg.negatives = u;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--seed", &bad))) {
            if (!cmd_parse_u64(SUB, "--seed", v, 0, UINT64_MAX, &u))
                return CMD_USAGE;
            o->cfg.seed = u;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--threads", &bad))) {
            if (!cmd_parse_u64(SUB, "--threads", v, 1, 256, &u))
                return CMD_USAGE;
            o->cfg.n_threads = u;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--lr", &bad))) {
            if (!cmd_parse_double(SUB, "--lr", v, 1e-9, 100.0, &x))
                return CMD_USAGE;
            o->cfg.lr = (float)x;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--l2", &bad))) {
            if (!cmd_parse_double(SUB, "--l2", v, 0.0, 100.0, &x))
                return CMD_USAGE;
            o->cfg.l2 = (float)x;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--holdout", &bad))) {
            if (!cmd_parse_double(SUB, "--holdout", v, 0.001, 0.5, &x))
                return CMD_USAGE;
            o->holdout = x;
        } else if (!bad) {
            return cmd_usage_error(SUB, "unknown option '%s'", argv[i]);
        }
        if (bad)
            return CMD_USAGE;
    }
    if (!o->store)
        return cmd_usage_error(SUB, "--store DIR is required");
    if (o->n_edges == 0)
        return cmd_usage_error(SUB, "--edges FILE is required");
    return CMD_OK;
}

/* Progress: a live line on a terminal, one log line per epoch otherwise. */
struct progress {
    bool is_tty, is_quiet;
    json_t *curve;
    double elapsed;
};

static void on_epoch(void *ctx, const weft_train_epoch *ep)
{
    struct progress *pr = ctx;
    pr->elapsed += ep->seconds;
    json_array_append_new(pr->curve, json_pack("{s:I, s:f, s:f}", "epoch", (json_int_t)ep->epoch,
                                               "loss", ep->loss, "seconds", ep->seconds));
    if (pr->is_quiet)
        return;
    double eta = ep->seconds * (double)(ep->epochs - ep->epoch);
    fprintf(stderr, "%sepoch %zu/%zu  loss %.4f  %.0f edges/s  eta %.1fs%s",
            pr->is_tty ? "\r" : "", ep->epoch, ep->epochs, ep->loss, ep->triples_per_s, eta,
            pr->is_tty ? "  " : "\n");
    if (pr->is_tty && ep->epoch == ep->epochs)
        fputc('\n', stderr);
}

static json_t *input_fingerprints(const struct train_opts *o, weft_error *err)
{
    json_t *inputs = json_array();
    for (size_t i = 0; inputs && i < o->n_edges; i++) {
        char hex[65];
        if (weft_io_sha256_file(o->edges[i], hex, err) != WEFT_OK) {
            json_decref(inputs);
            return NULL;
        }
        json_array_append_new(inputs, json_pack("{s:s, s:s, s:s}", "role", "edges", "path",
                                                o->edges[i], "sha256", hex));
    }
    return inputs;
}

static void print_metrics(const weft_rank_metrics *model, const weft_rank_metrics *pop)
{
    printf("\nfiltered ranking on %zu held-out queries  (model | popularity baseline)\n",
           model->n_queries);
    printf("  %-10s %10.4f | %10.4f\n", "MRR", model->mrr, pop->mrr);
    printf("  %-10s %10.4f | %10.4f\n", "Hits@1", model->hits1, pop->hits1);
    printf("  %-10s %10.4f | %10.4f\n", "Hits@3", model->hits3, pop->hits3);
    printf("  %-10s %10.4f | %10.4f\n", "Hits@10", model->hits10, pop->hits10);
    printf("  %-10s %10.2f | %10.2f\n", "mean rank", model->mean_rank, pop->mean_rank);
    if (model->mrr <= pop->mrr)
        printf("  warning: the model does not beat the popularity baseline on MRR\n");
}

static json_t *build_manifest(const struct train_opts *o, const weft_graph *g,
                              const weft_split *sp, const weft_rank_metrics *mm,
                              const weft_rank_metrics *pm, json_t *curve, json_t *inputs)
{
    const weft_train_link_config *c = &o->cfg;
    json_t *hyper = json_pack("{s:I, s:I, s:I, s:f, s:f, s:I, s:f, s:I}", "dim",
                              (json_int_t)c->dim, "epochs", (json_int_t)c->epochs, "negatives",
                              (json_int_t)c->negatives, "lr", (double)c->lr, "l2", (double)c->l2,
                              "seed", (json_int_t)c->seed, "holdout", o->holdout, "threads",
                              (json_int_t)c->n_threads);
    json_t *graph = json_pack("{s:I, s:I, s:I, s:b, s:I, s:I}", "nodes", (json_int_t)g->nodes.n,
                              "edges", (json_int_t)g->n_edges, "relations",
                              (json_int_t)g->relations.n, "undirected", o->is_undirected,
                              "duplicates", (json_int_t)g->n_duplicates, "self_loops",
                              (json_int_t)g->n_self_loops);
    json_t *metrics = json_pack("{s:o, s:{s:o}, s:b, s:{s:I, s:I, s:I}}", "test",
                                weft_eval_metrics_json(mm), "baselines", "popularity",
                                weft_eval_metrics_json(pm), "beats_baselines", mm->mrr > pm->mrr,
                                "split", "train", (json_int_t)sp->n_train, "test",
                                (json_int_t)sp->n_test, "seed", (json_int_t)c->seed);
    return json_pack("{s:{s:s, s:s, s:o}, s:o, s:o, s:o, s:O}", "model", "kind",
                     weft_model_kind_name(c->kind), "loss", "logistic", "hyper", hyper, "graph",
                     graph, "inputs", inputs, "metrics", metrics, "curve", curve);
}

static weft_err write_report(const char *path, const json_t *manifest, weft_error *err)
{
    const json_t *metrics = json_object_get(manifest, "metrics");
    json_t *report = json_pack("{s:O, s:O, s:o, s:o, s:O, s:O}", "model",
                               json_object_get(manifest, "model"), "test",
                               json_object_get(metrics, "test"), "valid", json_object(),
                               "per_relation", json_object(), "baselines",
                               json_object_get(metrics, "baselines"), "curve",
                               json_object_get(manifest, "curve"));
    if (!report)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the report");
    int rc = json_dump_file(report, path, JSON_INDENT(2) | JSON_REAL_PRECISION(6));
    json_decref(report);
    return rc ? weft_error_set(err, WEFT_ERR_IO, "%s: cannot write report", path) : WEFT_OK;
}

static weft_err store_snapshot(const struct train_opts *o, const weft_graph *g,
                               const weft_link_params *params, json_t *manifest,
                               uint64_t *version, weft_error *err)
{
    weft_store *store = NULL;
    weft_store_writer *w = NULL;
    weft_link_model model = weft_link_params_model(params);
    weft_err rc = weft_store_open(o->store, WEFT_STORE_CREATE, 0, &store, err);
    if (rc == WEFT_OK)
        rc = weft_store_writer_open(store, &w, version, err);
    if (rc == WEFT_OK)
        rc = weft_snapshot_put_link(w, manifest, g, &model, true, err);
    if (rc == WEFT_OK) {
        rc = weft_store_writer_commit(w, manifest, true, NULL, err);
        w = NULL;   /* commit frees the writer whatever the outcome */
    }
    weft_store_writer_abort(w);
    weft_store_close(store);
    return rc;
}

int cmd_train_main(int argc, char **argv)
{
    struct train_opts o;
    int prc = parse_opts(argc, argv, &o);
    if (prc != CMD_OK)
        return prc < 0 ? CMD_OK : prc;

    weft_error err;
    weft_error_clear(&err);
    weft_graph *g = NULL;
    weft_split sp = { 0 };
    weft_link_params params = { 0 };
    weft_baseline_popularity pop = { 0 };
    json_t *manifest = NULL, *inputs = NULL;
    struct progress pr = { isatty(STDERR_FILENO), o.is_quiet, json_array(), 0.0 };
    weft_err rc = weft_graph_new(o.is_undirected ? WEFT_GRAPH_UNDIRECTED : 0, &g, &err);
    for (size_t i = 0; rc == WEFT_OK && i < o.n_edges; i++)
        rc = weft_graph_load_edges(g, o.edges[i], &err);
    if (rc == WEFT_OK)
        rc = weft_graph_finalize(g, &err);
    if (rc != WEFT_OK)
        goto done;
    printf("graph: %zu nodes, %zu edges, %zu relations (%zu duplicates dropped)%s\n",
           g->nodes.n, g->n_edges, g->relations.n, g->n_duplicates,
           o.is_undirected ? ", undirected: both directions stored" : "");
    if (!(inputs = input_fingerprints(&o, &err))) {
        rc = err.code ? err.code : WEFT_ERR_NOMEM;
        goto done;
    }
    if ((rc = weft_split_holdout(g, 0.0, o.holdout, o.cfg.seed, &sp, &err)) != WEFT_OK)
        goto done;
    if (sp.n_test == 0) {
        rc = weft_error_set(&err, WEFT_ERR_INVALID,
                            "no edge can be held out without cutting a node off the training "
                            "graph: the graph is too small or too sparse to evaluate");
        goto done;
    }
    printf("split: %zu training edges, %zu held out for testing (seed %llu)\n", sp.n_train,
           sp.n_test, (unsigned long long)o.cfg.seed);

    if ((rc = weft_train_link_run(&o.cfg, sp.train, sp.n_train, g->nodes.n, g->relations.n,
                                  on_epoch, &pr, &params, &err)) != WEFT_OK)
        goto done;
    printf("trained %s, dim %zu, %zu epochs in %.2fs\n", weft_model_kind_name(o.cfg.kind),
           o.cfg.dim, o.cfg.epochs, pr.elapsed);

    weft_eval_filter filter = { &g->out, &g->in, g->n_self_loops == 0 };
    weft_link_model model = weft_link_params_model(&params);
    weft_rank_metrics mm, pm;
    bool both = !o.is_undirected;
    if ((rc = weft_baseline_popularity_init(&pop, sp.train, sp.n_train, g->nodes.n,
                                            g->relations.n, &err)) ||
        (rc = weft_eval_ranking(sp.test, sp.n_test, g->nodes.n, both, &filter,
                                weft_eval_model_scores, &model, o.cfg.n_threads, &mm, &err)) ||
        (rc = weft_eval_ranking(sp.test, sp.n_test, g->nodes.n, both, &filter,
                                weft_baseline_popularity_scores, &pop, o.cfg.n_threads, &pm,
                                &err)))
        goto done;
    print_metrics(&mm, &pm);

    manifest = build_manifest(&o, g, &sp, &mm, &pm, pr.curve, inputs);
    inputs = NULL;   /* the manifest owns it now */
    if (!manifest) {
        rc = weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory building the manifest");
        goto done;
    }
    if (o.report && (rc = write_report(o.report, manifest, &err)) != WEFT_OK)
        goto done;
    uint64_t version = 0;
    if ((rc = store_snapshot(&o, g, &params, manifest, &version, &err)) != WEFT_OK)
        goto done;
    printf("snapshot %llu written to %s and promoted: it is live\n",
           (unsigned long long)version, o.store);
done:
    json_decref(manifest);
    json_decref(inputs);
    json_decref(pr.curve);
    weft_baseline_popularity_fini(&pop);
    weft_link_params_fini(&params);
    weft_split_fini(&sp);
    weft_graph_free(g);
    return rc == WEFT_OK ? CMD_OK : cmd_report_error(&err);
}
