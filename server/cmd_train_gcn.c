/* weft train --model gcn | gcn-link: the GCN flags, node classification from labels (split,
 * training, metrics beside the majority and label-propagation baselines, report, snapshot),
 * and the gcn-link training step the link flow of cmd_train.c calls. */
#include <cblas.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cmd_train.h"
#include "weft/alloc.h"
#include "weft/baseline.h"
#include "weft/classify.h"
#include "weft/features.h"
#include "weft/labels.h"
#include "weft/snapshot.h"
#include "weft/sparse.h"

#define SUB "train"

/* Labelled nodes held out when neither --split nor --holdout is given: valid, test. */
#define DEFAULT_LABEL_VALID 0.1
#define DEFAULT_LABEL_TEST 0.2

/* Label propagation stops as scikit-learn's LabelPropagation does by default. */
#define LP_MAX_ITER 1000
#define LP_TOL 1e-3

void cmd_train_gcn_help(void)
{
    printf("graph convolutional networks (--model gcn: node classification; --model gcn-link:\n"
           "GCN layers mix node embeddings, a dot or DistMult decoder scores links; --model\n"
           "KIND,gcn trains a link model and a GCN into one snapshot: the shared flags below\n"
           "then tune the link model, the GCN flags both GCNs, and --holdout the edges):\n"
           "  --labels FILE      node<TAB>class (required with gcn and KIND,gcn); unlabelled\n"
           "                     nodes are fine\n"
           "  --split FILE       node<TAB>train|valid|test for the labelled nodes (default:\n"
           "                     none: --holdout V,T holds out labelled nodes by class, default\n"
           "                     %g,%g)\n"
           "  --features FILE    node<TAB>index[:value] ... (sparse) (default: none: each node\n"
           "                     gets a learned input embedding of --dim values)\n"
           "  --raw-features     do not divide each feature row by its sum\n"
           "  --layers N         mixing layers (default 2)\n"
           "  --hidden N         width of the hidden layers (default: gcn 16, gcn-link 32)\n"
           "  --activation A     relu, sigmoid or linear between layers (default relu)\n"
           "  --norm N           sym: D^-1/2 (A+I) D^-1/2 (default), row: D^-1 (A+I); a\n"
           "                     directed graph is symmetrised\n"
           "  --bias             add a bias to every layer\n"
           "  --dropout X        share of each layer's input dropped in training, 0 to 0.95\n"
           "                     (default: gcn 0.5, gcn-link 0)\n"
           "  --weight-decay X   L2 weight on the first layer (default: gcn 5e-4, gcn-link 0)\n"
           "  --decoder D        gcn-link: dot (default) or distmult\n"
           "  --dim D            gcn: learned input width (default 64); gcn-link: output width\n"
           "                     (default 16)\n"
           "  --negatives N      gcn-link: corruptions per training edge and epoch (default 5)\n"
           "  --epochs, --lr, --seed, --threads as above (Adam lr 0.01; gcn 200 epochs,\n"
           "                     gcn-link 400)\n"
           "  --patience P       stop when the validation loss exceeds the mean of the last P\n"
           "                     epochs' (default: gcn 10; gcn-link 0: never)\n",
           DEFAULT_LABEL_VALID, DEFAULT_LABEL_TEST);
}

/* ---- flags ---- */

static const struct gcn_count_flag {
    const char *flag;
    unsigned bit;
    uint64_t min, max;
} count_flags[] = {
    { "--layers", GIVEN_GCN_LAYERS, 1, WEFT_GCN_MAX_LAYERS },
    { "--hidden", GIVEN_GCN_HIDDEN, 1, 1u << 16 },
};

static const struct gcn_real_flag {
    const char *flag;
    unsigned bit;
    double min, max;
} real_flags[] = {
    { "--dropout", GIVEN_GCN_DROPOUT, 0.0, 0.95 },
    { "--weight-decay", GIVEN_GCN_WEIGHT_DECAY, 0.0, 100.0 },
};

static bool parse_gcn_named(const char *flag, const char *v, struct train_opts *o)
{
    weft_train_gcn_config *c = &o->gset;
    bool ok;
    const char *known;
    if (!strcmp(flag, "--activation")) {
        ok = weft_gcn_act_parse(v, &c->act);
        known = "relu, sigmoid, linear";
        o->given_gcn |= GIVEN_GCN_ACT;
    } else if (!strcmp(flag, "--norm")) {
        ok = weft_sparse_norm_parse(v, &c->norm) && c->norm != WEFT_SPARSE_NORM_NONE;
        known = "sym, row";
        o->given_gcn |= GIVEN_GCN_NORM;
    } else {
        ok = weft_model_kind_parse(v, &c->decoder) &&
             (c->decoder == WEFT_LINK_DOT || c->decoder == WEFT_LINK_DISTMULT);
        known = "dot, distmult";
        o->given_gcn |= GIVEN_GCN_DECODER;
    }
    if (!ok)
        cmd_usage_error(SUB, "%s: unknown value '%s' (known: %s)", flag, v, known);
    return ok;
}

