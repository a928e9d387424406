/* ComplEx query vectors (include/weft/model_complex.h). With c = r (tails) or conj(r)
 * (heads), q = a * c:  q_re = a_re c_re - a_im c_im,  q_im = a_re c_im + a_im c_re. */
#include "weft/model_complex.h"

void weft_complex_query(float *q, const float *a, const float *r, size_t d, bool is_head)
{
    size_t h = d / 2;
    float sign = is_head ? -1.0f : 1.0f;   /* conj(r) flips the imaginary part */
    for (size_t i = 0; i < h; i++) {
        float a_re = a[i], a_im = a[h + i], c_re = r[i], c_im = sign * r[h + i];
        q[i] = a_re * c_re - a_im * c_im;
        q[h + i] = a_re * c_im + a_im * c_re;
    }
}

void weft_complex_query_backward(float *da, float *dr, const float *dq, const float *a,
                                 const float *r, size_t d, bool is_head)
{
    size_t h = d / 2;
    float sign = is_head ? -1.0f : 1.0f;
    for (size_t i = 0; i < h; i++) {
        float a_re = a[i], a_im = a[h + i], c_re = r[i], c_im = sign * r[h + i];
        float g_re = dq[i], g_im = dq[h + i];
        da[i] += g_re * c_re + g_im * c_im;
        da[h + i] += -g_re * c_im + g_im * c_re;
        dr[i] += g_re * a_re + g_im * a_im;
        dr[h + i] += sign * (-g_re * a_im + g_im * a_re);
    }
}
