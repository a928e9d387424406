/* weft: trivial predictors every model must beat, scored like models. */
#ifndef WEFT_BASELINE_H
#define WEFT_BASELINE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"

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

#endif
