/* The dot-product link model (include/weft/model_dot.h). */
#include "weft/model_dot.h"

void weft_dot_forward(float *out, const float *e, const uint32_t *trip, size_t b, size_t d)
{
    for (size_t i = 0; i < b; i++) {
        const float *es = e + (size_t)trip[3 * i] * d, *et = e + (size_t)trip[3 * i + 2] * d;
        float acc = 0.0f;
        for (size_t j = 0; j < d; j++)
            acc += es[j] * et[j];
        out[i] = acc;
    }
}

void weft_dot_backward(float *de, const float *dout, const float *e, const uint32_t *trip,
                       size_t b, size_t d)
{
    for (size_t i = 0; i < b; i++) {
        size_t s = trip[3 * i], t = trip[3 * i + 2];
        const float *es = e + s * d, *et = e + t * d;
        float *ds = de + s * d, *dt = de + t * d;
        for (size_t j = 0; j < d; j++) {
            ds[j] += dout[i] * et[j];
            dt[j] += dout[i] * es[j];
        }
    }
}
