/* weft train: what the link and GCN halves of the subcommand share (server/cmd_train.c,
 * server/cmd_train_gcn.c). Not part of libweft. */
#ifndef WEFT_SERVER_CMD_TRAIN_H
#define WEFT_SERVER_CMD_TRAIN_H

#include <jansson.h>
#include <stdbool.h>
#include <stddef.h>

#include "cmd.h"
#include "weft/graph.h"
#include "weft/link_index.h"
#include "weft/store.h"
#include "weft/train_gcn.h"
#include "weft/train_link.h"
#include "weft/types.h"

#define MAX_EDGE_FILES 64

/** What a run trains. */
typedef enum cmd_train_task {
    CMD_TRAIN_LINK = 0,     /**< dot, distmult, complex */
    CMD_TRAIN_GCN = 1,      /**< node classification */
    CMD_TRAIN_GCN_LINK = 2  /**< GCN encoder, dot or DistMult decoder */
} cmd_train_task;

/* GCN flags the user gave. */
enum {
    GIVEN_GCN_LAYERS = 1u << 0,
    GIVEN_GCN_HIDDEN = 1u << 1,
    GIVEN_GCN_ACT = 1u << 2,
    GIVEN_GCN_DROPOUT = 1u << 3,
    GIVEN_GCN_WEIGHT_DECAY = 1u << 4,
    GIVEN_GCN_NORM = 1u << 5,
    GIVEN_GCN_BIAS = 1u << 6,
    GIVEN_GCN_DECODER = 1u << 7
};

/* Tuning flags the user gave: each overrides what weft_train_link_defaults() chose. */
enum {
    GIVEN_MODEL = 1u << 0,
    GIVEN_LOSS = 1u << 1,
    GIVEN_OPTIM = 1u << 2,
    GIVEN_REG = 1u << 3,
    GIVEN_REG_WEIGHT = 1u << 4,
    GIVEN_LR = 1u << 5,
    GIVEN_DIM = 1u << 6,
    GIVEN_EPOCHS = 1u << 7,
    GIVEN_NEGATIVES = 1u << 8,
    GIVEN_BATCH = 1u << 9,
    GIVEN_INIT = 1u << 10,
    GIVEN_SEED = 1u << 11,
    GIVEN_THREADS = 1u << 12,
    GIVEN_EVAL_EVERY = 1u << 13,
    GIVEN_PATIENCE = 1u << 14,
    GIVEN_TIME_BUDGET = 1u << 15
};

struct train_opts {
    const char *store;
    const char *edges[MAX_EDGE_FILES];
    size_t n_edges;
    const char *valid, *test;     /* files; NULL with a holdout */
    const char *report;
    double frac_valid, frac_test;
    bool has_holdout;
    bool is_undirected;
    bool is_quiet;
    unsigned given;               /* GIVEN_* */
    weft_train_link_config set;   /* the values of the given flags */
    /* GCN (cmd_train_gcn.c) */
    cmd_train_task task;
    bool also_gcn;                /* --model X,gcn: a GCN on the labels as well */
    const char *labels, *features, *split;
    /* node types (cmd_train_store.c) */
    const char *types_file;       /* --types FILE, or NULL */
    weft_types *types;            /* loaded by cmd_train_types_load(); owned by the caller of
                                     the run (cmd_train_main); NULL or empty when none */
    bool is_raw_features;         /* --raw-features: no row normalisation */
    /* the gate (cmd_train_store.c) */
    bool is_force, is_no_promote;
    bool is_warm_start;           /* --warm-start: link rows from the live snapshot */
    double gate_tolerance;
    unsigned given_gcn;           /* GIVEN_GCN_* */
    weft_train_gcn_config gset;   /* the values of the given GCN flags */
    /* the link model's index (cmd_train_index.c) */
    weft_link_index_settings index;
    bool is_index_tuned;          /* an --index-* setting was given */
    bool is_oversample_given;     /* --index-oversample was: --index keeps it */
};

/**
 * SHA-256 fingerprints of every input file of @p o, as [{"role", "path", "sha256"}].
 * A new reference; NULL on failure (then @p err says why, or nothing when out of memory).
 */
json_t *cmd_train_fingerprints(const struct train_opts *o, weft_error *err);

/**
 * Read every --edges file of @p o into @p g and finalize it. A graph left without edges (its
 * files hold only blank lines and comments) is refused naming the files.
 * @return WEFT_OK, WEFT_ERR_INVALID (no edges), the codes of weft_graph_load_edges()
 */
weft_err cmd_train_load_edges(const struct train_opts *o, weft_graph *g, weft_error *err);

/** "1h02m", "3m05s", "12s". */
void cmd_train_format_duration(char *out, size_t cap, double s);

/** @p x as the shortest decimal that reads back as the same float. */
double cmd_train_float_json(float x);

/** Write the report: the manifest's "metrics" with its "model" and "curve". */
weft_err cmd_train_write_report(const char *path, const json_t *manifest, weft_error *err);

/** Writes the blobs of the model(s) trained in this run into @p w. */
typedef weft_err (*cmd_train_put_fn)(void *ctx, weft_store_writer *w, json_t *manifest,
                                     weft_error *err);

/** What became of a stored snapshot. */
typedef struct cmd_train_outcome {
    uint64_t version;
    bool is_live;          /**< promoted */
    bool is_rejected;      /**< stored as rejected by the gate */
    bool is_forced;        /**< promoted by --force past a failed gate */
    char reason[320];      /**< why the gate refused it ("" when it passed) */
} cmd_train_outcome;

