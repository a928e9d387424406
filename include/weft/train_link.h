/* weft: training link models (dot, DistMult, ComplEx) with negative sampling or 1-vs-all
 * scoring, Adagrad or Adam, L2 or N3 regularisation, and early stopping on validation MRR. */
#ifndef WEFT_TRAIN_LINK_H
#define WEFT_TRAIN_LINK_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/model.h"

/** Training losses. */
typedef enum weft_loss {
    /** Each positive against N = cfg->negatives uniform corruptions of its head or tail:
     *  softplus(-x_pos) + (1/N) sum softplus(x_neg). */
    WEFT_LOSS_LOGISTIC = 1,
    /** Softmax cross-entropy of the true tail over all nodes ("1-vs-all", Dettmers et al.
     *  2018; Lacroix et al. 2018), heads through reciprocal relations r + n_relations. */
    WEFT_LOSS_SOFTMAX = 2
} weft_loss;

/** Optimisers. */
typedef enum weft_optim {
    WEFT_OPTIM_ADAGRAD = 1,  /**< Duchi, Hazan & Singer 2011 */
    WEFT_OPTIM_ADAM = 2      /**< Kingma & Ba 2015, beta1 0.9, beta2 0.999, eps 1e-8 */
} weft_optim;

/** Regularisers, applied to the embeddings each step touches. */
typedef enum weft_reg {
    WEFT_REG_L2 = 1,   /**< weight * sum x^2 */
    WEFT_REG_N3 = 2    /**< weight * sum |x|^3 (Lacroix, Usunier & Obozinski 2018), moduli for ComplEx */
} weft_reg;

/** "logistic", "softmax", "adagrad", "adam", "l2", "n3"; parse returns false when unknown. */
const char *weft_train_loss_name(weft_loss v);
bool weft_train_loss_parse(const char *s, weft_loss *out);
const char *weft_train_optim_name(weft_optim v);
bool weft_train_optim_parse(const char *s, weft_optim *out);
const char *weft_train_reg_name(weft_reg v);
bool weft_train_reg_parse(const char *s, weft_reg *out);

/**
 * A warm start: rows to begin from instead of random ones (nodes and relations that persist
 * from an earlier model keep their embeddings; the others start fresh). Indexed by the ids of
 * the graph being trained; the layout of weft_link_params (relation rows r, then with
 * reciprocal relations r + n_relations).
 */
typedef struct weft_train_warm {
    const float *entity;           /**< (n_entities, dim) */
    const uint8_t *has_entity;     /**< (n_entities): 1 where entity holds a starting row */
    const float *relation;         /**< (relation rows, dim), or NULL */
    const uint8_t *has_relation;   /**< (relation rows), or NULL */
    const float *state;            /**< (n_entities + relation rows), or NULL: the optimiser
                                        state of each starting row (weft_link_params.state of
                                        the run it comes from). Without it a starting row's
                                        first Adagrad step moves each coordinate by the full
                                        learning rate, as a fresh row's does, and undoes much
                                        of the earlier training. */
} weft_train_warm;

/** Hyper-parameters of one training run. */
typedef struct weft_train_link_config {
    weft_link_kind kind;
    weft_loss loss;
    weft_optim optim;
    weft_reg reg;
    size_t dim;          /**< embedding size (ComplEx: real + imaginary parts, even) */
    size_t epochs;       /**< most passes over the training edges */
    size_t negatives;    /**< logistic loss: corruptions per positive, half heads and half
                              tails, drawn once per batch and shared by its positives */
    size_t batch;        /**< queries (softmax) or positives (logistic) per step; logistic: 0
                              picks about m / 100, within 16 to 1000 */
    size_t n_threads;    /**< threads; 1 with a fixed seed gives bit-identical parameters (with
                              weft's own GEMM, any count does: weft_gemm_is_native()) */
    float lr;
    float reg_weight;
    float init_scale;    /**< initial embeddings ~ N(0, init_scale^2) */
    uint64_t seed;
    size_t eval_every;   /**< epochs between validation evaluations (>= 1) */
    size_t patience;     /**< evaluations without a better validation MRR before stopping; 0: never */
    double max_seconds;  /**< training time budget: no epoch starts that would end past it, as
                              judged by the last epoch's time; 0: none */
    const weft_train_warm *warm;   /**< NULL: every row starts random. Borrowed for the run.
                                        The random rows are drawn either way, so a warm run's
                                        fresh rows equal a cold run's with the same seed. */
} weft_train_link_config;

