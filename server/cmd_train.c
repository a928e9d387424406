/* weft train: ingest (one edge set with a seeded holdout, or train/valid/test files), train
 * with early stopping on validation, evaluate beside the popularity baseline, write a
 * snapshot, promote it. */
#include <cblas.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cmd_train.h"
#include "weft/alloc.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/io.h"
#include "weft/snapshot.h"
#include "weft/split.h"
#include "weft/store.h"
#include "weft/train_link.h"

#define SUB "train"

/* Held out when neither --holdout nor --test is given: valid, test. */
#define DEFAULT_FRAC_VALID 0.05
#define DEFAULT_FRAC_TEST 0.1

static void print_help(void)
{
    /* The defaults shown are those weft_train_link_defaults() gives (core/train_link.c):
     * dot with the logistic loss, another kind with it, and the softmax loss. */
    weft_train_link_config dot, lg, sm;
    weft_train_link_defaults(&dot, WEFT_LINK_DOT, WEFT_LOSS_LOGISTIC, 1000);
    weft_train_link_defaults(&lg, WEFT_LINK_DISTMULT, WEFT_LOSS_LOGISTIC, 1000);
    weft_train_link_defaults(&sm, WEFT_LINK_DISTMULT, WEFT_LOSS_SOFTMAX, 1000);
    printf("usage: weft train --store DIR --edges FILE [--edges FILE...] [options]\n\n"
           "Reads edge files (TSV or CSV, 2 columns source,target or 3 source,relation,target,\n"
           "gzip allowed). Either holds out a seeded share of them for validation and testing\n"
           "(every node and relation of a held-out edge keeps an edge in train), or reads the\n"
           "held-out edges from --valid and --test files. Trains a link model, stopping early\n"
           "when the validation MRR stops improving and keeping its best epoch; reports\n"
           "filtered MRR, mean rank and Hits@1/3/10, overall and per relation, and for\n"
           "one-relation graphs AUC-ROC and average precision against sampled non-edges, each\n"
           "beside the popularity baseline; stores the model as the next snapshot version and\n"
           "makes it live.\n\n"
           "input:\n"
           "  --store DIR        snapshot store, created if absent (required)\n"
           "  --edges FILE       edge file (required); repeat for several, at most %d (with\n"
           "                     --test: the training edges)\n"
           "  --holdout [V,]T    shares held out for validation and testing (default %g,%g);\n"
           "                     one number T holds out T for testing and nothing for validation\n"
           "  --valid FILE       validation edges; needs --test (default: none)\n"
           "  --test FILE        test edges, instead of a holdout (default: none)\n"
           "  --undirected       each edge a-b also stands for b-a\n"
           "  --types FILE       node types, node<TAB>type (stored with the node table; the\n"
           "                     server can then limit candidates to one type). Not carried\n"
           "                     over: a run without it stores no types (default: none)\n\n",
           MAX_EDGE_FILES, DEFAULT_FRAC_VALID, DEFAULT_FRAC_TEST);
    printf("model and training (defaults depend on the model, the loss and the number of\n"
           "nodes; the values used are printed and stored in the snapshot's manifest):\n"
           "  --model KIND       dot, distmult or complex (default: dot for one relation,\n"
           "                     distmult for several); gcn and gcn-link: see below\n"
           "  --loss L           logistic (negative sampling) or softmax (1-vs-all) (default:\n"
           "                     softmax for distmult and complex up to 524288 nodes, where a\n"
           "                     batch of 128 queries' scores fits in 256 MiB; else logistic)\n"
           "  --optimizer O      adagrad or adam (default %s)\n"
           "  --reg R            l2 or n3 (default: %s for dot with the logistic loss, else %s)\n"
           "  --reg-weight X     regularisation weight (default: softmax %g; logistic: dot %g,\n"
           "                     others %g)\n"
           "  --lr X             learning rate (default: softmax %g, logistic %g)\n"
           "  --dim D            embedding size, complex: even (default: dot %zu, others %zu)\n"
           "  --epochs E         most passes over the training edges (default %zu)\n"
           "  --negatives N      logistic loss: corruptions per positive (default: dot %zu,\n"
           "                     others %zu)\n"
           "  --batch B          softmax loss: queries per step (default %zu, fewer past 67108\n"
           "                     nodes so that a batch's scores fit in 256 MiB); logistic loss:\n"
           "                     positives per step (default: 1/100 of the training edges, 16\n"
           "                     to 1000)\n"
           "  --init X           initial embeddings ~ N(0, X^2) (default: softmax %g, logistic\n"
           "                     %g)\n"
           "  --seed S           seed of the split, initialisation, sampling and the negatives of\n"
           "                     AUC (default %llu)\n"
           "  --threads N        training and evaluation threads, 1 to 256 (default: the online\n"
           "                     CPUs); 1 with a fixed seed gives bit-identical snapshots\n"
           "  --eval-every E     epochs between validation evaluations (default %zu)\n"
           "  --time-budget S    training time budget in seconds (validation excluded): no\n"
           "                     epoch starts that would end past it (default: none)\n"
           "  --patience P       evaluations without a better validation MRR before stopping,\n"
           "                     0: never stop early (default %zu; dot with the logistic loss:\n"
           "                     %zu)\n\n",
           weft_train_optim_name(lg.optim), weft_train_reg_name(dot.reg),
           weft_train_reg_name(lg.reg), (double)sm.reg_weight, (double)dot.reg_weight,
           (double)lg.reg_weight, (double)sm.lr, (double)lg.lr, dot.dim, lg.dim, lg.epochs,
           dot.negatives, lg.negatives, sm.batch, (double)sm.init_scale, (double)lg.init_scale,
           (unsigned long long)lg.seed, lg.eval_every, lg.patience, dot.patience);
    printf("output:\n"
           "  --report FILE      write the evaluation report as JSON (default: none)\n"
           "  --quiet            no per-epoch progress\n\n"
           "the gate: a new snapshot goes live only if it beats its baselines on test and its\n"
           "test MRR (links) or accuracy (labels) is at most a tolerance below the live one's;\n"
           "otherwise it is stored as rejected, with the reason, and weft exits with status 3.\n"
           "The model part a run does not train is carried over from the live snapshot when the\n"
           "node table is the same.\n"
           "  --gate-tolerance X how far below the live key metric is still accepted, 0 to 1\n"
           "                     (default %g)\n"
           "  --force            promote even when the gate refuses (recorded in the manifest)\n"
           "  --no-promote       store the snapshot as staged; the live one stays\n"
           "  --warm-start       link models: start from the live snapshot's embeddings for the\n"
           "                     nodes and relations it knows (by name); new ones start fresh.\n"
           "                     Needs the same model kind, dimension and loss, else a notice\n"
           "                     and a fresh start\n"
           "  --help             print this help\n\n",
           CMD_TRAIN_GATE_TOLERANCE);
    cmd_train_index_help();
    printf("\n");
    cmd_train_gcn_help();
    printf("\nExit status: 0 stored (live, or staged with --no-promote), 1 failed (bad input,\n"
           "I/O, the store), 2 bad arguments, 3 stored as rejected: the gate refused it.\n");
}