/**
 * Store the run's model(s) as the next snapshot of o->store (server/cmd_train_store.c).
 * @p manifest must hold "models": {"link"|"labels": {"model", "metrics", "curve"}} for each
 * part trained in this run; their blobs are written by @p put. Then: the gate (each trained
 * part beats its baselines, and its key metric, test MRR or accuracy, is at most
 * o->gate_tolerance below the live snapshot's) is recorded as "gate"; the part not trained is
 * carried over from the live snapshot when @p g's node table equals its own (else dropped,
 * with a notice); the snapshot is committed live, rejected, or staged (--no-promote).
 */
weft_err cmd_train_store(const struct train_opts *o, const weft_graph *g, json_t *manifest,
                         cmd_train_put_fn put, void *ctx, cmd_train_outcome *out,
                         weft_error *err);

/**
 * Read o->types_file (when given) for the nodes of final graph @p g into *o->types, and say
 * how many nodes got a type. Called right after the graph is loaded, so that a bad file
 * fails the run before training. The types are written with the snapshot's node table by
 * cmd_train_store(); a run without --types stores none (they are not carried over).
 * @return WEFT_OK, the codes of weft_types_load() (unknown node: "file:line: ...")
 */
weft_err cmd_train_types_load(const struct train_opts *o, const weft_graph *g, weft_error *err);

/** Print what became of the snapshot. @return CMD_OK, or CMD_REJECTED when the gate refused it. */
int cmd_train_report_outcome(const struct train_opts *o, const cmd_train_outcome *oc);

/** Exit status of a run whose snapshot the gate refused (stored as rejected). */
enum { CMD_REJECTED = 3 };

/** Default --gate-tolerance: how far below the live key metric a new snapshot may fall
 *  (absolute; our choice: about the spread of test MRR or accuracy between seeds). */
#define CMD_TRAIN_GATE_TOLERANCE 0.01

/* ---- cmd_train_index.c ---- */

/** Parse the --index flags; returns 1 when argv[*i] is one (*rc its verdict), else 0. */
int cmd_train_index_parse(int argc, char **argv, int *i, struct train_opts *o, int *rc);

/** Check the index flags against the task. @return CMD_OK or CMD_USAGE (printed). */
int cmd_train_index_check(const struct train_opts *o);

/** The usage text of the index flags. */
void cmd_train_index_help(void);

/**
 * Build and measure the index o->index asks for over link model @p m (nothing for exact),
 * print a line about it and add its record to @p manifest's "models"."link" as "index" (the
 * gate reads it there). Free @p out with weft_link_index_fini().
 */
weft_err cmd_train_index_build(const struct train_opts *o, const weft_link_model *m,
                               json_t *manifest, weft_link_index *out, weft_error *err);

/* ---- cmd_train_gcn.c ---- */

/** Parse the GCN flags; returns 1 when argv[*i] is one (*rc its verdict), else 0. */
int cmd_train_gcn_parse(int argc, char **argv, int *i, struct train_opts *o, int *rc);

/** Check the flags given against the task. @return CMD_OK or CMD_USAGE (printed). */
int cmd_train_gcn_check(const struct train_opts *o);

/** The usage text of the GCN flags. */
void cmd_train_gcn_help(void);

/** `weft train --model gcn`: the whole run. @return the exit status. */
int cmd_train_gcn_main(const struct train_opts *o);

/** The labels half of a run that trains a link model and a GCN (`--model distmult,gcn`). */
typedef struct gcn_run cmd_gcn_labels;

/**
 * Train the GCN of `--model X,gcn` on the final graph @p g of the link half (borrowed; the
 * same node table), printing as `--model gcn` does.
 * @param out    on success, the trained labels (cmd_train_gcn_labels_free())
 * @param entry  on success, its manifest record {"model", "metrics", "curve"} (a new reference)
 */
weft_err cmd_train_gcn_labels(const struct train_opts *o, weft_graph *g, cmd_gcn_labels **out,
                              json_t **entry, weft_error *err);
/** A cmd_train_put_fn writing the label blobs; @p ctx is a cmd_gcn_labels. */
weft_err cmd_train_gcn_labels_put(void *ctx, weft_store_writer *w, json_t *manifest,
                                  weft_error *err);
void cmd_train_gcn_labels_free(cmd_gcn_labels *l);
/** Print the caution every run that stores class probabilities ends with. */
void cmd_train_gcn_caution(void);

/** The GCN configuration of @p o (defaults, then the flags given). */
void cmd_train_gcn_configure(const struct train_opts *o, bool is_link, weft_train_gcn_config *c);

/**
 * gcn-link: train on @p train over the final graph @p g (node features from o->features if
 * given), appending epochs to @p curve, then fill @p params (the decoder's view) and @p run.
 */
weft_err cmd_train_gcn_link(const struct train_opts *o, const weft_train_gcn_config *cfg,
                            const weft_graph *g, const weft_triple *train, size_t m,
                            const weft_triple *valid, size_t n_valid, json_t *curve,
                            weft_link_params *params, weft_train_result *run, weft_error *err);

/** The manifest's "model" of a GCN run. A new reference, NULL when out of memory. */
json_t *cmd_train_gcn_model_json(const weft_train_gcn_config *c, bool is_link,
                                 size_t epochs_run, bool is_early_stop, const char *input);

#endif
