/* weft: the small dense loops training spends its time in. Each is compiled for several
 * instruction sets (AVX-512, AVX2, baseline) and picked at load time; sums run in a fixed
 * order of 16 lanes, so results do not depend on the machine's instruction set... within
 * one build and one CPU kind (the lanes are the same; only their width of execution differs). */
#ifndef WEFT_KERNELS_H
#define WEFT_KERNELS_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/** a . b over n floats, in 16 interleaved partial sums added pairwise at the end. */
float weft_kernel_dot(const float *a, const float *b, size_t n);

/** y += alpha * x over n floats. */
void weft_kernel_axpy(float *y, float alpha, const float *x, size_t n);

/**
 * Softmax cross-entropy of one row of logits: returns -log softmax(row)[target] (in
 * double) and overwrites row with scale * (softmax(row) - onehot(target)), the gradient of
 * scale * loss. exp is a polynomial approximation (relative error below 3e-7, Cephes-style
 * range reduction), vectorised.
 */
double weft_kernel_softmax_xent(float *row, size_t n, uint32_t target, float scale);

/**
 * Logistic loss of score @p x for a positive (@p is_positive) or a negative example:
 * softplus(-x) or softplus(x), computed without overflow; *@p dx gets its derivative.
 */
double weft_kernel_logistic(float x, bool is_positive, float *dx);

/** Adagrad step: acc += g^2; w -= lr * g / (sqrt(acc) + 1e-10). */
void weft_kernel_adagrad(float *w, float *acc, const float *g, size_t n, float lr);

/**
 * Adam step with bias corrections c1 = 1 - beta1^t, c2 = 1 - beta2^t (beta1 0.9,
 * beta2 0.999, eps 1e-8): m, v updated in place, w -= lr * (m / c1) / (sqrt(v / c2) + eps).
 */
void weft_kernel_adam(float *w, float *m, float *v, const float *g, size_t n, float lr, float c1,
                      float c2);

/**
 * Count the entries of @p x[0..n) above @p t into *@p higher and equal to it into *@p equal
 * (NaN entries count as neither). Vectorised: the inner loop of every rank computation.
 */
void weft_kernel_count_vs(const float *x, size_t n, float t, size_t *higher, size_t *equal);

/** exp(x) by the same approximation softmax uses; exposed for tests. */
float weft_kernel_expf(float x);

#endif