/* "--holdout T" or "--holdout V,T". */
static bool parse_holdout(const char *v, struct train_opts *o)
{
    const char *comma = strchr(v, ',');
    double a = 0.0, b = 0.0;
    if (!comma) {
        if (!cmd_parse_double(SUB, "--holdout", v, 0.001, 0.5, &b))
            return false;
    } else {
        char first[64];
        size_t n = (size_t)(comma - v);
        if (n >= sizeof first) {
            cmd_usage_error(SUB, "--holdout: '%s' is not V,T", v);
            return false;
        }
        memcpy(first, v, n);
        first[n] = '\0';
        if (!cmd_parse_double(SUB, "--holdout (validation share)", first, 0.0, 0.5, &a) ||
            !cmd_parse_double(SUB, "--holdout (test share)", comma + 1, 0.001, 0.5, &b))
            return false;
    }
    o->frac_valid = a;
    o->frac_test = b;
    o->has_holdout = true;
    return true;
}

/* Options that take a name from a fixed list. Returns false after a usage error. */
static bool parse_named(const char *flag, const char *v, struct train_opts *o)
{
    bool ok = false;
    const char *known = "";
    if (!strcmp(flag, "--model")) {
        /* "KIND" or "KIND,gcn" / "gcn,KIND": a link model and a GCN in one run */
        char first[32] = "";
        const char *comma = strchr(v, ','), *link = v;
        if (comma && (size_t)(comma - v) < sizeof first) {
            memcpy(first, v, (size_t)(comma - v));
            o->also_gcn = !strcmp(first, "gcn") || !strcmp(comma + 1, "gcn");
            link = !strcmp(first, "gcn") ? comma + 1 : first;
        }
        o->task = !strcmp(link, "gcn") ? CMD_TRAIN_GCN
                : !strcmp(link, "gcn-link") ? CMD_TRAIN_GCN_LINK : CMD_TRAIN_LINK;
        ok = (!comma || (o->also_gcn && o->task != CMD_TRAIN_GCN)) &&
             (o->task != CMD_TRAIN_LINK || weft_model_kind_parse(link, &o->set.kind));
        known = "dot, distmult, complex, gcn, gcn-link, or a link model and gcn: distmult,gcn";
        o->given |= GIVEN_MODEL;
    } else if (!strcmp(flag, "--loss")) {
        ok = weft_train_loss_parse(v, &o->set.loss);
        known = "logistic, softmax";
        o->given |= GIVEN_LOSS;
    } else if (!strcmp(flag, "--optimizer")) {
        ok = weft_train_optim_parse(v, &o->set.optim);
        known = "adagrad, adam";
        o->given |= GIVEN_OPTIM;
    } else {
        ok = weft_train_reg_parse(v, &o->set.reg);
        known = "l2, n3";
        o->given |= GIVEN_REG;
    }
    if (!ok)
        cmd_usage_error(SUB, "%s: unknown value '%s' (known: %s)", flag, v, known);
    return ok;
}

/* Whole-number tuning options: flag, bit, smallest, largest. */
static const struct count_flag {
    const char *flag;
    unsigned bit;
    uint64_t min, max;
} count_flags[] = {
    { "--dim", GIVEN_DIM, 1, 4096 },
    { "--epochs", GIVEN_EPOCHS, 1, 1000000 },
    { "--negatives", GIVEN_NEGATIVES, 1, 10000 },
    { "--batch", GIVEN_BATCH, 1, 1000000 },
    { "--seed", GIVEN_SEED, 0, UINT64_MAX },
    { "--threads", GIVEN_THREADS, 1, 256 },
    { "--eval-every", GIVEN_EVAL_EVERY, 1, 1000000 },
    { "--patience", GIVEN_PATIENCE, 0, 1000000 },
};

static void set_count(struct train_opts *o, unsigned bit, uint64_t u)
{
    weft_train_link_config *c = &o->set;
    switch (bit) {
    case GIVEN_DIM: c->dim = u; break;
    case GIVEN_EPOCHS: c->epochs = u; break;
    case GIVEN_NEGATIVES: c->negatives = u; break;
    case GIVEN_BATCH: c->batch = u; break;
    case GIVEN_SEED: c->seed = u; break;
    case GIVEN_THREADS: c->n_threads = u; break;
    case GIVEN_EVAL_EVERY: c->eval_every = u; break;
    case GIVEN_PATIENCE: c->patience = u; break;
    }
    o->given |= bit;
}

/* Real-valued tuning options: flag, bit, smallest, largest. */
static const struct real_flag {
    const char *flag;
    unsigned bit;
    double min, max;
} real_flags[] = {
    { "--lr", GIVEN_LR, 1e-9, 100.0 },
    { "--reg-weight", GIVEN_REG_WEIGHT, 0.0, 100.0 },
    { "--init", GIVEN_INIT, 1e-9, 100.0 },
    { "--time-budget", GIVEN_TIME_BUDGET, 1.0, 1e7 },
};

static void set_real(struct train_opts *o, unsigned bit, double x)
{
    weft_train_link_config *c = &o->set;
    if (bit == GIVEN_LR)
        c->lr = (float)x;
    else if (bit == GIVEN_REG_WEIGHT)
        c->reg_weight = (float)x;
    else if (bit == GIVEN_TIME_BUDGET)
        c->max_seconds = x;
    else
        c->init_scale = (float)x;
    o->given |= bit;
}

/* The tuning options; returns 1 when argv[*i] is one of them (then *rc is its verdict), 0
 * when it is not. */
