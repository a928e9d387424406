/* Dense training loops (include/weft/kernels.h). Compiled with -O3 (see the Makefile) and
 * cloned per instruction set through GCC's target_clones, so the vectoriser can use the
 * widest registers the CPU has without building for one machine. */
#include "weft/kernels.h"

#include <math.h>
#include <string.h>

#include "internal.h"


enum { LANES = 16 };

WEFT_CLONES
float weft_kernel_dot(const float *a, const float *b, size_t n)
{
    float acc[LANES] = { 0 };
    size_t i = 0;
    for (; i + LANES <= n; i += LANES)
        for (size_t j = 0; j < LANES; j++)
            acc[j] += a[i + j] * b[i + j];
    for (size_t j = 0; i < n; i++, j++)
        acc[j] += a[i] * b[i];
    for (size_t w = LANES / 2; w > 0; w /= 2)   /* pairwise: a fixed order */
        for (size_t j = 0; j < w; j++)
            acc[j] += acc[j + w];
    return acc[0];
}

WEFT_CLONES
void weft_kernel_axpy(float *y, float alpha, const float *x, size_t n)
{
    for (size_t i = 0; i < n; i++)
        y[i] += alpha * x[i];
}

/* exp(x) = 2^k * exp(r), k = round(x / ln 2), r = x - k ln 2 in [-ln2/2, ln2/2], exp(r) by
 * its degree-6 Taylor polynomial in Horner form (relative error at most 2.5e-7, measured
 * over [-87, 88] in tests/unit/test_kernels.c). k is rounded by adding 1.5 * 2^23, which
 * leaves k in the low mantissa bits; 2^k is then built in the exponent bits. Branch-free, so
 * the loops around it vectorise. Inputs are clamped to [-87.3, 88], where 2^k and the result
 * stay finite and normal. */
static inline float exp_approx(float x)
{
    x = x < -87.3f ? -87.3f : x;
    x = x > 88.0f ? 88.0f : x;
    float t = x * 1.44269504088896341f + 12582912.0f;   /* 1.5 * 2^23 */
    float kf = t - 12582912.0f;
    float r = x - kf * 0.693359375f + kf * 2.12194440e-4f;   /* ln 2 in two parts */
    float p = 1.0f / 720.0f;
    p = p * r + 1.0f / 120.0f;
    p = p * r + 1.0f / 24.0f;
    p = p * r + 1.0f / 6.0f;
    p = p * r + 0.5f;
    p = p * r + 1.0f;
    p = p * r + 1.0f;
    uint32_t tb, sb;
    memcpy(&tb, &t, sizeof tb);
    sb = (tb - 0x4B400000u + 127u) << 23;   /* k + 127 into the exponent field */
    float scale;
    memcpy(&scale, &sb, sizeof scale);
    return p * scale;
}

float weft_kernel_expf(float x)
{
    return exp_approx(x);
}

WEFT_CLONES
double weft_kernel_softmax_xent(float *row, size_t n, uint32_t target, float scale)
{
    float mx[LANES];
    for (size_t j = 0; j < LANES; j++)
        mx[j] = -INFINITY;
    size_t i = 0;
    for (; i + LANES <= n; i += LANES)
        for (size_t j = 0; j < LANES; j++)
            mx[j] = row[i + j] > mx[j] ? row[i + j] : mx[j];
    for (size_t j = 0; i < n; i++, j++)
        mx[j] = row[i] > mx[j] ? row[i] : mx[j];
    float m = mx[0];
    for (size_t j = 1; j < LANES; j++)
        m = mx[j] > m ? mx[j] : m;

    float acc[LANES] = { 0 };
    for (i = 0; i + LANES <= n; i += LANES)
        for (size_t j = 0; j < LANES; j++) {
            float e = exp_approx(row[i + j] - m);
            row[i + j] = e;
            acc[j] += e;
        }
    for (size_t j = 0; i < n; i++, j++) {
        float e = exp_approx(row[i] - m);
        row[i] = e;
        acc[j] += e;
    }
    double sum = 0.0;
    for (size_t j = 0; j < LANES; j++)
        sum += acc[j];
    double loss = log(sum) - log((double)row[target]);
    float k = (float)(scale / sum);
    for (i = 0; i < n; i++)
        row[i] *= k;
    row[target] -= scale;
    return loss;
}

WEFT_CLONES
void weft_kernel_count_vs(const float *x, size_t n, float t, size_t *higher, size_t *equal)
{
    uint32_t hi[LANES] = { 0 }, eq[LANES] = { 0 };
    size_t h = 0, e = 0, i = 0;
    while (i < n) {
        /* 32-bit lane counters, emptied every 2^20 blocks so they cannot overflow */
        size_t stop = n - i > ((size_t)LANES << 20) ? i + ((size_t)LANES << 20) : n;
        for (; i + LANES <= stop; i += LANES)
            for (size_t j = 0; j < LANES; j++) {
                hi[j] += x[i + j] > t;
                eq[j] += x[i + j] == t;
            }
        for (; i < stop; i++) {
            h += x[i] > t;
            e += x[i] == t;
        }
        for (size_t j = 0; j < LANES; j++) {
            h += hi[j];
            e += eq[j];
            hi[j] = eq[j] = 0;
        }
    }
    *higher = h;
    *equal = e;
}

double weft_kernel_logistic(float x, bool is_positive, float *dx)
{
    double z = is_positive ? -(double)x : (double)x;   /* loss = softplus(z) */
    double sig = z >= 0 ? 1.0 / (1.0 + exp(-z)) : exp(z) / (1.0 + exp(z));   /* sigmoid(z) */
    *dx = (float)(is_positive ? -sig : sig);
    return z > 0 ? z + log1p(exp(-z)) : log1p(exp(z));
}

WEFT_CLONES
void weft_kernel_adagrad(float *w, float *acc, const float *g, size_t n, float lr)
{
    for (size_t i = 0; i < n; i++) {
        acc[i] += g[i] * g[i];
        w[i] -= lr * g[i] / (sqrtf(acc[i]) + 1e-10f);
    }
}

WEFT_CLONES
void weft_kernel_adam(float *w, float *m, float *v, const float *g, size_t n, float lr, float c1,
                      float c2)
{
    float a = lr / c1, ic2 = 1.0f / c2;
    for (size_t i = 0; i < n; i++) {
        m[i] = 0.9f * m[i] + 0.1f * g[i];
        v[i] = 0.999f * v[i] + 0.001f * g[i] * g[i];
        w[i] -= a * m[i] / (sqrtf(v[i] * ic2) + 1e-8f);
    }
}