int cmd_train_gcn_parse(int argc, char **argv, int *i, struct train_opts *o, int *rc)
{
    bool bad = false;
    const char *v;
    *rc = CMD_OK;
    if (!strcmp(argv[*i], "--bias")) {
        o->gset.has_bias = true;
        o->given_gcn |= GIVEN_GCN_BIAS;
        return 1;
    }
    if (!strcmp(argv[*i], "--raw-features")) {
        o->is_raw_features = true;
        return 1;
    }
    const char **files[] = { &o->labels, &o->features, &o->split };
    static const char *const file_flags[] = { "--labels", "--features", "--split" };
    for (size_t k = 0; k < 3; k++)
        if ((v = cmd_opt_value(SUB, argc, argv, i, file_flags[k], &bad)) || bad) {
            if (bad)
                *rc = CMD_USAGE;
            else
                *files[k] = v;
            return 1;
        }
    static const char *const named[] = { "--activation", "--norm", "--decoder" };
    for (size_t k = 0; k < 3; k++)
        if ((v = cmd_opt_value(SUB, argc, argv, i, named[k], &bad)) || bad) {
            if (bad || !parse_gcn_named(named[k], v, o))
                *rc = CMD_USAGE;
            return 1;
        }
    for (size_t k = 0; k < sizeof count_flags / sizeof count_flags[0]; k++) {
        uint64_t u;
        if ((v = cmd_opt_value(SUB, argc, argv, i, count_flags[k].flag, &bad)) || bad) {
            if (bad || !cmd_parse_u64(SUB, count_flags[k].flag, v, count_flags[k].min,
                                      count_flags[k].max, &u)) {
                *rc = CMD_USAGE;
            } else {
                if (count_flags[k].bit == GIVEN_GCN_LAYERS)
                    o->gset.n_layers = u;
                else
                    o->gset.hidden = u;
                o->given_gcn |= count_flags[k].bit;
            }
            return 1;
        }
    }
    for (size_t k = 0; k < sizeof real_flags / sizeof real_flags[0]; k++) {
        double x;
        if ((v = cmd_opt_value(SUB, argc, argv, i, real_flags[k].flag, &bad)) || bad) {
            if (bad || !cmd_parse_double(SUB, real_flags[k].flag, v, real_flags[k].min,
                                         real_flags[k].max, &x)) {
                *rc = CMD_USAGE;
            } else {
                if (real_flags[k].bit == GIVEN_GCN_DROPOUT)
                    o->gset.dropout = (float)x;
                else
                    o->gset.weight_decay = (float)x;
                o->given_gcn |= real_flags[k].bit;
            }
            return 1;
        }
    }
    return 0;
}

/* Link-model flags that mean nothing to a GCN run. */
static const struct {
    unsigned bit;
    const char *flag;
} link_only[] = {
    { GIVEN_LOSS, "--loss" },           { GIVEN_OPTIM, "--optimizer" },
    { GIVEN_REG, "--reg" },             { GIVEN_REG_WEIGHT, "--reg-weight" },
    { GIVEN_BATCH, "--batch" },         { GIVEN_INIT, "--init" },
    { GIVEN_EVAL_EVERY, "--eval-every" }, { GIVEN_TIME_BUDGET, "--time-budget" },
};

int cmd_train_gcn_check(const struct train_opts *o)
{
    if (o->also_gcn) {   /* a link model and a GCN: the link flags are the link model's */
        if (!o->labels)
            return cmd_usage_error(SUB, "--model %s,gcn needs --labels FILE",
                                   o->task == CMD_TRAIN_GCN_LINK ? "gcn-link" : "KIND");
        if (o->is_raw_features && !o->features)
            return cmd_usage_error(SUB, "--raw-features needs --features FILE");
        return CMD_OK;
    }
    bool is_gcn = o->task != CMD_TRAIN_LINK;
    if (!is_gcn) {
        if (o->given_gcn || o->labels || o->features || o->split || o->is_raw_features)
            return cmd_usage_error(SUB, "--labels, --features, --split and the GCN flags need "
                                   "--model gcn or gcn-link");
        return CMD_OK;
    }
    for (size_t k = 0; k < sizeof link_only / sizeof link_only[0]; k++)
        if (o->given & link_only[k].bit)
            return cmd_usage_error(SUB, "%s does not apply to --model %s", link_only[k].flag,
                                   o->task == CMD_TRAIN_GCN ? "gcn" : "gcn-link");
    if (o->task == CMD_TRAIN_GCN) {
        if (!o->labels)
            return cmd_usage_error(SUB, "--model gcn needs --labels FILE");
        if (o->test || o->valid)
            return cmd_usage_error(SUB, "--model gcn holds out labelled nodes (--split or "
                                   "--holdout), not edges: drop --valid/--test");
        if (o->split && o->has_holdout)
            return cmd_usage_error(SUB, "--split and --holdout exclude each other");
        if (o->given & GIVEN_NEGATIVES)
            return cmd_usage_error(SUB, "--negatives applies to --model gcn-link only");
        if (o->given_gcn & GIVEN_GCN_DECODER)
            return cmd_usage_error(SUB, "--decoder applies to --model gcn-link only");
    } else if (o->labels || o->split) {
        return cmd_usage_error(SUB, "--labels and --split apply to --model gcn only");
    }
    if (o->is_raw_features && !o->features)
        return cmd_usage_error(SUB, "--raw-features needs --features FILE");
    return CMD_OK;
}