static int parse_tuning(int argc, char **argv, int *i, struct train_opts *o, int *rc)
{
    bool bad = false;
    const char *v;
    *rc = CMD_OK;
    static const char *const named[] = { "--model", "--loss", "--optimizer", "--reg" };
    for (size_t k = 0; k < sizeof named / sizeof named[0]; k++)
        if ((v = cmd_opt_value(SUB, argc, argv, i, named[k], &bad)) || bad) {
            if (bad || !parse_named(named[k], v, o))
                *rc = CMD_USAGE;
            return 1;
        }
    for (size_t k = 0; k < sizeof count_flags / sizeof count_flags[0]; k++) {
        const struct count_flag *f = &count_flags[k];
        uint64_t u;
        if ((v = cmd_opt_value(SUB, argc, argv, i, f->flag, &bad)) || bad) {
            if (bad || !cmd_parse_u64(SUB, f->flag, v, f->min, f->max, &u))
                *rc = CMD_USAGE;
            else
                set_count(o, f->bit, u);
            return 1;
        }
    }
    for (size_t k = 0; k < sizeof real_flags / sizeof real_flags[0]; k++) {
        const struct real_flag *f = &real_flags[k];
        double x;
        if ((v = cmd_opt_value(SUB, argc, argv, i, f->flag, &bad)) || bad) {
            if (bad || !cmd_parse_double(SUB, f->flag, v, f->min, f->max, &x))
                *rc = CMD_USAGE;
            else
                set_real(o, f->bit, x);
            return 1;
        }
    }
    return 0;
}

static int check_inputs(const struct train_opts *o)
{
    if (!o->store)
        return cmd_usage_error(SUB, "--store DIR is required");
    if (o->n_edges == 0)
        return cmd_usage_error(SUB, "--edges FILE is required");
    if (o->valid && !o->test)
        return cmd_usage_error(SUB, "--valid needs --test (or use --holdout V,T)");
    if (o->test && o->has_holdout)
        return cmd_usage_error(SUB, "--holdout and --test exclude each other");
    int rc = cmd_train_index_check(o);
    return rc != CMD_OK ? rc : cmd_train_gcn_check(o);
}

static int parse_opts(int argc, char **argv, struct train_opts *o)
{
    memset(o, 0, sizeof *o);
    o->frac_valid = DEFAULT_FRAC_VALID;
    o->frac_test = DEFAULT_FRAC_TEST;
    o->gate_tolerance = CMD_TRAIN_GATE_TOLERANCE;
    o->index = weft_link_index_defaults(WEFT_LINK_INDEX_EXACT);
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        int rc;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            print_help();
            return -1;
        } else if (!strcmp(argv[i], "--undirected")) {
            o->is_undirected = true;
        } else if (!strcmp(argv[i], "--quiet")) {
            o->is_quiet = true;
        } else if (!strcmp(argv[i], "--force")) {
            o->is_force = true;
        } else if (!strcmp(argv[i], "--no-promote")) {
            o->is_no_promote = true;
        } else if (!strcmp(argv[i], "--warm-start")) {
            o->is_warm_start = true;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--gate-tolerance", &bad))) {
            if (!cmd_parse_double(SUB, "--gate-tolerance", v, 0.0, 1.0, &o->gate_tolerance))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--store", &bad))) {
            o->store = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--edges", &bad))) {
            if (o->n_edges == MAX_EDGE_FILES)
                return cmd_usage_error(SUB, "at most %d --edges files", MAX_EDGE_FILES);
            o->edges[o->n_edges++] = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--valid", &bad))) {
            o->valid = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--test", &bad))) {
            o->test = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--types", &bad))) {
            o->types_file = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--report", &bad))) {
            o->report = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--holdout", &bad))) {
            if (!parse_holdout(v, o))
                return CMD_USAGE;
        } else if (!bad && cmd_train_index_parse(argc, argv, &i, o, &rc)) {
            if (rc != CMD_OK)
                return rc;
        } else if (!bad && cmd_train_gcn_parse(argc, argv, &i, o, &rc)) {
            if (rc != CMD_OK)
                return rc;
        } else if (!bad && parse_tuning(argc, argv, &i, o, &rc)) {
            if (rc != CMD_OK)
                return rc;
        } else if (!bad) {
            return cmd_usage_error(SUB, "unknown option '%s'", argv[i]);
        }
        if (bad)
            return CMD_USAGE;
    }
    return check_inputs(o);
}

/* The configuration: defaults for the model and graph size, then every flag given. */
static void configure(const struct train_opts *o, const weft_graph *g,
                      weft_train_link_config *c)
{
    weft_link_kind kind = g->relations.n > 1 ? WEFT_LINK_DISTMULT : WEFT_LINK_DOT;
    if (o->given & GIVEN_MODEL)
        kind = o->set.kind;
    const weft_train_link_config *s = &o->set;
    unsigned f = o->given;   /* the loss picks its own defaults; each flag given replaces one */
    weft_train_link_defaults(c, kind, f & GIVEN_LOSS ? s->loss : 0, g->nodes.n);
    c->n_threads = cmd_online_cpus();
    c->optim = f & GIVEN_OPTIM ? s->optim : c->optim;
    c->reg = f & GIVEN_REG ? s->reg : c->reg;
    c->reg_weight = f & GIVEN_REG_WEIGHT ? s->reg_weight : c->reg_weight;
    c->lr = f & GIVEN_LR ? s->lr : c->lr;
    c->dim = f & GIVEN_DIM ? s->dim : c->dim;
    c->epochs = f & GIVEN_EPOCHS ? s->epochs : c->epochs;
    c->negatives = f & GIVEN_NEGATIVES ? s->negatives : c->negatives;
    c->batch = f & GIVEN_BATCH ? s->batch : c->batch;
    c->init_scale = f & GIVEN_INIT ? s->init_scale : c->init_scale;
    c->seed = f & GIVEN_SEED ? s->seed : c->seed;
    c->n_threads = f & GIVEN_THREADS ? s->n_threads : c->n_threads;
    c->eval_every = f & GIVEN_EVAL_EVERY ? s->eval_every : c->eval_every;
    c->patience = f & GIVEN_PATIENCE ? s->patience : c->patience;
    c->max_seconds = f & GIVEN_TIME_BUDGET ? s->max_seconds : c->max_seconds;
}

static void print_config(const weft_train_link_config *c)
{
    printf("model: %s, dim %zu, loss %s", weft_model_kind_name(c->kind), c->dim,
           weft_train_loss_name(c->loss));
    if (c->loss == WEFT_LOSS_LOGISTIC)
        printf(" (%zu negatives)", c->negatives);
    else
        printf(" (batch %zu)", c->batch);
    printf(", %s lr %g, %s %g, init %g, at most %zu epochs, seed %llu, %zu threads\n",
           weft_train_optim_name(c->optim), (double)c->lr, weft_train_reg_name(c->reg),
           (double)c->reg_weight, (double)c->init_scale, c->epochs,
           (unsigned long long)c->seed, c->n_threads);
    fflush(stdout);   /* before the progress lines on stderr */
}

/* ---- input: the graph and its train / valid / test edges ---- */

