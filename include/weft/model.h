/* weft: link model kinds and the scoring they share. Every link model scores a candidate c
 * for an anchor node and relation as an inner product q . e_c, where the query vector q
 * depends on the model; so one kernel (weft_topk_scan, cblas_sgemv) ranks all of them. */
#ifndef WEFT_MODEL_H
#define WEFT_MODEL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/** Link model kinds. */
typedef enum weft_link_kind {
    WEFT_LINK_DOT = 1   /**< e_s . e_t: factorisation of the adjacency matrix (common practice) */
} weft_link_kind;

/** Parameters of a link model, borrowed (from a trainer or a snapshot's map). */
typedef struct weft_link_model {
    weft_link_kind kind;
    size_t n_entities, n_relations, dim;
    const float *entity;    /**< (n_entities, dim) */
    const float *relation;  /**< (n_relations, dim), NULL for dot */
} weft_link_model;

/** "dot"; NULL for an unknown kind. */
const char *weft_model_kind_name(weft_link_kind kind);

/** Parse a kind name. @return true and *@p out when known. */
bool weft_model_kind_parse(const char *name, weft_link_kind *out);

/**
 * Query vector @p q (dim) such that q . e_c is the score of candidate c: the tail of
 * (anchor, r, c) when @p is_head is false, the head of (c, r, anchor) when true.
 */
void weft_model_query(const weft_link_model *m, uint32_t anchor, uint32_t r, bool is_head,
                      float *q);

/** Score of one triple (s, r, t), accumulated in double. */
float weft_model_score(const weft_link_model *m, uint32_t s, uint32_t r, uint32_t t);

/** The logistic function 1 / (1 + exp(-x)), stable for large |x|. */
double weft_model_sigmoid(double x);

#endif
