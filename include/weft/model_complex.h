/* weft: ComplEx (Trouillon, Welbl, Riedel, Gaussier & Bouchard 2016, "Complex embeddings for
 * simple link prediction", ICML): score(s, r, t) = Re(sum_i e_s[i] r[i] conj(e_t[i])).
 * A row of d floats holds d/2 real parts, then d/2 imaginary parts.
 * As a query vector q with score = q . e_t (over the d real numbers):
 *   tails of (s, r, ?): q = e_s * r             (complex product)
 *   heads of (?, r, t): q = conj(r) * e_t       (so that q . e_s is the same score) */
#ifndef WEFT_MODEL_COMPLEX_H
#define WEFT_MODEL_COMPLEX_H

#include <stdbool.h>
#include <stddef.h>

/* q (d) = a * r, or conj(r) * a when is_head; d even. */
void weft_complex_query(float *q, const float *a, const float *r, size_t d, bool is_head);

/* Adds (+=) into da, dr (d) the gradient of dq . q with respect to a and r. */
void weft_complex_query_backward(float *da, float *dr, const float *dq, const float *a,
                                 const float *r, size_t d, bool is_head);

#endif