void cmd_train_gcn_configure(const struct train_opts *o, bool is_link, weft_train_gcn_config *c)
{
    weft_train_gcn_defaults(c, is_link);
    c->n_threads = cmd_online_cpus();
    const weft_train_gcn_config *g = &o->gset;
    unsigned f = o->given_gcn, l = o->given;
    c->n_layers = f & GIVEN_GCN_LAYERS ? g->n_layers : c->n_layers;
    c->hidden = f & GIVEN_GCN_HIDDEN ? g->hidden : c->hidden;
    c->act = f & GIVEN_GCN_ACT ? g->act : c->act;
    c->norm = f & GIVEN_GCN_NORM ? g->norm : c->norm;
    c->has_bias = f & GIVEN_GCN_BIAS ? g->has_bias : c->has_bias;
    c->dropout = f & GIVEN_GCN_DROPOUT ? g->dropout : c->dropout;
    c->weight_decay = f & GIVEN_GCN_WEIGHT_DECAY ? g->weight_decay : c->weight_decay;
    c->decoder = f & GIVEN_GCN_DECODER ? g->decoder : c->decoder;
    const weft_train_link_config *s = &o->set;
    if (o->also_gcn && !is_link)   /* the shared flags tune the link model of the run */
        l &= GIVEN_SEED | GIVEN_THREADS;
    if (l & GIVEN_DIM) {
        if (is_link)
            c->out_dim = s->dim;
        else
            c->in_dim = s->dim;
    }
    c->epochs = l & GIVEN_EPOCHS ? s->epochs : c->epochs;
    c->lr = l & GIVEN_LR ? s->lr : c->lr;
    c->seed = l & GIVEN_SEED ? s->seed : c->seed;
    c->n_threads = l & GIVEN_THREADS ? s->n_threads : c->n_threads;
    c->patience = l & GIVEN_PATIENCE ? s->patience : c->patience;
    c->negatives = l & GIVEN_NEGATIVES ? s->negatives : c->negatives;
}

/* ---- shared by both tasks ---- */

/* OpenBLAS runs the dense products; on small widths its threads cost more than they save
 * (they spin between the many small calls of an epoch), so it gets threads only when one
 * product is large. The sparse products use cfg->n_threads either way. */
static void set_blas_threads(const weft_train_gcn_config *c, size_t n_nodes, size_t out)
{
    size_t w = c->hidden > out ? c->hidden : out;
    double flops = (double)n_nodes * (double)w * (double)w;
    openblas_set_num_threads(flops >= 64e6 ? (int)c->n_threads : 1);
}

json_t *cmd_train_gcn_model_json(const weft_train_gcn_config *c, bool is_link,
                                 size_t epochs_run, bool is_early_stop, const char *input)
{
    json_t *hyper = json_pack(
        "{s:I, s:I, s:s, s:s, s:b, s:f, s:f, s:f, s:I, s:I, s:I, s:I}", "layers",
        (json_int_t)c->n_layers, "hidden", (json_int_t)c->hidden, "activation",
        weft_gcn_act_name(c->act), "norm", weft_sparse_norm_name(c->norm), "bias",
        c->has_bias, "dropout", cmd_train_float_json(c->dropout), "weight_decay",
        cmd_train_float_json(c->weight_decay), "lr", cmd_train_float_json(c->lr), "epochs",
        (json_int_t)c->epochs, "patience", (json_int_t)c->patience, "seed", (json_int_t)c->seed,
        "threads", (json_int_t)c->n_threads);
    if (!hyper)
        return NULL;
    int bad = 0;
    if (!strcmp(input, "embedding"))
        bad |= json_object_set_new(hyper, "dim", json_integer((json_int_t)c->in_dim));
    if (is_link) {
        bad |= json_object_set_new(hyper, "out_dim", json_integer((json_int_t)c->out_dim));
        bad |= json_object_set_new(hyper, "negatives", json_integer((json_int_t)c->negatives));
        bad |= json_object_set_new(hyper, "decoder",
                                   json_string(weft_model_kind_name(c->decoder)));
    }
    if (bad) {
        json_decref(hyper);
        return NULL;
    }
    return json_pack("{s:s, s:s, s:s, s:o, s:I, s:b}", "kind", is_link ? "gcn-link" : "gcn",
                     "optimizer", "adam", "input", input, "hyper", hyper, "epochs_run",
                     (json_int_t)epochs_run, "early_stop", is_early_stop);
}

