/* The weft binary's subcommands and the small helpers they share. Not part of libweft. */
#ifndef WEFT_SERVER_CMD_H
#define WEFT_SERVER_CMD_H

#include <signal.h>
#include <stdarg.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <jansson.h>

#include "weft/error.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/names.h"

/** Exit statuses of every subcommand. */
enum { CMD_OK = 0, CMD_FAIL = 1, CMD_USAGE = 2 };

/* Each subcommand gets argv with argv[0] = the subcommand name and returns an exit status. */
int cmd_inspect_main(int argc, char **argv);
int cmd_train_main(int argc, char **argv);
int cmd_serve_main(int argc, char **argv);
int cmd_eval_main(int argc, char **argv);
int cmd_worker_main(int argc, char **argv);

/**
 * Read and check the configuration file @p path as `weft worker` does before it starts
 * (server/cmd_worker.c), then forget it: the first problem is printed on stderr as
 * "weft: path:line: reason". For tests/fuzz/fuzz_worker_config.c.
 * @return true when the file is a valid configuration
 */
bool cmd_worker_read_config(const char *path);
int cmd_snapshots_main(int argc, char **argv);
int cmd_demo_main(int argc, char **argv);
int cmd_sync_main(int argc, char **argv);

/** Print "weft: <err->msg>" on stderr; returns CMD_FAIL. */
int cmd_report_error(const weft_error *err);

/** Print "weft <sub>: <message>" and a pointer to --help on stderr; returns CMD_USAGE. */
int cmd_usage_error(const char *sub, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/**
 * Parse @p text as a whole decimal integer in [min, max] for option @p flag.
 * @return true and *out on success; false after printing a usage error.
 */
bool cmd_parse_u64(const char *sub, const char *flag, const char *text, uint64_t min,
                   uint64_t max, uint64_t *out);

/**
 * A duration: a number of seconds, or a number with s, m, h or d ("90", "5m", "1.5h", "7d"),
 * from 0 to 1e9 units. @return true and *@p seconds; false (nothing printed) otherwise.
 */
bool cmd_parse_duration(const char *text, double *seconds);

/** Parse @p text as a finite number in [min, max] for option @p flag (same contract). */
bool cmd_parse_double(const char *sub, const char *flag, const char *text, double min,
                      double max, double *out);

/**
 * Option scanner for "--name value" and "--name=value" forms. Returns the value of option
 * @p name at argv[*i] (advancing *i past a separate value), or NULL when argv[*i] is not
 * that option. A missing value prints a usage error and sets *@p bad.
 */
const char *cmd_opt_value(const char *sub, int argc, char **argv, int *i, const char *name,
                          bool *bad);

/** Log a line "<UTC time> weft <who>: <message>" on stderr (serve, worker). */
void cmd_log(const char *who, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
void cmd_vlog(const char *who, const char *fmt, va_list ap) __attribute__((format(printf, 2, 0)));

/** Sleep @p seconds, or less once *@p stop is set (a signal handler's flag; seen within
 *  0.1 s). The loops of worker and sync wait here. */
void cmd_nap(double seconds, const volatile sig_atomic_t *stop);

/** Online CPUs (at least 1): the default thread count of train and eval. */
size_t cmd_online_cpus(void);

/**
 * One manifest @p m summarised as `weft snapshots list --json` and GET /v1/snapshots show it:
 * version, state, created, is_previous (against @p previous), bytes, "link" {kind, test_mrr}
 * and "labels" {kind, test_accuracy} when present, and reason, forced, origin when set. A new
 * reference; NULL when out of memory. (server/cmd_snapshots.c)
 */
json_t *cmd_snapshots_summary_json(const json_t *m, uint64_t previous);

/* ---- Link evaluation shared by `weft train` and `weft eval` (server/cmd_eval.c) ---- */

/** Sampled non-edges per held-out edge for AUC-ROC and AP on one-relation graphs. */
#define CMD_EVAL_NEGATIVES_PER_EDGE 1

/** What one scorer (the model or a baseline) measures on one split. */
typedef struct cmd_eval_scores {
    weft_rank_metrics overall;
    weft_rank_metrics *per_relation;   /**< (n_relations); owned */
    bool has_binary;                   /**< one-relation graph: AUC-ROC and AP below */
    weft_binary_metrics binary;
} cmd_eval_scores;

/** One split (valid or test) measured for the model and the popularity baseline. */
typedef struct cmd_eval_split {
    const char *name;                  /**< "valid", "test"; static */
    size_t n_edges;                    /**< as stored: both directions when undirected */
    cmd_eval_scores model, popularity;
} cmd_eval_split;

/** What every evaluation of one model shares. */
typedef struct cmd_eval_input {
    size_t n_nodes, n_relations;
    bool both_directions;              /**< rank heads too (false when undirected) */
    const weft_eval_filter *filter;    /**< every known true triple, the evaluated ones too */
    const weft_link_model *model;
    size_t n_threads;
    uint64_t seed;                     /**< of the sampled negatives (mixed with the split name) */
} cmd_eval_input;

/**
 * Measure @p edges (n, unique) for the model and for the popularity baseline counted over
 * @p known (n_known edges: what is known besides the split). On a one-relation graph also
 * AUC-ROC and AP against CMD_EVAL_NEGATIVES_PER_EDGE sampled non-edges per edge, the same
 * negatives for model and baseline. Release @p out with cmd_eval_split_fini().
 */
weft_err cmd_eval_split_run(const cmd_eval_input *in, const char *name, const weft_triple *edges,
                            size_t n, const weft_triple *known, size_t n_known,
                            cmd_eval_split *out, weft_error *err);

/** Release @p s's arrays; NULL does nothing. */
void cmd_eval_split_fini(cmd_eval_split *s);

/** True when the model beats the popularity baseline on MRR (and on AUC where measured). */
bool cmd_eval_beats_baseline(const cmd_eval_split *s);

/** Print @p s as a table (model | popularity), then per relation, on stdout. */
void cmd_eval_print(const cmd_eval_split *s, const weft_names_view *relations);

/**
 * The metrics JSON of a report and of a manifest's "metrics": "test" and "valid" (metric ->
 * value; valid {} when @p valid is NULL), "per_relation" (test, relation -> metrics),
 * "valid_per_relation", "baselines" ({"popularity": test metrics}), "valid_baselines",
 * "per_relation_baselines" ({"popularity": relation -> metrics}) and "beats_baselines".
 * A new reference; NULL when out of memory.
 */
json_t *cmd_eval_metrics_json(const cmd_eval_split *test, const cmd_eval_split *valid,
                              const weft_names_view *relations);

#endif
