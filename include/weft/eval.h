/* weft: evaluation of link predictions.
 * Ranking protocol (Bordes et al. 2013, "filtered" setting): for each test triple (s, r, t)
 * rank the true tail t among all candidate nodes for (s, r, ?) and the true head s among all
 * candidates for (?, r, t); every other candidate that forms a known true triple (train,
 * valid or test) is removed first. Ties count as the mean of the optimistic and the
 * pessimistic rank, so a model that scores everything equal gets no credit.
 * For one-relation graphs, also the area under the ROC curve and the average precision of
 * test edges against sampled non-edges. */
#ifndef WEFT_EVAL_H
#define WEFT_EVAL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <jansson.h>

#include "weft/error.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/names.h"

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
    const weft_csr *known_out;  /**< every known true triple, by source; NULL: none */
    const weft_csr *known_in;   /**< the same, by target; NULL: none */
    bool exclude_self;          /**< the graph has no self-loops: a node is never its own answer */
} weft_eval_filter;

/**
 * Filtered rank of every query of @p test (m triples over @p n_nodes nodes), written to
 * @p ranks (m * 2 when @p both_directions, else m): ranks[i * n_dirs] is the rank of the
 * tail of test[i], ranks[i * n_dirs + 1] the rank of its head.
 * @param both_directions  rank heads as well as tails (false for an undirected graph whose
 *                         test set holds both directions of each edge: the head query of
 *                         (s, t) is then the tail query of (t, s))
 * @param n_threads        threads to use (>= 1); results do not depend on it
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (m == 0)
 * Cost: m * n_dirs calls of @p score plus O(n_nodes) each. When @p score is
 * weft_eval_model_scores, queries are scored in blocks (up to 128 at a time, at most about
 * 16 MB of scores per thread) by one cblas_sgemm each instead, reading the entity matrix
 * once per block; the ranks equal the one-by-one ones up to float rounding of the products.
 * Each of the @p n_threads threads runs its own sgemm: with n_threads > 1, keep OpenBLAS at
 * one thread (openblas_set_num_threads(1)) so the two do not oversubscribe the cores.
 */
weft_err weft_eval_ranks(const weft_triple *test, size_t m, size_t n_nodes, bool both_directions,
                         const weft_eval_filter *filter, weft_eval_score_fn score, void *ctx,
                         size_t n_threads, double *ranks, weft_error *err);

/**
 * Metrics of @p n ranks (each >= 1), summed in index order so that the same ranks always
 * give the same bits. n == 0 gives n_queries 0 and zeros.
 */
void weft_eval_summarise(const double *ranks, size_t n, weft_rank_metrics *out);

/**
 * Filtered ranking metrics of @p test: weft_eval_ranks() summarised.
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (m == 0)
 */
weft_err weft_eval_ranking(const weft_triple *test, size_t m, size_t n_nodes,
                           bool both_directions, const weft_eval_filter *filter,
                           weft_eval_score_fn score, void *ctx, size_t n_threads,
                           weft_rank_metrics *out, weft_error *err);

/**
 * Filtered ranking metrics over all of @p test and per relation, from one pass of ranks.
 * A relation's figures sum its queries in test order, so they do not depend on the thread
 * count either.
 * @param n_relations   relation ids of @p test are below it
 * @param overall       out: the same figures weft_eval_ranking() gives
 * @param per_relation  out (n_relations): the queries of each relation; a relation without
 *                      test triples gets n_queries 0 and zeros
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (m == 0, a relation id >= n_relations)
 */
weft_err weft_eval_ranking_by_relation(const weft_triple *test, size_t m, size_t n_nodes,
                                       size_t n_relations, bool both_directions,
                                       const weft_eval_filter *filter, weft_eval_score_fn score,
                                       void *ctx, size_t n_threads, weft_rank_metrics *overall,
                                       weft_rank_metrics *per_relation, weft_error *err);

/** A weft_eval_score_fn for a link model: @p ctx is a const weft_link_model *. */
void weft_eval_model_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out);

/** Most draws weft_eval_sample_negatives() makes for one corruption before it gives up. */
#define WEFT_EVAL_NEGATIVE_TRIES 64

/** Scores of positives against negatives, summarised. */
typedef struct weft_binary_metrics {
    size_t n_pos, n_neg;
    double auc;   /**< area under the ROC curve, ties counted 1/2 (weft_eval_auc) */
    double ap;    /**< average precision (weft_eval_average_precision) */
} weft_binary_metrics;