static void print_gcn_config(const weft_train_gcn_config *c, bool is_link, bool has_features,
                             size_t n_features)
{
    printf("model: %s, %zu layers, hidden %zu, %s, %s normalisation%s; ", is_link ? "gcn-link"
           : "gcn", c->n_layers, c->hidden, weft_gcn_act_name(c->act),
           weft_sparse_norm_name(c->norm), c->has_bias ? ", bias" : "");
    if (has_features)
        printf("input: %zu sparse features\n", n_features);
    else
        printf("input: learned embedding of %zu\n", c->in_dim);
    printf("training: Adam lr %g, dropout %g, weight decay %g, at most %zu epochs, patience "
           "%zu, seed %llu, %zu threads", (double)c->lr, (double)c->dropout,
           (double)c->weight_decay, c->epochs, c->patience, (unsigned long long)c->seed,
           c->n_threads);
    if (is_link)
        printf(", %s decoder of %zu, %zu negatives", weft_model_kind_name(c->decoder),
               c->out_dim, c->negatives);
    printf("\n");
}

struct gcn_progress {
    bool is_tty, is_quiet, is_nomem;
    json_t *curve;
};

static void on_gcn_epoch(void *ctx, const weft_gcn_epoch *ep)
{
    struct gcn_progress *pr = ctx;
    json_t *e = json_pack("{s:I, s:f, s:f}", "epoch", (json_int_t)ep->epoch, "loss",
                          ep->train_loss, "seconds", ep->seconds);
    if (e && !isnan(ep->valid_loss))
        json_object_set_new(e, "valid_loss", json_real(ep->valid_loss));
    if (e && !isnan(ep->valid_accuracy))
        json_object_set_new(e, "valid_accuracy", json_real(ep->valid_accuracy));
    if (!e || json_array_append_new(pr->curve, e))
        pr->is_nomem = true;
    if (pr->is_quiet || (pr->is_tty ? 0 : ep->epoch % 10 != 0 && ep->epoch != 1))
        return;
    char line[160], valid[80] = "";
    if (!isnan(ep->valid_loss))
        snprintf(valid, sizeof valid, "  valid loss %.4f", ep->valid_loss);
    if (!isnan(ep->valid_accuracy))
        snprintf(valid + strlen(valid), sizeof valid - strlen(valid), "  accuracy %.4f",
                 ep->valid_accuracy);
    snprintf(line, sizeof line, "epoch %zu/%zu  loss %.4f%s  %.2f ms", ep->epoch, ep->epochs,
             ep->train_loss, valid, 1e3 * ep->seconds);
    if (pr->is_tty)
        fprintf(stderr, "\r%-96s", line);
    else
        fprintf(stderr, "%s\n", line);
    fflush(stderr);
}

static void print_gcn_run(const weft_gcn_result *r)
{
    printf("trained: %zu epochs in %.2fs (median %.2f ms per epoch)%s\n", r->epochs_run,
           r->train_seconds, 1e3 * r->seconds_per_epoch,
           r->is_early_stop ? ", stopped by the validation loss" : "");
}

/* Features of the nodes of @p g when o->features is given (else x stays zeroed). */
static weft_err load_features(const struct train_opts *o, const weft_graph *g, weft_sparse *x,
                              weft_error *err)
{
    if (!o->features)
        return WEFT_OK;
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_features_stats st;
    weft_err rc = weft_features_load(o->features, &nodes, !o->is_raw_features, x, &st, err);
    if (rc != WEFT_OK)
        return rc;
    printf("features: %zu features on %zu nodes", x->n_cols, st.n_lines);
    if (st.n_missing)
        printf(", %zu nodes without a line (zero rows)", st.n_missing);
    printf("\n");
    return WEFT_OK;
}

