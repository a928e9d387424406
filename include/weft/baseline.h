/* weft: trivial predictors every model must beat, scored like models. */
#ifndef WEFT_BASELINE_H
#define WEFT_BASELINE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"
#include "weft/sparse.h"

/**
 * Popularity: a candidate tail's score is its in-degree under the relation in the training
 * edges, a candidate head's its out-degree (common practice as the floor for link models).
 */
typedef struct weft_baseline_popularity {
    size_t n_nodes, n_relations;
    float *in_deg;   /**< (n_relations, n_nodes) */
    float *out_deg;  /**< (n_relations, n_nodes) */
} weft_baseline_popularity;

/**
 * Count degrees of @p train (m triples) into @p p.
 * @return WEFT_OK, WEFT_ERR_NOMEM. Release with weft_baseline_popularity_fini().
 */
weft_err weft_baseline_popularity_init(weft_baseline_popularity *p, const weft_triple *train,
                                       size_t m, size_t n_nodes, size_t n_relations,
                                       weft_error *err);

/** Release @p p's arrays; NULL does nothing. */
void weft_baseline_popularity_fini(weft_baseline_popularity *p);

/** A weft_eval_score_fn: @p ctx is a const weft_baseline_popularity *. */
void weft_baseline_popularity_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head,
                                     float *out);

/**
 * Majority class: every node gets the class frequencies of the training nodes as its
 * probabilities (so it predicts the most frequent training class, ties to the lowest id).
 * @param prob  out, (n, n_classes)
 * @return WEFT_OK, WEFT_ERR_INVALID (no training node)
 */
weft_err weft_baseline_majority(const int32_t *y, const uint8_t *part, size_t n,
                                size_t n_classes, float *prob, weft_error *err);

/**
 * Label propagation (Zhu & Ghahramani 2002): the training nodes' labels spread over the
 * graph, Y <- D^-1 A Y, each row normalised to sum 1, training rows clamped to their one-hot
 * label, until the summed absolute change is below @p tol or after @p max_iter steps. This
 * is the form scikit-learn's LabelPropagation iterates; its fixed point is the harmonic
 * solution of Zhu, Ghahramani & Lafferty 2003. Nodes no training label reaches get the
 * training class frequencies.
 * @param adj   A, unnormalised and without self-loops (weft_sparse_adjacency with
 *              WEFT_SPARSE_NORM_NONE and no self-loops); its values are the edge weights
 * @param prob  out, (n, n_classes)
 * @param n_iter  out, may be NULL: steps taken
 * @return WEFT_OK, WEFT_ERR_INVALID (no training node), WEFT_ERR_NOMEM
 */
weft_err weft_baseline_label_propagation(const weft_sparse *adj, const int32_t *y,
                                         const uint8_t *part, size_t n_classes,
                                         size_t max_iter, double tol, float *prob,
                                         size_t *n_iter, weft_error *err);

#endif
