/* DistMult query vectors (include/weft/model_distmult.h). */
#include "weft/model_distmult.h"

void weft_distmult_query(float *q, const float *a, const float *r, size_t d)
{
    for (size_t i = 0; i < d; i++)
        q[i] = a[i] * r[i];
}

void weft_distmult_query_backward(float *da, float *dr, const float *dq, const float *a,
                                  const float *r, size_t d)
{
    for (size_t i = 0; i < d; i++) {
        da[i] += dq[i] * r[i];
        dr[i] += dq[i] * a[i];
    }
}