/* Which edges play which part, and what the input looked like. */
struct inputs {
    weft_graph *g;
    const weft_triple *train, *valid, *test;
    size_t n_train, n_valid, n_test;
    weft_split split;                 /* holdout: owns the arrays */
    weft_graph_part parts[3];         /* files: train, valid, test; own the arrays */
    weft_graph_part_overlap overlap[3];   /* [1] valid, [2] test against train */
    size_t n_test_in_valid;           /* test edges that are validation edges too */
    bool is_files;
    uint64_t split_seed;              /* holdout: the seed it was drawn with */
};

static void inputs_fini(struct inputs *in)
{
    weft_split_fini(&in->split);
    for (size_t i = 0; i < 3; i++)
        weft_graph_part_fini(&in->parts[i]);
    weft_graph_free(in->g);
}

static const char *const part_names[3] = { "train", "valid", "test" };

static void warn_parts(const struct inputs *in)
{
    for (size_t i = 0; i < 3; i++) {
        const weft_graph_part *p = &in->parts[i];
        if (p->n_duplicates)
            fprintf(stderr, "weft: warning: %s: %zu duplicate edges counted once\n",
                    part_names[i], p->n_duplicates);
        if (i == 0)
            continue;
        const weft_graph_part_overlap *o = &in->overlap[i];
        /* Common practice: a held-out edge that is also a training edge is a leak (it is
         * easy to rank and flatters the model). It is kept and counted. */
        if (o->n_shared)
            fprintf(stderr, "weft: warning: %zu %s edges are also training edges (a leak: "
                    "they flatter the model)\n", o->n_shared, part_names[i]);
        if (o->n_unseen_node)
            fprintf(stderr, "weft: warning: %zu %s edges touch a node that no training edge "
                    "touches (its embedding stays as initialised)\n", o->n_unseen_node,
                    part_names[i]);
        if (o->n_unseen_relation)
            fprintf(stderr, "weft: warning: %zu %s edges have a relation that no training "
                    "edge has\n", o->n_unseen_relation, part_names[i]);
    }
    /* The stopping epoch is chosen on the validation edges: a test edge among them is
     * measured by the model picked for it. Kept and counted, like a leak. */
    if (in->n_test_in_valid)
        fprintf(stderr, "weft: warning: %zu test edges are also validation edges (early "
                "stopping chose the model on them: they flatter it)\n", in->n_test_in_valid);
}

weft_err cmd_train_load_edges(const struct train_opts *o, weft_graph *g, weft_error *err)
{
    weft_err rc = WEFT_OK;
    for (size_t i = 0; rc == WEFT_OK && i < o->n_edges; i++)
        rc = weft_graph_load_edges(g, o->edges[i], err);
    if (rc != WEFT_OK)
        return rc;
    if (g->n_edges == 0 && o->n_edges == 1)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: empty graph: no edges, only blank "
                              "lines and comments", o->edges[0]);
    if (g->n_edges == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "empty graph: no edges in the %zu --edges "
                              "files (%s and the others hold only blank lines and comments)",
                              o->n_edges, o->edges[0]);
    return weft_graph_finalize(g, err);
}

/* --edges TRAIN [--valid FILE] --test FILE: one graph (names and filter over all three),
 * three lists kept apart. */
