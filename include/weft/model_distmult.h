/* weft: DistMult (Yang, Yih, He, Gao & Deng 2015, "Embedding entities and relations for
 * learning and inference in knowledge bases", ICLR): score(s, r, t) = sum_i e_s[i] r[i] e_t[i].
 * As a query vector: tails of (s, r, ?) score q . e_t with q = e_s * r (elementwise); the
 * score is symmetric in s and t, so heads use q = e_t * r. */
#ifndef WEFT_MODEL_DISTMULT_H
#define WEFT_MODEL_DISTMULT_H

#include <stddef.h>

/* q (d) = a * r elementwise; a: anchor row (d), r: relation row (d). */
void weft_distmult_query(float *q, const float *a, const float *r, size_t d);

/* Adds (+=) into da, dr (d) the gradient of dq . q with respect to a and r. */
void weft_distmult_query_backward(float *da, float *dr, const float *dq, const float *a,
                                  const float *r, size_t d);

#endif
