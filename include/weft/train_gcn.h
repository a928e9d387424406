/* weft: full-batch GCN training with Adam, dropout, weight decay and early stopping on the
 * validation loss, for node classification (gcn) and for link prediction (gcn-link). */
#ifndef WEFT_TRAIN_GCN_H
#define WEFT_TRAIN_GCN_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/model_gcn.h"
#include "weft/sparse.h"
#include "weft/train_link.h"

/** Hyper-parameters of one GCN run. */
typedef struct weft_train_gcn_config {
    size_t n_layers;         /**< mixing layers (>= 1) */
    size_t hidden;           /**< width of every hidden layer */
    size_t in_dim;           /**< width of the learned input embedding (without features) */
    size_t out_dim;          /**< gcn-link: width of the output embeddings */
    weft_gcn_act act;
    weft_sparse_norm norm;   /**< WEFT_SPARSE_NORM_SYM or _ROW */
    bool has_bias;
    float dropout;           /**< probability of dropping an input entry of each layer */
    float weight_decay;      /**< weight * 0.5 * sum x^2 over the first layer's weights (and the
                                  learned embedding), as Kipf & Welling 2017 */
    float lr;                /**< Adam learning rate */
    size_t epochs;
    size_t patience;         /**< stop when the validation loss exceeds the mean of the previous
                                  @p patience epochs' (Kipf & Welling's window); 0: never */
    uint64_t seed;
    size_t n_threads;
    weft_link_kind decoder;  /**< gcn-link: WEFT_LINK_DOT or WEFT_LINK_DISTMULT */
    size_t negatives;        /**< gcn-link: uniform corruptions per training edge and epoch */
} weft_train_gcn_config;

/** Defaults for node classification (@p is_link false) or gcn-link; sources in train_gcn.c. */
void weft_train_gcn_defaults(weft_train_gcn_config *c, bool is_link);

/** What one finished epoch reports. */
typedef struct weft_gcn_epoch {
    size_t epoch, epochs;      /**< 1-based epoch, most epochs */
    double train_loss;         /**< loss on the training nodes or edges (with dropout) */
    double valid_loss;         /**< NaN without validation */
    double valid_accuracy;     /**< classification; NaN for gcn-link or without validation */
    double seconds;            /**< wall time of the epoch, validation forward pass included */
} weft_gcn_epoch;

typedef void (*weft_gcn_progress_fn)(void *ctx, const weft_gcn_epoch *ep);

/** How a run ended. */
typedef struct weft_gcn_result {
    size_t epochs_run;
    bool is_early_stop;
    double train_seconds;
    double seconds_per_epoch;  /**< median */
} weft_gcn_result;

/**
 * A trained GCN with what evaluation and serving need: the shape and parameters, and from an
 * evaluation-mode forward pass the output of every node and the messages U_{n_layers-1}.
 */
typedef struct weft_gcn_trained {
    weft_gcn_shape shape;
    weft_gcn_params params;
    float *output;      /**< (n_nodes, out): class probabilities (softmax of the logits), or
                             link embeddings */
    float *message;     /**< (n_nodes, out): U of the last layer, for weft_gcn_attribute() */
    float *relation;    /**< gcn-link with DistMult: (n_relations, out); else NULL */
} weft_gcn_trained;

/** Release @p t; NULL does nothing. */
void weft_gcn_trained_fini(weft_gcn_trained *t);

/**
 * Node classification: minimise the mean cross-entropy of the labelled training nodes
 * (@p part[v] == WEFT_LABEL_TRAIN) plus the weight decay, full-batch, and stop early on the
 * validation nodes' loss.
 * @param adj       normalised adjacency A' (weft_sparse_adjacency)
 * @param x         node features (n, F), or NULL for a learned embedding of cfg->in_dim
 * @param y         (n): class id in [0, n_classes), or -1
 * @param part      (n): weft_label_part
 * @return WEFT_OK, WEFT_ERR_INVALID (bad config, no training node), WEFT_ERR_NOMEM
 */
weft_err weft_train_gcn_classify(const weft_train_gcn_config *cfg, const weft_sparse *adj,
                                 const weft_sparse *x, const int32_t *y, const uint8_t *part,
                                 size_t n_classes, weft_gcn_progress_fn progress, void *ctx,
                                 weft_gcn_trained *out, weft_gcn_result *result,
                                 weft_error *err);

/**
 * Link prediction (graph auto-encoder style, Kipf & Welling 2016): GCN layers over the
 * training edges' adjacency @p adj give node embeddings Z; a dot or DistMult decoder scores
 * (s, r, t); the loss is the logistic loss of each training edge against cfg->negatives
 * uniform corruptions of its tail or head (alternating), resampled every epoch. Early
 * stopping uses the same loss on @p valid against corruptions drawn once.
 * @return WEFT_OK, WEFT_ERR_INVALID, WEFT_ERR_NOMEM
 */
weft_err weft_train_gcn_link(const weft_train_gcn_config *cfg, const weft_sparse *adj,
                             const weft_sparse *x, const weft_triple *train, size_t m,
                             const weft_triple *valid, size_t n_valid, size_t n_relations,
                             weft_gcn_progress_fn progress, void *ctx, weft_gcn_trained *out,
                             weft_gcn_result *result, weft_error *err);

/**
 * The link parameters of a trained gcn-link model, for evaluation and snapshots: entity =
 * the output embeddings, relation = the decoder's (DistMult) rows. The slab is a copy.
 * @return WEFT_OK, WEFT_ERR_NOMEM
 */
weft_err weft_train_gcn_link_params(const weft_gcn_trained *t, const weft_train_gcn_config *cfg,
                                    size_t n_relations, weft_link_params *out, weft_error *err);

#endif