static weft_err build_adjacency(const weft_train_gcn_config *c, const weft_triple *e, size_t m,
                                size_t n, weft_sparse *adj, weft_error *err)
{
    size_t one_way = 0;
    weft_err rc = weft_sparse_adjacency(e, m, n, c->norm, true, adj, &one_way, err);
    fflush(stdout);   /* keep the notice in order with the lines before it */
    if (rc == WEFT_OK && one_way)
        fprintf(stderr, "weft: notice: the graph is directed (%zu node pairs linked one way "
                        "only); the GCN mixes over it symmetrised\n", one_way);
    return rc;
}

/* ---- gcn-link ---- */

weft_err cmd_train_gcn_link(const struct train_opts *o, const weft_train_gcn_config *cfg,
                            const weft_graph *g, const weft_triple *train, size_t m,
                            const weft_triple *valid, size_t n_valid, json_t *curve,
                            weft_link_params *params, weft_train_result *run, weft_error *err)
{
    weft_sparse x = { 0 }, adj = { 0 };
    weft_gcn_trained t = { 0 };
    weft_gcn_result res = { 0 };
    struct gcn_progress pr = { isatty(STDERR_FILENO), o->is_quiet, false, curve };
    /* Only the training edges are mixed over: held-out edges must not leak into the input. */
    weft_err rc = load_features(o, g, &x, err);
    if (rc == WEFT_OK)
        rc = build_adjacency(cfg, train, m, g->nodes.n, &adj, err);
    if (rc != WEFT_OK)
        goto done;
    print_gcn_config(cfg, true, o->features != NULL, x.n_cols);
    set_blas_threads(cfg, g->nodes.n, cfg->out_dim);
    rc = weft_train_gcn_link(cfg, &adj, o->features ? &x : NULL, train, m, valid, n_valid,
                             g->relations.n, on_gcn_epoch, &pr, &t, &res, err);
    if (pr.is_tty && !o->is_quiet)
        fputc('\n', stderr);
    if (rc == WEFT_OK && pr.is_nomem)
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory recording the curve");
    if (rc == WEFT_OK)
        rc = weft_train_gcn_link_params(&t, cfg, g->relations.n, params, err);
    if (rc != WEFT_OK)
        goto done;
    print_gcn_run(&res);
    memset(run, 0, sizeof *run);
    run->epochs_run = res.epochs_run;
    run->best_epoch = res.epochs_run;
    run->best_valid_mrr = NAN;
    run->is_early_stop = res.is_early_stop;
    run->train_seconds = res.train_seconds;
done:
    weft_gcn_trained_fini(&t);
    weft_sparse_fini(&adj);
    weft_sparse_fini(&x);
    return rc;
}

/* ---- node classification ---- */

struct gcn_run {
    weft_graph *g;
    bool owns_graph;             /* false when the link half of the run lent it */
    weft_sparse x, adj, plain;   /* features, A', A without self-loops (label propagation) */
    weft_labels labels;
    uint8_t *part;
    size_t n_part[4];
    weft_train_gcn_config cfg;
    weft_gcn_trained model;
    weft_gcn_result result;
    float *baseline_prob[2];     /* majority, label propagation: (n, classes) */
    size_t lp_iterations;
    weft_classify_metrics metrics[3][2];   /* [model, majority, lp][valid, test] */
    bool has_metrics[3][2];
};

static const char *const scorer_names[3] = { "gcn", "majority", "label_propagation" };

static void gcn_run_fini(struct gcn_run *r)
{
    if (r->owns_graph)
        weft_graph_free(r->g);
    weft_sparse_fini(&r->x);
    weft_sparse_fini(&r->adj);
    weft_sparse_fini(&r->plain);
    weft_labels_fini(&r->labels);
    free(r->part);
    weft_gcn_trained_fini(&r->model);
    free(r->baseline_prob[0]);
    free(r->baseline_prob[1]);
    for (size_t i = 0; i < 3; i++)
        for (size_t j = 0; j < 2; j++)
            weft_classify_metrics_fini(&r->metrics[i][j]);
}

static weft_err load_graph(const struct train_opts *o, struct gcn_run *r, weft_error *err)
{
    r->owns_graph = true;
    weft_err rc = weft_graph_new(o->is_undirected ? WEFT_GRAPH_UNDIRECTED : 0, &r->g, err);
    if (rc == WEFT_OK)
        rc = cmd_train_load_edges(o, r->g, err);
    if (rc != WEFT_OK)
        return rc;
    const weft_graph *g = r->g;
    printf("graph: %zu nodes, %zu edges, %zu relations (%zu duplicates dropped)\n", g->nodes.n,
           g->n_edges, g->relations.n, g->n_duplicates);
    return WEFT_OK;
}