/**
 * Fill @p c with the defaults for @p kind, @p loss (0: let weft choose) and a graph of
 * @p n_entities nodes: what users get without tuning flags. Typed relations get the softmax
 * loss (1-vs-all) while a batch of scores fits in memory, the logistic loss beyond; dot gets
 * the logistic loss. The values and their sources are in train_link.c.
 */
void weft_train_link_defaults(weft_train_link_config *c, weft_link_kind kind, weft_loss loss,
                              size_t n_entities);

/** Validation data for early stopping; the filter is every known true triple. */
typedef struct weft_train_validation {
    const weft_triple *valid;
    size_t n_valid;
    const weft_eval_filter *filter;
    bool both_directions;
} weft_train_validation;

/** What one finished epoch reports. */
typedef struct weft_train_epoch {
    size_t epoch, epochs;   /**< 1-based epoch, most epochs */
    double loss;            /**< mean loss per training query of this epoch */
    double seconds;         /**< wall time of this epoch's training (validation excluded) */
    double triples_per_s;   /**< training edges per second */
    double valid_mrr;       /**< filtered validation MRR after this epoch, NaN if not evaluated */
    double eval_seconds;    /**< wall time of that evaluation */
    size_t best_epoch;      /**< epoch of the best validation MRR so far (0: none yet) */
} weft_train_epoch;

/** Called after each epoch; may be NULL. */
typedef void (*weft_train_progress_fn)(void *ctx, const weft_train_epoch *ep);

/**
 * Trained parameters: one slab holds entity then relation embeddings; entity and relation
 * are views into it. Release with weft_link_params_fini().
 */
typedef struct weft_link_params {
    weft_link_kind kind;
    size_t n_entities, n_relations, dim;
    bool has_reciprocal;   /**< relation holds 2 * n_relations rows: r, then its inverse */
    float *slab;
    float *entity;         /**< (n_entities, dim) */
    float *relation;       /**< (n_relations or 2 * n_relations, dim); NULL for dot */
    float *state;          /**< (n_entities + relation rows): each row's mean second-moment
                                state of the optimiser when training ended (Adagrad's sums of
                                squared gradients, Adam's v), for a later warm start; NULL
                                when not kept */
} weft_link_params;

/** How a run ended. */
typedef struct weft_train_result {
    size_t epochs_run;
    size_t best_epoch;        /**< epoch whose parameters were kept (the last without validation) */
    double best_valid_mrr;    /**< NaN without validation */
    bool is_early_stop;       /**< stopped by patience */
    bool is_out_of_time;      /**< stopped by max_seconds */
    double train_seconds;     /**< training time, validation excluded */
    double eval_seconds;      /**< validation time */
} weft_train_result;

/**
 * Train on @p train (m triples over @p n_entities nodes and @p n_relations relations).
 * With @p val (may be NULL) the filtered validation MRR is computed every cfg->eval_every
 * epochs and the parameters of the best evaluation are kept; training stops after
 * cfg->patience evaluations without improvement.
 * @param out     on success, the parameters (caller releases with weft_link_params_fini())
 * @param result  may be NULL
 * @return WEFT_OK, WEFT_ERR_INVALID (bad config, m == 0), WEFT_ERR_NOMEM
 */
weft_err weft_train_link_run(const weft_train_link_config *cfg, const weft_triple *train,
                             size_t m, size_t n_entities, size_t n_relations,
                             const weft_train_validation *val, weft_train_progress_fn progress,
                             void *ctx, weft_link_params *out, weft_train_result *result,
                             weft_error *err);

/** Release @p p's slab; NULL does nothing. */
void weft_link_params_fini(weft_link_params *p);

/** A read-only model view of @p p (valid while @p p is). */
weft_link_model weft_link_params_model(const weft_link_params *p);

#endif
