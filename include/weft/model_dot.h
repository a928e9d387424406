/* weft: the dot-product link model, score(s, t) = e_s . e_t (common practice: a low-rank
 * factorisation of the adjacency matrix). One relation; the score is symmetric. */
#ifndef WEFT_MODEL_DOT_H
#define WEFT_MODEL_DOT_H

#include <stddef.h>
#include <stdint.h>

/* Scores of b pairs. e: (n_ent, d) row-major; trip: (b, 3) = head, rel (ignored), tail;
 * out: (b). No allocation, no state. */
void weft_dot_forward(float *out, const float *e, const uint32_t *trip, size_t b, size_t d);

/* Adds (+=) dLoss/de into de (n_ent, d); the caller zeroes it once per step. dout: (b). */
void weft_dot_backward(float *de, const float *dout, const float *e, const uint32_t *trip,
                       size_t b, size_t d);

#endif