static weft_err load_files(const struct train_opts *o, struct inputs *in, weft_error *err)
{
    weft_err rc = WEFT_OK;
    for (size_t i = 0; rc == WEFT_OK && i < o->n_edges; i++)
        rc = weft_graph_load_part(in->g, o->edges[i], &in->parts[0], err);
    if (rc == WEFT_OK && o->valid)
        rc = weft_graph_load_part(in->g, o->valid, &in->parts[1], err);
    if (rc == WEFT_OK)
        rc = weft_graph_load_part(in->g, o->test, &in->parts[2], err);
    if (rc != WEFT_OK)
        return rc;
    /* A file without edges is a mistake, whichever part it plays (counted as read). */
    if (in->parts[0].n_edges == 0)
        return o->n_edges == 1 ? weft_error_set(err, WEFT_ERR_INVALID, "%s: no training edges",
                                                o->edges[0])
                               : weft_error_set(err, WEFT_ERR_INVALID,
                                                "no training edges in the --edges files");
    if (o->valid && in->parts[1].n_edges == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: no validation edges", o->valid);
    if (in->parts[2].n_edges == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: no test edges", o->test);
    rc = weft_graph_finalize(in->g, err);
    for (size_t i = 0; rc == WEFT_OK && i < 3; i++)
        rc = weft_graph_part_finalize(in->g, &in->parts[i], err);
    for (size_t i = 1; rc == WEFT_OK && i < 3; i++)
        rc = weft_graph_part_compare(in->g, &in->parts[0], &in->parts[i], &in->overlap[i], err);
    weft_graph_part_overlap vt = { 0, 0, 0 };
    if (rc == WEFT_OK && o->valid)
        rc = weft_graph_part_compare(in->g, &in->parts[1], &in->parts[2], &vt, err);
    if (rc != WEFT_OK)
        return rc;
    in->n_test_in_valid = vt.n_shared;
    in->is_files = true;
    in->train = in->parts[0].edges;
    in->n_train = in->parts[0].n_edges;
    in->valid = in->parts[1].edges;
    in->n_valid = in->parts[1].n_edges;
    in->test = in->parts[2].edges;
    in->n_test = in->parts[2].n_edges;
    return WEFT_OK;
}

static weft_err load_holdout(const struct train_opts *o, uint64_t seed, struct inputs *in,
                             weft_error *err)
{
    weft_err rc = weft_split_holdout(in->g, o->frac_valid, o->frac_test, seed, &in->split, err);
    if (rc != WEFT_OK)
        return rc;
    in->split_seed = seed;
    if (in->split.n_test == 0)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "no edge can be held out without cutting a node off the training "
                              "graph: the graph is too small or too sparse to evaluate");
    in->train = in->split.train;
    in->n_train = in->split.n_train;
    in->valid = in->split.valid;
    in->n_valid = in->split.n_valid;
    in->test = in->split.test;
    in->n_test = in->split.n_test;
    return WEFT_OK;
}

static weft_err load_graph(const struct train_opts *o, struct inputs *in, weft_error *err)
{
    weft_err rc = weft_graph_new(o->is_undirected ? WEFT_GRAPH_UNDIRECTED : 0, &in->g, err);
    if (rc != WEFT_OK)
        return rc;
    if (o->test)
        return load_files(o, in, err);
    return cmd_train_load_edges(o, in->g, err);
}

json_t *cmd_train_fingerprints(const struct train_opts *o, weft_error *err)
{
    const char *paths[MAX_EDGE_FILES + 6], *roles[MAX_EDGE_FILES + 6];
    size_t n = 0;
    for (size_t i = 0; i < o->n_edges; i++) {
        paths[n] = o->edges[i];
        roles[n++] = "edges";
    }
    if (o->valid) {
        paths[n] = o->valid;
        roles[n++] = "valid";
    }
    if (o->test) {
        paths[n] = o->test;
        roles[n++] = "test";
    }
    const char *extra[4] = { o->features, o->labels, o->split, o->types_file };
    static const char *const extra_roles[4] = { "features", "labels", "split", "types" };
    for (size_t i = 0; i < 4; i++)
        if (extra[i]) {
            paths[n] = extra[i];
            roles[n++] = extra_roles[i];
        }
    json_t *inputs = json_array();
    for (size_t i = 0; inputs && i < n; i++) {
        char hex[65];
        if (weft_io_sha256_file(paths[i], hex, err) != WEFT_OK ||
            json_array_append_new(inputs, json_pack("{s:s, s:s, s:s}", "role", roles[i], "path",
                                                    paths[i], "sha256", hex))) {
            json_decref(inputs);
            return NULL;
        }
    }
    return inputs;
}

/* ---- progress ---- */

struct progress {
    bool is_tty, is_quiet;
    json_t *curve;
    bool is_nomem;             /* a curve entry could not be stored */
    double elapsed;            /* training and validation seconds so far */
    double last_mrr;           /* latest validation MRR, NaN before the first */
};

/* "1h02m", "3m05s", "12s": short enough for a live line. */
void cmd_train_format_duration(char *out, size_t cap, double s)
{
    if (!(s >= 0) || s > 1e7)
        snprintf(out, cap, "?");
    else if (s >= 3600)
        snprintf(out, cap, "%dh%02dm", (int)(s / 3600), (int)(s / 60) % 60);
    else if (s >= 60)
        snprintf(out, cap, "%dm%02ds", (int)(s / 60), (int)s % 60);
    else
        snprintf(out, cap, "%.0fs", s);
}

static json_t *curve_entry(const weft_train_epoch *ep)
{
    json_t *e = json_object();
    if (!e || json_object_set_new(e, "epoch", json_integer((json_int_t)ep->epoch)) ||
        json_object_set_new(e, "loss", isfinite(ep->loss) ? json_real(ep->loss) : json_null()) ||
        json_object_set_new(e, "seconds", json_real(ep->seconds)) ||
        (!isnan(ep->valid_mrr) &&
         (json_object_set_new(e, "valid_mrr", json_real(ep->valid_mrr)) ||
          json_object_set_new(e, "eval_seconds", json_real(ep->eval_seconds))))) {
        json_decref(e);
        return NULL;
    }
    return e;
}

static void on_epoch(void *ctx, const weft_train_epoch *ep)
{
    struct progress *pr = ctx;
    pr->elapsed += ep->seconds + (isnan(ep->valid_mrr) ? 0.0 : ep->eval_seconds);
    if (!isnan(ep->valid_mrr))
        pr->last_mrr = ep->valid_mrr;
    if (json_array_append_new(pr->curve, curve_entry(ep)))
        pr->is_nomem = true;
    if (pr->is_quiet)
        return;
    /* Early stopping may end sooner: the ETA is the longest the run can still take. */
    char eta[16], mrr[64] = "", line[192];
    cmd_train_format_duration(eta, sizeof eta, pr->elapsed / (double)ep->epoch *
                                         (double)(ep->epochs - ep->epoch));
    if (!isnan(pr->last_mrr))
        snprintf(mrr, sizeof mrr, "  valid MRR %.4f (best @%zu)", pr->last_mrr, ep->best_epoch);
    snprintf(line, sizeof line, "epoch %zu/%zu  loss %.4f%s  %.0f triples/s  ETA %s", ep->epoch,
             ep->epochs, ep->loss, mrr, ep->triples_per_s, eta);
    if (pr->is_tty)   /* one live line, rewritten in place; padding clears a longer one */
        fprintf(stderr, "\r%-96s", line);
    else
        fprintf(stderr, "%s\n", line);
    fflush(stderr);
}

/* ---- evaluation, manifest, report, snapshot ---- */

struct results {
    cmd_eval_split valid, test;
    bool has_valid;
    weft_train_result run;
};

static void results_fini(struct results *r)
{
    cmd_eval_split_fini(&r->valid);
    cmd_eval_split_fini(&r->test);
}

/* The popularity baseline of a split counts every known edge outside @p drop_a and
 * @p drop_b: for test, train and valid (what `weft eval` counts: the snapshot's known links
 * minus the test edges); for valid, train only. */
static weft_err known_except(const weft_graph *g, const weft_triple *drop_a, size_t n_a,
                             const weft_triple *drop_b, size_t n_b, weft_triple **out,
                             size_t *n_out, weft_error *err)
{
    weft_triple *both = weft_alloc_array(n_a + n_b, sizeof *both), *drop = NULL;
    size_t n_drop = 0;
    if (!both)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for held-out edges");
    if (n_a)
        memcpy(both, drop_a, n_a * sizeof *both);
    if (n_b)
        memcpy(both + n_a, drop_b, n_b * sizeof *both);
    weft_err rc = weft_graph_unique_triples(both, n_a + n_b, false, &drop, &n_drop, NULL, err);
    if (rc == WEFT_OK)
        rc = weft_csr_triples_except(&g->out, drop, n_drop, out, n_out, err);
    free(both);
    free(drop);
    return rc;
}

static weft_err evaluate_splits(const struct inputs *in, const cmd_eval_input *ev,
                                struct results *res, weft_error *err)
{
    weft_triple *known = NULL;
    size_t n_known = 0;
    weft_err rc = WEFT_OK;
    if (in->n_valid) {
        rc = known_except(in->g, in->valid, in->n_valid, in->test, in->n_test, &known,
                          &n_known, err);
        if (rc == WEFT_OK)
            rc = cmd_eval_split_run(ev, "valid", in->valid, in->n_valid, known, n_known,
                                    &res->valid, err);
        res->has_valid = rc == WEFT_OK;
        free(known);
        known = NULL;
    }
    if (rc == WEFT_OK)
        rc = known_except(in->g, in->test, in->n_test, NULL, 0, &known, &n_known, err);
    if (rc == WEFT_OK)
        rc = cmd_eval_split_run(ev, "test", in->test, in->n_test, known, n_known, &res->test,
                                err);
    free(known);
    return rc;
}

/* @p x as the shortest decimal that reads back as the same float (0.1, not 0.100000001). */
double cmd_train_float_json(float x)
{
    char buf[32];
    for (int p = 1; p <= 9; p++) {   /* 9 significant digits always read back exactly */
        snprintf(buf, sizeof buf, "%.*g", p, (double)x);
        if ((float)strtod(buf, NULL) == x)
            break;
    }
    return strtod(buf, NULL);
}

static json_t *model_json(const weft_train_link_config *c, const weft_train_result *run)
{
    json_t *hyper = json_pack(
        "{s:I, s:I, s:I, s:I, s:f, s:f, s:f, s:I, s:I, s:I, s:I, s:f}", "dim", (json_int_t)c->dim,
        "epochs", (json_int_t)c->epochs, "negatives", (json_int_t)c->negatives, "batch",
        (json_int_t)c->batch, "lr", cmd_train_float_json(c->lr), "reg_weight", cmd_train_float_json(c->reg_weight),
        "init", cmd_train_float_json(c->init_scale), "seed", (json_int_t)c->seed, "threads",
        (json_int_t)c->n_threads, "eval_every", (json_int_t)c->eval_every, "patience",
        (json_int_t)c->patience, "time_budget", c->max_seconds);
    return json_pack("{s:s, s:s, s:s, s:s, s:o, s:I, s:I, s:b, s:b}", "kind",
                     weft_model_kind_name(c->kind), "loss", weft_train_loss_name(c->loss),
                     "optimizer", weft_train_optim_name(c->optim), "reg",
                     weft_train_reg_name(c->reg), "hyper", hyper, "epochs_run",
                     (json_int_t)run->epochs_run, "best_epoch", (json_int_t)run->best_epoch,
                     "early_stop", run->is_early_stop, "out_of_time", run->is_out_of_time);
}

static json_t *split_json(const struct train_opts *o, const struct inputs *in, uint64_t seed)
{
    json_t *s = json_pack("{s:s, s:I, s:I, s:I}", "method", in->is_files ? "files" : "holdout",
                          "train", (json_int_t)in->n_train, "valid", (json_int_t)in->n_valid,
                          "test", (json_int_t)in->n_test);
    if (!s)
        return NULL;
    int bad = 0;
    if (!in->is_files) {
        bad |= json_object_set_new(s, "seed", json_integer((json_int_t)seed));
        bad |= json_object_set_new(s, "holdout", json_pack("[f, f]", o->frac_valid,
                                                            o->frac_test));
    } else {
        bad |= json_object_set_new(
            s, "duplicates",
            json_pack("{s:I, s:I, s:I}", "train", (json_int_t)in->parts[0].n_duplicates,
                      "valid", (json_int_t)in->parts[1].n_duplicates, "test",
                      (json_int_t)in->parts[2].n_duplicates));
        for (size_t i = 1; i < 3; i++)
            bad |= json_object_set_new(
                s, i == 1 ? "valid_overlap" : "test_overlap",
                json_pack("{s:I, s:I, s:I}", "in_train", (json_int_t)in->overlap[i].n_shared,
                          "unseen_node", (json_int_t)in->overlap[i].n_unseen_node,
                          "unseen_relation", (json_int_t)in->overlap[i].n_unseen_relation));
    }
    if (bad) {
        json_decref(s);
        return NULL;
    }
    return s;
}

static json_t *build_manifest(const struct train_opts *o, const struct inputs *in,
                              const struct results *res, json_t *curve, json_t *inputs,
                              json_t *model)
{
    const weft_graph *g = in->g;
    weft_names_view rel = weft_names_as_view(&g->relations);
    json_t *graph = json_pack("{s:I, s:I, s:I, s:b, s:I, s:I}", "nodes", (json_int_t)g->nodes.n,
                              "edges", (json_int_t)g->n_edges, "relations",
                              (json_int_t)g->relations.n, "undirected", o->is_undirected,
                              "duplicates", (json_int_t)g->n_duplicates, "self_loops",
                              (json_int_t)g->n_self_loops);
    json_t *metrics = cmd_eval_metrics_json(&res->test, res->has_valid ? &res->valid : NULL,
                                            &rel);
    if (metrics && json_object_set_new(metrics, "split", split_json(o, in, in->split_seed))) {
        json_decref(metrics);
        metrics = NULL;
    }
    return json_pack("{s:o, s:o, s:o, s:o, s:O, s:{s:{s:O, s:O, s:O}}}", "model", model,
                     "graph", graph, "inputs", inputs, "metrics", metrics, "curve", curve,
                     "models", "link", "model", model, "metrics", metrics, "curve", curve);
}

/* The report: the manifest's metrics with the model and the curve, and every model's record
 * when the run trained two. */
weft_err cmd_train_write_report(const char *path, const json_t *manifest, weft_error *err)
{
    json_t *report = json_deep_copy(json_object_get(manifest, "metrics"));
    json_t *models = json_object_get(manifest, "models");
    if (!report || json_object_set(report, "model", json_object_get(manifest, "model")) ||
        json_object_set(report, "curve", json_object_get(manifest, "curve")) ||
        (json_object_size(models) > 1 && json_object_set(report, "models", models))) {
        json_decref(report);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the report");
    }
    int rc = json_dump_file(report, path, JSON_INDENT(2) | JSON_REAL_PRECISION(10));
    json_decref(report);
    return rc ? weft_error_set(err, WEFT_ERR_IO, "%s: cannot write the report", path) : WEFT_OK;
}

struct link_put {
    const weft_graph *g;
    const weft_link_params *params;
    bool is_probability;
    const weft_link_index *index;   /* its index (kind exact: none) */
    cmd_gcn_labels *labels;   /* --model X,gcn: the label model too; else NULL */
};

static weft_err put_link(void *ctx, weft_store_writer *w, json_t *manifest, weft_error *err)
{
    const struct link_put *lp = ctx;
    weft_link_model model = weft_link_params_model(lp->params);
    weft_err rc = weft_snapshot_put_link(w, manifest, lp->g, &model, lp->is_probability, err);
    if (rc == WEFT_OK && lp->params->state)
        rc = weft_snapshot_put_optimizer_state(w, &model, lp->params->state, err);
    if (rc == WEFT_OK)
        rc = weft_link_index_put(w, manifest, lp->index, err);
    if (rc == WEFT_OK && lp->labels)
        rc = cmd_train_gcn_labels_put(lp->labels, w, manifest, err);
    return rc;
}

static void print_inputs(const struct inputs *in, bool is_undirected)
{
    const weft_graph *g = in->g;
    printf("graph: %zu nodes, %zu edges, %zu relations (%zu duplicates dropped)%s\n",
           g->nodes.n, g->n_edges, g->relations.n, g->n_duplicates,
           is_undirected ? ", undirected: both directions stored" : "");
    if (in->is_files)
        printf("split: %zu training, %zu validation, %zu test edges, from files\n", in->n_train,
               in->n_valid, in->n_test);
    else
        printf("split: %zu training, %zu validation, %zu test edges (seed %llu)\n", in->n_train,
               in->n_valid, in->n_test, (unsigned long long)in->split_seed);
}

static void print_run(const weft_train_link_config *c, const weft_train_result *run,
                      double seconds)
{
    printf("trained %s, dim %zu: %zu epochs in %.2fs", weft_model_kind_name(c->kind), c->dim,
           run->epochs_run, seconds);
    if (!isnan(run->best_valid_mrr))
        printf(", kept epoch %zu (validation MRR %.4f)%s", run->best_epoch,
               run->best_valid_mrr, run->is_early_stop ? ", stopped early" : "");
    printf("%s\n", run->is_out_of_time ? " (time budget reached)" : "");
}

/* ---- warm start ---- */

/* Starting rows for a link model, copied out of the live snapshot (the store is closed again
 * before training: one LMDB environment per process). */
struct warm {
    weft_train_warm w;
    uint64_t version;                 /* the snapshot it starts from */
    float *entity, *relation, *state;
    uint8_t *has_entity, *has_relation;
};

static void warm_fini(struct warm *w)
{
    free(w->entity);
    free(w->relation);
    free(w->state);
    free(w->has_entity);
    free(w->has_relation);
}

/* Copy the rows of the live link model whose node or relation name is in @p g. A live model
 * of another kind, dimension or relation layout gives a notice and no warm start. */
static weft_err warm_from_live(const struct train_opts *o, const weft_train_link_config *c,
                               const weft_graph *g, struct warm *out, weft_error *err)
{
    weft_store *s = NULL;
    weft_snapshot *snap = NULL;
    uint64_t live = 0, prev;
    weft_link_view v;
    memset(out, 0, sizeof *out);
    weft_err rc = weft_store_open(o->store, WEFT_STORE_READONLY, 0, &s, err);
    if (rc == WEFT_ERR_NOT_FOUND || rc == WEFT_ERR_IO) {
        printf("warm start: no store yet, starting fresh\n");
        return WEFT_OK;
    }
    if (rc == WEFT_OK)
        rc = weft_store_head(s, &live, &prev, err);
    if (rc == WEFT_OK && live == 0) {
        printf("warm start: no live snapshot, starting fresh\n");
        goto done;
    }
    if (rc == WEFT_OK)
        rc = weft_snapshot_open(s, live, &snap, err);
    if (rc != WEFT_OK)
        goto done;
    if (weft_snapshot_link_view(snap, &v, NULL) != WEFT_OK) {
        printf("warm start: snapshot %llu has no link model, starting fresh\n",
               (unsigned long long)live);
        goto done;
    }
    bool is_reciprocal = c->kind != WEFT_LINK_DOT && c->loss == WEFT_LOSS_SOFTMAX;
    if (v.kind != c->kind || v.dim != c->dim || v.model.has_reciprocal != is_reciprocal) {
        fflush(stdout);
        fprintf(stderr, "weft: notice: no warm start: the live snapshot %llu holds %s of "
                        "dimension %zu%s, this run trains %s of dimension %zu%s\n",
                (unsigned long long)live, weft_model_kind_name(v.kind), v.dim,
                v.model.has_reciprocal ? " with reciprocal relations" : "",
                weft_model_kind_name(c->kind), c->dim,
                is_reciprocal ? " with reciprocal relations" : "");
        goto done;
    }
    size_t n = g->nodes.n, d = c->dim, n_rel = g->relations.n;
    size_t rel_rows = c->kind == WEFT_LINK_DOT ? 0 : n_rel * (is_reciprocal ? 2 : 1);
    out->entity = weft_alloc_array(n, d * sizeof *out->entity);
    out->has_entity = weft_calloc_array(n, 1);
    out->relation = weft_alloc_array(rel_rows + 1, d * sizeof *out->relation);
    out->has_relation = weft_calloc_array(rel_rows + 1, 1);
    if (!out->entity || !out->has_entity || !out->relation || !out->has_relation) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the warm start");
        goto done;
    }
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_names_view rels = weft_names_as_view(&g->relations);
    /* With the optimiser state of the rows kept, so that their first steps stay as small as
     * their last ones were (rows without a starting row start at zero, as fresh ones do). */
    if (v.state && !(out->state = weft_calloc_array(n + rel_rows, sizeof *out->state))) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the warm start");
        goto done;
    }
    size_t kept = 0, kept_rel = 0;
    for (uint32_t u = 0; u < n; u++) {
        size_t len;
        const char *name = weft_names_get(&nodes, u, &len);
        uint32_t old;
        if (weft_names_find(&v.nodes, name, len, &old)) {
            memcpy(out->entity + (size_t)u * d, v.entity + (size_t)old * d, d * sizeof(float));
            out->has_entity[u] = 1;
            if (out->state)
                out->state[u] = v.state[old];
            kept++;
        }
    }
    for (uint32_t r = 0; rel_rows && r < n_rel; r++) {
        size_t len;
        const char *name = weft_names_get(&rels, r, &len);
        uint32_t old;
        if (!weft_names_find(&v.relations, name, len, &old))
            continue;
        for (size_t k = 0; k < (is_reciprocal ? 2u : 1u); k++) {
            size_t to = r + k * n_rel, from = old + k * v.n_relations;
            memcpy(out->relation + to * d, v.model.relation + from * d, d * sizeof(float));
            out->has_relation[to] = 1;
            if (out->state)
                out->state[n + to] = v.state[v.n_nodes + from];
        }
        kept_rel++;
    }
    out->version = live;
    out->w = (weft_train_warm){ out->entity, out->has_entity, rel_rows ? out->relation : NULL,
                                rel_rows ? out->has_relation : NULL, out->state };
    printf("warm start from snapshot %llu: %zu of %zu nodes and %zu of %zu relations keep "
           "their embeddings%s\n", (unsigned long long)live, kept, n, kept_rel, n_rel,
           out->state ? " and optimiser state" : " (the snapshot keeps no optimiser state)");