/* Features, labels, split and adjacencies over r->g. */
static weft_err load_node_data(const struct train_opts *o, struct gcn_run *r, weft_error *err)
{
    const weft_graph *g = r->g;
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_err rc;
    if ((rc = load_features(o, g, &r->x, err)) != WEFT_OK ||
        (rc = weft_labels_load(o->labels, &nodes, &r->labels, err)) != WEFT_OK)
        return rc;
    if (!(r->part = weft_alloc_array(g->nodes.n, 1)))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the split");
    bool is_label_holdout = o->has_holdout && o->task == CMD_TRAIN_GCN;   /* else: edges' */
    double fv = is_label_holdout ? o->frac_valid : DEFAULT_LABEL_VALID;
    double ft = is_label_holdout ? o->frac_test : DEFAULT_LABEL_TEST;
    rc = o->split ? weft_labels_read_split(o->split, &nodes, &r->labels, r->part, err)
                  : weft_labels_split(&r->labels, fv, ft, r->cfg.seed, r->part, err);
    if (rc != WEFT_OK)
        return rc;
    for (size_t v = 0; v < g->nodes.n; v++)
        r->n_part[r->part[v]]++;
    size_t unlabelled = g->nodes.n - r->labels.n_labelled;
    printf("labels: %zu classes on %zu nodes (%zu unlabelled); split %s: %zu train, %zu valid, "
           "%zu test", r->labels.classes.n, r->labels.n_labelled, unlabelled,
           o->split ? "from file" : "stratified by class", r->n_part[WEFT_LABEL_TRAIN],
           r->n_part[WEFT_LABEL_VALID], r->n_part[WEFT_LABEL_TEST]);
    if (!o->split)
        printf(" (seed %llu)", (unsigned long long)r->cfg.seed);
    if (o->split && r->labels.n_labelled > r->n_part[1] + r->n_part[2] + r->n_part[3])
        printf("; %zu labelled nodes not in the split are not used",
               r->labels.n_labelled - r->n_part[1] - r->n_part[2] - r->n_part[3]);
    printf("\n");
    if (r->n_part[WEFT_LABEL_TEST] == 0 && o->split)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: no labelled node is in test: "
                              "nothing to measure the model on", o->split);
    if (r->n_part[WEFT_LABEL_TEST] == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no labelled test node: nothing to "
                              "measure the model on (use --split or a larger --holdout)");
    if ((rc = build_adjacency(&r->cfg, g->edges, g->n_edges, g->nodes.n, &r->adj, err)) !=
        WEFT_OK)
        return rc;
    return weft_sparse_adjacency(g->edges, g->n_edges, g->nodes.n, WEFT_SPARSE_NORM_NONE, false,
                                 &r->plain, NULL, err);
}

static weft_err run_baselines(struct gcn_run *r, weft_error *err)
{
    size_t n = r->g->nodes.n, c = r->labels.classes.n;
    for (size_t i = 0; i < 2; i++)
        if (!(r->baseline_prob[i] = weft_alloc_array(n, c * sizeof(float))))
            return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the baselines");
    weft_err rc = weft_baseline_majority(r->labels.y, r->part, n, c, r->baseline_prob[0], err);
    if (rc == WEFT_OK)
        rc = weft_baseline_label_propagation(&r->plain, r->labels.y, r->part, c, LP_MAX_ITER,
                                             LP_TOL, r->baseline_prob[1], &r->lp_iterations,
                                             err);
    return rc;
}

static weft_err measure(struct gcn_run *r, weft_error *err)
{
    const float *prob[3] = { r->model.output, r->baseline_prob[0], r->baseline_prob[1] };
    static const uint8_t which[2] = { WEFT_LABEL_VALID, WEFT_LABEL_TEST };
    for (size_t i = 0; i < 3; i++)
        for (size_t j = 0; j < 2; j++) {
            if (r->n_part[which[j]] == 0)
                continue;
            weft_err rc = weft_classify_metrics_compute(prob[i], r->labels.y, r->part,
                                                        r->g->nodes.n, r->labels.classes.n,
                                                        which[j], &r->metrics[i][j], err);
            if (rc != WEFT_OK)
                return rc;
            r->has_metrics[i][j] = true;
        }
    return WEFT_OK;
}

static bool beats_baselines(const struct gcn_run *r)
{
    const weft_classify_metrics *m = &r->metrics[0][1];
    return m->accuracy > r->metrics[1][1].accuracy && m->accuracy > r->metrics[2][1].accuracy;
}

static void print_split(const struct gcn_run *r, size_t j)
{
    const char *name = j ? "test" : "valid";
    printf("\n%s: %zu labelled nodes\n", name, r->metrics[0][j].n);
    printf("  %-20s %10s %10s %12s\n", "", "gcn", "majority", "label prop.");
    static const char *const rows[4] = { "accuracy", "macro-F1", "calibration (ECE)",
                                         "log loss" };
    for (size_t k = 0; k < 4; k++) {
        printf("  %-20s", rows[k]);
        for (size_t i = 0; i < 3; i++) {
            const weft_classify_metrics *m = &r->metrics[i][j];
            double v = k == 0 ? m->accuracy : k == 1 ? m->macro_f1 : k == 2 ? m->ece
                                                                            : m->log_loss;
            printf(i == 2 ? " %12.4f" : " %10.4f", v);
        }
        printf("\n");
    }
}

