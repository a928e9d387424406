/* weft: link model kinds and the scoring they share. Every link model scores a candidate c
 * for an anchor node and relation as an inner product q . e_c, where the query vector q
 * depends on the model; so one kernel (weft_topk_scan) ranks all of them. */
#ifndef WEFT_MODEL_H
#define WEFT_MODEL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/** Link model kinds. */
typedef enum weft_link_kind {
    WEFT_LINK_DOT = 1,      /**< e_s . e_t: factorisation of the adjacency matrix (common practice) */
    WEFT_LINK_DISTMULT = 2, /**< sum_i e_s[i] r[i] e_t[i] (Yang et al. 2015, ICLR) */
    WEFT_LINK_COMPLEX = 3   /**< Re(sum_i e_s[i] r[i] conj(e_t[i])) (Trouillon et al. 2016, ICML);
                                 a row holds dim/2 real parts, then dim/2 imaginary parts */
} weft_link_kind;

/** Parameters of a link model, borrowed (from a trainer or a snapshot's map). */
typedef struct weft_link_model {
    weft_link_kind kind;
    size_t n_entities, n_relations, dim;
    bool has_reciprocal;    /**< relation rows r + n_relations are r's inverse: head queries
                                 (?, r, t) are answered as tail queries (t, r + n_relations, ?) */
    const float *entity;    /**< (n_entities, dim) */
    const float *relation;  /**< (n_relations, dim), twice that with reciprocals; NULL for dot */
} weft_link_model;

/** Largest embedding size weft accepts. */
#define WEFT_MODEL_MAX_DIM 4096

/** "dot", "distmult", "complex"; NULL for an unknown kind. */
const char *weft_model_kind_name(weft_link_kind kind);

/** Parse a kind name. @return true and *@p out when known. */
bool weft_model_kind_parse(const char *name, weft_link_kind *out);

/**
 * Query vector @p q (dim) such that q . e_c is the score of candidate c: the tail of
 * (anchor, r, c) when @p is_head is false, the head of (c, r, anchor) when true.
 */
void weft_model_query(const weft_link_model *m, uint32_t anchor, uint32_t r, bool is_head,
                      float *q);

/**
 * Query vector of one anchor row @p a (d) and relation row @p r (d; unused for dot):
 * tails of (a, r, ?) when @p is_head is false, heads of (?, r, a) when true.
 */
void weft_model_query_row(weft_link_kind kind, float *q, const float *a, const float *r,
                          size_t d, bool is_head);

/** Adds (+=) into @p da and @p dr (NULL for dot) the gradient of dq . q(a, r). */
void weft_model_query_row_backward(weft_link_kind kind, float *da, float *dr, const float *dq,
                                   const float *a, const float *r, size_t d, bool is_head);

/**
 * Scores of b triples of @p m (tails ranked against their (s, r) query): out (b).
 * trip: (b, 3) = head, relation, tail. @p q is workspace of m->dim floats.
 */
void weft_model_forward(const weft_link_model *m, float *out, const uint32_t *trip, size_t b,
                        float *q);

/**
 * Adds (+=) dLoss/d(entity, relation) into @p de (n_entities, dim) and @p dr (relation rows,
 * dim; NULL for dot), given dout (b) = dLoss/dscore. @p q is workspace of 2 * m->dim floats.
 */
void weft_model_backward(const weft_link_model *m, float *de, float *dr, const float *dout,
                         const uint32_t *trip, size_t b, float *q);

/** Score of one triple (s, r, t), accumulated in double. */
float weft_model_score(const weft_link_model *m, uint32_t s, uint32_t r, uint32_t t);

/** The logistic function 1 / (1 + exp(-x)), stable for large |x|. */
double weft_model_sigmoid(double x);

#endif