done:
    weft_snapshot_release(snap);
    weft_store_close(s);
    return rc;
}

static weft_err train_and_evaluate(const struct train_opts *o, struct inputs *in,
                                   weft_train_link_config *cfg,
                                   const weft_train_gcn_config *gcfg, struct results *res,
                                   weft_link_params *params, struct progress *pr,
                                   weft_error *err)
{
    weft_graph *g = in->g;
    weft_eval_filter filter = { &g->out, &g->in, g->n_self_loops == 0 };
    weft_train_validation val = { in->valid, in->n_valid, &filter, !o->is_undirected };
    weft_err rc;
    if (gcfg) {
        rc = cmd_train_gcn_link(o, gcfg, g, in->train, in->n_train, in->valid, in->n_valid,
                                pr->curve, params, &res->run, err);
    } else {
        rc = weft_train_link_run(cfg, in->train, in->n_train, g->nodes.n, g->relations.n,
                                 in->n_valid ? &val : NULL, on_epoch, pr, params, &res->run,
                                 err);
        if (pr->is_tty && !o->is_quiet)
            fputc('\n', stderr);
    }
    if (rc != WEFT_OK)
        return rc;
    if (pr->is_nomem)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory recording the curve");
    if (!gcfg)
        print_run(cfg, &res->run, pr->elapsed);
    weft_link_model model = weft_link_params_model(params);
    cmd_eval_input ev = { g->nodes.n, g->relations.n, !o->is_undirected, &filter, &model,
                          cfg->n_threads, cfg->seed };
    openblas_set_num_threads(1);   /* the evaluation threads each run their own sgemm */
    rc = evaluate_splits(in, &ev, res, err);
    if (rc != WEFT_OK)
        return rc;
    weft_names_view rel = weft_names_as_view(&g->relations);
    if (res->has_valid)
        cmd_eval_print(&res->valid, &rel);
    cmd_eval_print(&res->test, &rel);
    return WEFT_OK;
}

