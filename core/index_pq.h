/* Inside libweft only: what core/index.c and core/index_pq.c (the clustered index's
 * product-quantised lists) share. */
#ifndef WEFT_CORE_INDEX_PQ_H
#define WEFT_CORE_INDEX_PQ_H

#include <math.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/index.h"
#include "weft/topk.h"

static inline bool weft_index_type_passes(const weft_index_filter *f, uint32_t id)
{
    return !f || !f->type_of || f->type_of[id] == f->type;
}

/* Offer row @p id with approximate score @p s to the candidates: the type first (one load),
 * the exclusion search only for rows that would enter. */
static inline void weft_index_offer(weft_topk *t, const weft_index_filter *f, uint32_t id,
                                    float s)
{
    if (weft_index_type_passes(f, id) && weft_topk_would_enter(t, id, s)
        && !weft_topk_is_excluded(f ? f->ex : NULL, id))
        weft_topk_push(t, id, s);
}

/* The lowest approximate score that may still enter @p t (candidates come in any id order,
 * so a score equal to the worst kept one is let through to weft_topk_would_enter). */
static inline float weft_index_bar(const weft_topk *t)
{
    return t->n < t->k ? -INFINITY : t->score[0];
}

/* Whether weft_index_allow_native(false) has not been called (core/index.c). */
bool weft_index_native_allowed(void);

/* Code the rows of the lists of @p a->ivf (n, d, n_lists, centroid, list_off and row_id
 * set) as product-quantised lists: a->codebook, a->list_block and a->pq_code allocated and
 * filled, a->ivf.pq set. @return WEFT_OK or WEFT_ERR_NOMEM (then the three are NULL). */
weft_err weft_index_pq_encode(const float *e, uint64_t seed, weft_index_ivf_arrays *a,
                              weft_error *err);

/* A query's tables: for each group of 4 subspaces, 64 bytes for the low 4 bits of the codes
 * and 64 for the high ones (the layout of include/weft/index.h), 6-bit entries. */
typedef struct weft_index_pq_query {
    uint8_t *table;      /* (n_sub / 4, 2, 64) */
    float step;          /* a table unit in score */
    float base;          /* the sum over subspaces of each table's least product */
} weft_index_pq_query;

/* The tables of query @p q (d values, finite) for @p pq. @return false when out of memory. */
bool weft_index_pq_query_init(weft_index_pq_query *qq, const weft_index_pq *pq, const float *q,
                              size_t d);

void weft_index_pq_query_fini(weft_index_pq_query *qq);

/* The candidates of a product-quantised scan: rows are appended (no heap to keep in order)
 * until the buffer holds 2 x keep, then the best keep stay and the worst of them becomes
 * the bar a row must beat to be appended. Order: higher approximate score first, then the
 * lower id, as everywhere (include/weft/topk.h). */
typedef struct weft_index_pq_cands {
    size_t keep, n, cap;
    uint32_t *id;
    float *score;
    bool has_bar;
    float bar;
    uint32_t bar_id;
} weft_index_pq_cands;

/* Room for 2 x @p keep candidates. @return false when out of memory. */
bool weft_index_pq_cands_init(weft_index_pq_cands *c, size_t keep);

void weft_index_pq_cands_fini(weft_index_pq_cands *c);

/* Keep the best keep of @p c: their ids are c->id[0 .. c->n), in no order. */
void weft_index_pq_cands_finish(weft_index_pq_cands *c);

/* Score the rows of list @p l of @p ix for @p qq, whose product with the list's centroid is
 * @p centroid_score, and append those that may be among the best and pass @p f to @p c. */
void weft_index_pq_scan_list(const weft_index_ivf *ix, const weft_index_pq_query *qq, size_t l,
                             float centroid_score, const weft_index_filter *f,
                             weft_index_pq_cands *c);

#endif