static void print_classes(const struct gcn_run *r)
{
    const weft_classify_metrics *m = &r->metrics[0][1];
    weft_names_view cv = weft_names_as_view(&r->labels.classes);
    printf("\nper class on test (gcn): precision, recall, support; confusion row = true\n");
    for (size_t c = 0; c < m->n_classes; c++) {
        printf("  %-16.16s %6.3f %6.3f %6llu  |", weft_names_get(&cv, (uint32_t)c, NULL),
               m->precision[c], m->recall[c], (unsigned long long)m->support[c]);
        for (size_t k = 0; k < m->n_classes; k++)
            printf(" %4llu", (unsigned long long)m->confusion[c * m->n_classes + k]);
        printf("\n");
    }
    if (!beats_baselines(r))
        printf("  warning: on test the model does not beat the baselines' accuracy\n");
}

static json_t *metrics_json(const struct gcn_run *r, const struct train_opts *o)
{
    weft_names_view cv = weft_names_as_view(&r->labels.classes);
    json_t *out = json_object(), *base = json_object(), *vbase = json_object();
    int bad = !out || !base || !vbase;
    for (size_t i = 0; !bad && i < 3; i++)
        for (size_t j = 0; !bad && j < 2; j++) {
            json_t *m = r->has_metrics[i][j] ? weft_classify_metrics_json(&r->metrics[i][j], &cv)
                                             : json_object();
            if (i == 0)
                bad |= json_object_set_new(out, j ? "test" : "valid", m);
            else
                bad |= json_object_set_new(j ? base : vbase, scorer_names[i], m);
        }
    if (!bad) {
        bad |= json_object_set_new(out, "baselines", base);
        bad |= json_object_set_new(out, "valid_baselines", vbase);
        base = vbase = NULL;
        bad |= json_object_set_new(out, "beats_baselines", json_boolean(beats_baselines(r)));
        json_t *split = json_pack("{s:s, s:I, s:I, s:I, s:I}", "method",
                                  o->split ? "file" : "stratified", "train",
                                  (json_int_t)r->n_part[1], "valid", (json_int_t)r->n_part[2],
                                  "test", (json_int_t)r->n_part[3], "labelled",
                                  (json_int_t)r->labels.n_labelled);
        if (split && !o->split)
            bad |= json_object_set_new(split, "seed", json_integer((json_int_t)r->cfg.seed));
        bad |= json_object_set_new(out, "split", split);
        bad |= json_object_set_new(out, "label_propagation_iterations",
                                   json_integer((json_int_t)r->lp_iterations));
    }
    json_decref(base);
    json_decref(vbase);
    if (bad) {
        json_decref(out);
        return NULL;
    }
    return out;
}

static json_t *gcn_manifest(const struct gcn_run *r, const struct train_opts *o, json_t *curve,
                            json_t *inputs)
{
    const weft_graph *g = r->g;
    json_t *model = cmd_train_gcn_model_json(&r->cfg, false, r->result.epochs_run,
                                             r->result.is_early_stop,
                                             o->features ? "features" : "embedding");
    json_t *graph = json_pack("{s:I, s:I, s:I, s:b, s:I, s:I}", "nodes", (json_int_t)g->nodes.n,
                              "edges", (json_int_t)g->n_edges, "relations",
                              (json_int_t)g->relations.n, "undirected", o->is_undirected,
                              "duplicates", (json_int_t)g->n_duplicates, "self_loops",
                              (json_int_t)g->n_self_loops);
    if (model)
        json_object_set_new(model, "seconds_per_epoch", json_real(r->result.seconds_per_epoch));
    json_t *metrics = metrics_json(r, o);
    return json_pack("{s:o, s:o, s:o, s:o, s:O, s:{s:{s:O, s:O, s:O}}}", "model", model,
                     "graph", graph, "inputs", inputs, "metrics", metrics, "curve", curve,
                     "models", "labels", "model", model, "metrics", metrics, "curve", curve);
}