int cmd_train_main(int argc, char **argv)
{
    struct train_opts o;
    int prc = parse_opts(argc, argv, &o);
    if (prc != CMD_OK)
        return prc < 0 ? CMD_OK : prc;
    weft_types types;   /* read by cmd_train_types_load() once the graph is there */
    memset(&types, 0, sizeof types);
    o.types = &types;
    if (o.task == CMD_TRAIN_GCN) {
        int gcn_status = cmd_train_gcn_main(&o);
        weft_types_fini(&types);
        return gcn_status;
    }

    weft_error err;
    weft_error_clear(&err);
    int status = CMD_OK;
    cmd_gcn_labels *labels = NULL;
    struct warm warm = { 0 };   /* before any goto: released at done */
    struct inputs in;
    memset(&in, 0, sizeof in);
    struct results res;
    memset(&res, 0, sizeof res);
    weft_link_params params = { 0 };
    weft_link_index index = { 0 };
    weft_train_link_config cfg;
    json_t *manifest = NULL, *inputs = NULL;
    struct progress pr = { isatty(STDERR_FILENO), o.is_quiet, json_array(), false, 0.0, NAN };
    weft_err rc = pr.curve ? WEFT_OK : weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory");
    if (rc == WEFT_OK)
        rc = load_graph(&o, &in, &err);
    if (rc == WEFT_OK)
        rc = cmd_train_types_load(&o, in.g, &err);
    if (rc != WEFT_OK)
        goto done;
    configure(&o, in.g, &cfg);
    weft_train_gcn_config gcfg;
    bool is_gcn_link = o.task == CMD_TRAIN_GCN_LINK;
    if (is_gcn_link) {
        /* The decoder is the link model that evaluation and serving see. */
        cmd_train_gcn_configure(&o, true, &gcfg);
        cfg.kind = gcfg.decoder;
        cfg.loss = WEFT_LOSS_LOGISTIC;
        cfg.dim = gcfg.out_dim;
    }
    if (!in.is_files && (rc = load_holdout(&o, cfg.seed, &in, &err)) != WEFT_OK)
        goto done;
    print_inputs(&in, o.is_undirected);
    warn_parts(&in);
    if (!in.is_files && in.n_valid == 0 && o.frac_valid > 0)
        fprintf(stderr, "weft: warning: no edge could be held out for validation: no early "
                        "stopping\n");
    if (!(inputs = cmd_train_fingerprints(&o, &err))) {
        rc = err.code ? err.code : weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory");
        goto done;
    }
    if (o.is_warm_start && !is_gcn_link) {
        if ((rc = warm_from_live(&o, &cfg, in.g, &warm, &err)) != WEFT_OK)
            goto done;
        cfg.warm = warm.entity ? &warm.w : NULL;
        if (cfg.warm) {
            /* Training draws (edge order, negatives) of their own: with the seed's, a warm
             * run would replay the draws of the run it continues, edge for edge. The split
             * keeps the seed. */
            cfg.seed ^= (warm.version + 1) * 0x9e3779b97f4a7c15ull;
            printf("warm start: training draws from seed %llu\n", (unsigned long long)cfg.seed);
        }
    }
    if (!is_gcn_link)
        print_config(&cfg);
    if ((rc = train_and_evaluate(&o, &in, &cfg, is_gcn_link ? &gcfg : NULL, &res, &params, &pr,
                                 &err)) != WEFT_OK)
        goto done;

    json_t *model = is_gcn_link ? cmd_train_gcn_model_json(&gcfg, true, res.run.epochs_run,
                                                           res.run.is_early_stop,
                                                           o.features ? "features" : "embedding")
                                : model_json(&cfg, &res.run);
    if (model)
        manifest = build_manifest(&o, &in, &res, pr.curve, inputs, model);
    else
        json_decref(inputs);
    inputs = NULL;   /* the manifest owns it now */
    if (!manifest) {
        rc = weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory building the manifest");
        goto done;
    }
    if (o.also_gcn) {
        json_t *entry = NULL;
        if ((rc = cmd_train_gcn_labels(&o, in.g, &labels, &entry, &err)) != WEFT_OK)
            goto done;
        if (json_object_set_new(json_object_get(manifest, "models"), "labels", entry)) {
            rc = weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory building the manifest");
            goto done;
        }
    }
    weft_link_model trained = weft_link_params_model(&params);
    if ((rc = cmd_train_index_build(&o, &trained, manifest, &index, &err)) != WEFT_OK)
        goto done;
    if (o.report && (rc = cmd_train_write_report(o.report, manifest, &err)) != WEFT_OK)
        goto done;
    struct link_put lp = { in.g, &params, cfg.loss == WEFT_LOSS_LOGISTIC, &index, labels };
    cmd_train_outcome outcome;
    if ((rc = cmd_train_store(&o, in.g, manifest, put_link, &lp, &outcome, &err)) != WEFT_OK)
        goto done;
    status = cmd_train_report_outcome(&o, &outcome);
    if (labels)
        cmd_train_gcn_caution();
done:
    weft_link_index_fini(&index);
    json_decref(manifest);
    json_decref(inputs);
    json_decref(pr.curve);
    results_fini(&res);
    weft_link_params_fini(&params);
    inputs_fini(&in);
    cmd_train_gcn_labels_free(labels);
    warm_fini(&warm);
    weft_types_fini(&types);
    return rc == WEFT_OK ? status : cmd_report_error(&err);
}
