/* weft: training link models with negative sampling, the logistic loss and Adagrad. */
#ifndef WEFT_TRAIN_LINK_H
#define WEFT_TRAIN_LINK_H

#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"
#include "weft/model.h"

/** Hyper-parameters of one training run. */
typedef struct weft_train_link_config {
    weft_link_kind kind;
    size_t dim;        /**< embedding size */
    size_t epochs;     /**< passes over the training edges */
    size_t negatives;  /**< corrupted triples per positive (head or tail, uniformly) */
    size_t n_threads;  /**< Hogwild-style threads; 1 gives bit-identical runs per seed */
    float lr;          /**< Adagrad learning rate */
    float l2;          /**< L2 penalty on the embeddings each step touches */
    uint64_t seed;
} weft_train_link_config;

/** Fill @p c with the defaults: dot, dim 64, 50 epochs, 5 negatives, lr 0.1, l2 1e-5, seed 1, 1 thread. */
void weft_train_link_defaults(weft_train_link_config *c);

/** What one finished epoch reports. */
typedef struct weft_train_epoch {
    size_t epoch, epochs;   /**< 1-based epoch, total */
    double loss;            /**< mean loss per positive edge (positive plus its negatives) */
    double seconds;         /**< wall time of this epoch */
    double triples_per_s;   /**< positive edges per second */
} weft_train_epoch;

/** Called after each epoch; may be NULL. */
typedef void (*weft_train_progress_fn)(void *ctx, const weft_train_epoch *ep);

/**
 * Trained parameters. One slab holds parameters then Adagrad accumulators; entity and
 * relation are views into it. Release with weft_link_params_fini().
 */
typedef struct weft_link_params {
    weft_link_kind kind;
    size_t n_entities, n_relations, dim;
    float *slab;
    float *entity;     /**< (n_entities, dim) */
    float *relation;   /**< (n_relations, dim), NULL for dot */
    float *accum;      /**< Adagrad sums of squared gradients, same layout as the parameters */
} weft_link_params;

/**
 * Train on @p train (m triples over @p n_entities nodes and @p n_relations relations).
 * Each positive (s, r, t) is paired with cfg->negatives corruptions, each replacing the head
 * or the tail (a fair coin) by a uniformly drawn node; loss per positive is
 * softplus(-x_pos) + sum softplus(x_neg) (the logistic loss), minimised by Adagrad
 * (Duchi, Hazan & Singer 2011) with a per-coordinate step lr / sqrt(eps + sum g^2).
 * @param out  on success, the parameters (caller releases with weft_link_params_fini())
 * @return WEFT_OK, WEFT_ERR_INVALID (bad config, m == 0), WEFT_ERR_NOMEM
 */
weft_err weft_train_link_run(const weft_train_link_config *cfg, const weft_triple *train,
                             size_t m, size_t n_entities, size_t n_relations,
                             weft_train_progress_fn progress, void *ctx, weft_link_params *out,
                             weft_error *err);

/** Release @p p's slab; NULL does nothing. */
void weft_link_params_fini(weft_link_params *p);

/** A read-only model view of @p p (valid while @p p is). */
weft_link_model weft_link_params_model(const weft_link_params *p);

#endif
