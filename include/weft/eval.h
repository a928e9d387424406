/* weft: filtered ranking evaluation of link predictions.
 * Protocol (Bordes et al. 2013, "filtered" setting): for each test triple (s, r, t) rank the
 * true tail t among all candidate nodes for (s, r, ?) and the true head s among all
 * candidates for (?, r, t); every other candidate that forms a known true triple (train,
 * valid or test) is removed first. Ties count as the mean of the optimistic and the
 * pessimistic rank, so a model that scores everything equal gets no credit. */
#ifndef WEFT_EVAL_H
#define WEFT_EVAL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <jansson.h>

#include "weft/error.h"
#include "weft/graph.h"
#include "weft/model.h"

/** Ranking metrics over a set of queries. */
typedef struct weft_rank_metrics {
    size_t n_queries;
    double mrr;        /**< mean of 1/rank */
    double mean_rank;
    double hits1, hits3, hits10;   /**< fraction of queries with rank <= 1, 3, 10 */
} weft_rank_metrics;

/**
 * Rank of candidate @p target among @p scores[0..n), leaving out the ids in
 * @p filtered (ascending, may contain @p target, which is never left out) and, when
 * @p has_self, the id @p self (unless it is the target).
 * rank = 1 + #(higher) + #(equal, other than target) / 2. A NaN target score ranks last.
 */
double weft_eval_rank(const float *scores, size_t n, uint32_t target, const uint32_t *filtered,
                      size_t n_filtered, bool has_self, uint32_t self);

/**
 * Scores of every candidate node for one query, written to @p out (n_nodes): tails of
 * (anchor, r, ?) when @p is_head is false, heads of (?, r, anchor) when true. Must be safe
 * to call from several threads at once.
 */
typedef void (*weft_eval_score_fn)(void *ctx, uint32_t anchor, uint32_t r, bool is_head,
                                   float *out);

/** What a query leaves out besides its answer. */
typedef struct weft_eval_filter {
    const weft_csr *known_out;  /**< every known true triple, by source */
    const weft_csr *known_in;   /**< the same, by target */
    bool exclude_self;          /**< the graph has no self-loops: a node is never its own answer */
} weft_eval_filter;

/**
 * Filtered ranking metrics of @p test (m triples over @p n_nodes nodes).
 * @param both_directions  rank heads as well as tails (false for an undirected graph whose
 *                         test set holds both directions of each edge: the head query of
 *                         (s, t) is then the tail query of (t, s))
 * @param n_threads        threads to use (>= 1); results do not depend on it
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (m == 0)
 */
weft_err weft_eval_ranking(const weft_triple *test, size_t m, size_t n_nodes,
                           bool both_directions, const weft_eval_filter *filter,
                           weft_eval_score_fn score, void *ctx, size_t n_threads,
                           weft_rank_metrics *out, weft_error *err);

/** A weft_eval_score_fn for a link model: @p ctx is a const weft_link_model *. */
void weft_eval_model_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out);

/**
 * @p m as a JSON object {"queries", "mrr", "mean_rank", "hits@1", "hits@3", "hits@10"};
 * a new reference (caller json_decref()s), NULL when out of memory.
 */
json_t *weft_eval_metrics_json(const weft_rank_metrics *m);

#endif