/**
 * Area under the ROC curve of @p scores (n) against @p labels (true = positive): the share of
 * (positive, negative) pairs in which the positive scores higher, a tie counting 1/2 (the
 * Mann-Whitney U statistic divided by n_pos * n_neg; Hanley & McNeil 1982). NaN scores rank
 * below every number and tie with each other.
 * @return WEFT_OK, WEFT_ERR_INVALID (no positive or no negative: undefined), WEFT_ERR_NOMEM
 * Pure; cost O(n log n).
 */
weft_err weft_eval_auc(const float *scores, const bool *labels, size_t n, double *out,
                       weft_error *err);

/**
 * Average precision of @p scores (n) against @p labels: with the distinct scores as
 * thresholds in descending order, sum over thresholds k of (R_k - R_{k-1}) * P_k, where P_k
 * and R_k are the precision and recall of "score >= threshold k" and R_0 = 0 (step-wise, no
 * interpolation; the definition scikit-learn's average_precision_score uses). Tied scores
 * enter together. NaN scores rank below every number and tie with each other.
 * @return WEFT_OK, WEFT_ERR_INVALID (no positive: undefined), WEFT_ERR_NOMEM
 * Pure; cost O(n log n).
 */
weft_err weft_eval_average_precision(const float *scores, const bool *labels, size_t n,
                                     double *out, weft_error *err);

/**
 * Draw @p per_edge non-edges for each triple of @p test: the head or the tail (a fair coin)
 * replaced by a node drawn uniformly from @p n_nodes, drawn again while the result is a
 * known true triple of @p filter (filter->known_out) or, with filter->exclude_self, a
 * self-loop; after WEFT_EVAL_NEGATIVE_TRIES draws that corruption is skipped.
 * @param seed   the same seed and inputs give the same negatives
 * @param out    on success, a new array of *@p n_out <= m * per_edge triples in test order;
 *               caller frees
 * @return WEFT_OK, WEFT_ERR_INVALID (n_nodes 0 or beyond uint32), WEFT_ERR_NOMEM
 * Cost: O(m * per_edge * log degree) expected.
 */
weft_err weft_eval_sample_negatives(const weft_triple *test, size_t m, size_t per_edge,
                                    size_t n_nodes, const weft_eval_filter *filter,
                                    uint64_t seed, weft_triple **out, size_t *n_out,
                                    weft_error *err);

/**
 * Score of each of @p n triples @p e: out[i] is entry e[i].t of the tail scores of
 * (e[i].s, e[i].r, ?). Triples that share a source and relation share one call of @p score.
 * @param out        (n) scores
 * @param n_threads  threads to use (>= 1); results do not depend on it
 * @return WEFT_OK, WEFT_ERR_NOMEM
 */
weft_err weft_eval_triple_scores(const weft_triple *e, size_t n, size_t n_nodes,
                                 weft_eval_score_fn score, void *ctx, size_t n_threads,
                                 float *out, weft_error *err);

/**
 * AUC-ROC and average precision of @p pos (positives) against @p neg (negatives, e.g. from
 * weft_eval_sample_negatives), each triple scored by weft_eval_triple_scores().
 * @return WEFT_OK, WEFT_ERR_INVALID (no positive or no negative), WEFT_ERR_NOMEM
 */
weft_err weft_eval_binary(const weft_triple *pos, size_t n_pos, const weft_triple *neg,
                          size_t n_neg, size_t n_nodes, weft_eval_score_fn score, void *ctx,
                          size_t n_threads, weft_binary_metrics *out, weft_error *err);

/**
 * @p m as a JSON object {"queries", "mrr", "mean_rank", "hits@1", "hits@3", "hits@10"};
 * a new reference (caller json_decref()s), NULL when out of memory.
 */
json_t *weft_eval_metrics_json(const weft_rank_metrics *m);

/**
 * @p b as a JSON object {"positives", "negatives", "auc", "ap"}; a new reference, NULL when
 * out of memory.
 */
json_t *weft_eval_binary_json(const weft_binary_metrics *b);

/**
 * Per-relation metrics as a JSON object: relation name (from @p relations) ->
 * weft_eval_metrics_json() of @p per_relation[r], for every relation with queries, in id
 * order. @p per_relation holds relations->n entries. A new reference, NULL when out of
 * memory.
 */
json_t *weft_eval_per_relation_json(const weft_rank_metrics *per_relation,
                                    const weft_names_view *relations);

#endif