/* Node data, training, baselines and metrics over r->g, printed as they come. */
static weft_err train_labels(const struct train_opts *o, struct gcn_run *r,
                             struct gcn_progress *pr, weft_error *err)
{
    cmd_train_gcn_configure(o, false, &r->cfg);
    weft_err rc = load_node_data(o, r, err);
    if (rc != WEFT_OK)
        return rc;
    print_gcn_config(&r->cfg, false, o->features != NULL, r->x.n_cols);
    set_blas_threads(&r->cfg, r->g->nodes.n, r->labels.classes.n);
    rc = weft_train_gcn_classify(&r->cfg, &r->adj, o->features ? &r->x : NULL, r->labels.y,
                                 r->part, r->labels.classes.n, on_gcn_epoch, pr, &r->model,
                                 &r->result, err);
    if (pr->is_tty && !o->is_quiet)
        fputc('\n', stderr);
    if (rc == WEFT_OK && pr->is_nomem)
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory recording the curve");
    if (rc != WEFT_OK || (rc = run_baselines(r, err)) != WEFT_OK || (rc = measure(r, err)) != WEFT_OK)
        return rc;
    print_gcn_run(&r->result);
    if (r->has_metrics[0][0])
        print_split(r, 0);
    print_split(r, 1);
    print_classes(r);
    return WEFT_OK;
}

static const char caution_note[] =
    "note: class probabilities are estimates and can be wrong; predictions about people need "
    "human review, and local law and data-protection rules decide their use\n";

weft_err cmd_train_gcn_labels(const struct train_opts *o, weft_graph *g, cmd_gcn_labels **out,
                              json_t **entry, weft_error *err)
{
    struct gcn_run *r = calloc(1, sizeof *r);
    struct gcn_progress pr = { isatty(STDERR_FILENO), o->is_quiet, false, json_array() };
    weft_err rc = r && pr.curve ? WEFT_OK
                                : weft_error_set(err, WEFT_ERR_NOMEM, "out of memory");
    if (rc == WEFT_OK) {
        r->g = g;
        printf("\nlabels, on the same node table:\n");
        rc = train_labels(o, r, &pr, err);
    }
    json_t *e = NULL;
    if (rc == WEFT_OK) {
        json_t *model = cmd_train_gcn_model_json(&r->cfg, false, r->result.epochs_run,
                                                 r->result.is_early_stop,
                                                 o->features ? "features" : "embedding");
        e = json_pack("{s:o, s:o, s:O}", "model", model, "metrics", metrics_json(r, o),
                      "curve", pr.curve);
        if (!e)
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory building the manifest");
    }
    json_decref(pr.curve);
    if (rc != WEFT_OK) {
        cmd_train_gcn_labels_free(r);
        return rc;
    }
    *out = r;
    *entry = e;
    return WEFT_OK;
}

weft_err cmd_train_gcn_labels_put(void *ctx, weft_store_writer *w, json_t *manifest,
                                  weft_error *err)
{
    const struct gcn_run *r = ctx;
    return weft_snapshot_put_labels(w, manifest, r->g, &r->labels.classes, &r->model,
                                    r->cfg.norm, &r->adj, r->labels.y, r->part, err);
}

void cmd_train_gcn_labels_free(cmd_gcn_labels *r)
{
    if (!r)
        return;
    gcn_run_fini(r);
    free(r);
}

void cmd_train_gcn_caution(void)
{
    fputs(caution_note, stdout);
}

int cmd_train_gcn_main(const struct train_opts *o)
{
    weft_error err;
    weft_error_clear(&err);
    int status = CMD_OK;
    struct gcn_run r;
    memset(&r, 0, sizeof r);
    json_t *manifest = NULL, *inputs = NULL;
    struct gcn_progress pr = { isatty(STDERR_FILENO), o->is_quiet, false, json_array() };
    weft_err rc = pr.curve ? WEFT_OK : weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory");
    if (rc == WEFT_OK)
        rc = load_graph(o, &r, &err);
    if (rc == WEFT_OK)
        rc = cmd_train_types_load(o, r.g, &err);
    if (rc == WEFT_OK && !(inputs = cmd_train_fingerprints(o, &err)))
        rc = err.code ? err.code : weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory");
    if (rc != WEFT_OK || (rc = train_labels(o, &r, &pr, &err)) != WEFT_OK)
        goto done;
    manifest = gcn_manifest(&r, o, pr.curve, inputs);
    inputs = NULL;   /* the manifest owns it now */
    if (!manifest) {
        rc = weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory building the manifest");
        goto done;
    }
    if (o->report && (rc = cmd_train_write_report(o->report, manifest, &err)) != WEFT_OK)
        goto done;
    cmd_train_outcome outcome;
    if ((rc = cmd_train_store(o, r.g, manifest, cmd_train_gcn_labels_put, &r, &outcome,
                              &err)) != WEFT_OK)
        goto done;
    status = cmd_train_report_outcome(o, &outcome);
    cmd_train_gcn_caution();
done:
    json_decref(manifest);
    json_decref(inputs);
    json_decref(pr.curve);
    gcn_run_fini(&r);
    return rc == WEFT_OK ? status : cmd_report_error(&err);
}
