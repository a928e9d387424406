/* Dense kernels against plain double-precision loops, and the losses' gradients against
 * central differences (loss = the kernel's own value; pass if |num - ana| <= 1e-3 + 1e-2|num|). */
#include <criterion/criterion.h>
#include <math.h>
#include <string.h>

#include "weft/kernels.h"
#include "weft/rng.h"

Test(kernels, exp_approximation_within_3e_7_relative)
{
    for (double x = -87.0; x <= 88.0; x += 0.01) {
        double want = exp(x), got = weft_kernel_expf((float)x);
        /* the float input itself is rounded: compare with exp of the float */
        want = exp((double)(float)x);
        cr_assert(fabs(got - want) <= 3e-7 * want, "exp(%g): %g, want %g", x, got, want);
    }
    cr_assert_eq(weft_kernel_expf(0.0f), 1.0f);
    cr_assert(weft_kernel_expf(-1000.0f) >= 0.0f && weft_kernel_expf(-1000.0f) < 1e-37f);
    cr_assert(isfinite(weft_kernel_expf(1000.0f)));
}

Test(kernels, dot_matches_double_loop_for_every_length)
{
    weft_rng rng;
    weft_rng_seed(&rng, 1);
    float a[100], b[100];
    for (size_t i = 0; i < 100; i++) {
        a[i] = weft_rng_float(&rng) - 0.5f;
        b[i] = weft_rng_float(&rng) - 0.5f;
    }
    for (size_t n = 0; n <= 100; n++) {
        double want = 0;
        for (size_t i = 0; i < n; i++)
            want += (double)a[i] * b[i];
        cr_assert_float_eq(weft_kernel_dot(a, b, n), want, 1e-5, "n = %zu", n);
    }
}

Test(kernels, softmax_xent_matches_double_reference)
{
    weft_rng rng;
    weft_rng_seed(&rng, 2);
    enum { N = 1003 };
    static float row[N];
    double ref[N], mx = -INFINITY, sum = 0;
    for (size_t i = 0; i < N; i++) {
        row[i] = (weft_rng_float(&rng) - 0.5f) * 20.0f;
        mx = fmax(mx, row[i]);
    }
    for (size_t i = 0; i < N; i++)
        sum += exp(row[i] - mx);
    uint32_t target = 517;
    double want_loss = log(sum) + mx - row[target];
    for (size_t i = 0; i < N; i++)
        ref[i] = 0.5 * (exp(row[i] - mx) / sum - (i == target));
    double loss = weft_kernel_softmax_xent(row, N, target, 0.5f);
    cr_assert_float_eq(loss, want_loss, 1e-5 * fabs(want_loss) + 1e-6);
    for (size_t i = 0; i < N; i++)
        cr_assert_float_eq(row[i], ref[i], 1e-6, "gradient[%zu]: %g, want %g", i, row[i], ref[i]);
}

Test(kernels, softmax_gradient_matches_central_differences)
{
    float logits[9] = { 0.3f, -1.2f, 2.0f, 0.0f, 0.7f, -0.4f, 1.1f, -2.5f, 0.9f }, row[9];
    memcpy(row, logits, sizeof row);
    weft_kernel_softmax_xent(row, 9, 4, 1.0f);
    const float h = 1e-2f;
    for (size_t i = 0; i < 9; i++) {
        float up[9], down[9];
        memcpy(up, logits, sizeof up);
        memcpy(down, logits, sizeof down);
        up[i] += h;
        down[i] -= h;
        double num = (weft_kernel_softmax_xent(up, 9, 4, 1.0f) -
                      weft_kernel_softmax_xent(down, 9, 4, 1.0f)) / (2.0 * h);
        cr_assert(fabs(num - row[i]) <= 1e-3 + 1e-2 * fabs(num), "logit %zu: numeric %g, analytic %g",
                  i, num, (double)row[i]);
    }
}

Test(kernels, logistic_loss_and_gradient)
{
    float xs[] = { -30.0f, -3.0f, -0.5f, 0.0f, 0.5f, 3.0f, 30.0f };
    for (size_t i = 0; i < sizeof xs / sizeof xs[0]; i++)
        for (int pos = 0; pos <= 1; pos++) {
            float dx, dummy;
            double loss = weft_kernel_logistic(xs[i], pos, &dx);
            double want = pos ? log1p(exp(-(double)xs[i])) : log1p(exp((double)xs[i]));
            cr_assert_float_eq(loss, want, 1e-9 + 1e-9 * want, "loss at %g", xs[i]);
            const float h = 1e-2f;
            double num = (weft_kernel_logistic(xs[i] + h, pos, &dummy) -
                          weft_kernel_logistic(xs[i] - h, pos, &dummy)) / (2.0 * h);
            cr_assert(fabs(num - dx) <= 1e-3 + 1e-2 * fabs(num), "x %g: numeric %g, analytic %g",
                      xs[i], num, (double)dx);
        }
}

Test(kernels, adagrad_and_adam_steps_match_their_formulas)
{
    float w[3] = { 1.0f, -2.0f, 0.5f }, acc[3] = { 0.0f, 4.0f, 1.0f }, g[3] = { 0.5f, 1.0f, -2.0f };
    weft_kernel_adagrad(w, acc, g, 3, 0.1f);
    /* acc = 0.25, 5, 5; w -= 0.1 g / sqrt(acc) */
    cr_assert_float_eq(w[0], 1.0f - 0.1f * 0.5f / 0.5f, 1e-6);
    cr_assert_float_eq(w[1], -2.0f - 0.1f / sqrtf(5.0f), 1e-6);
    cr_assert_float_eq(w[2], 0.5f + 0.2f / sqrtf(5.0f), 1e-6);
    float v[1] = { 0.0f }, m[1] = { 0.0f }, x[1] = { 1.0f }, gg[1] = { 0.2f };
    weft_kernel_adam(x, m, v, gg, 1, 0.01f, 1.0f - 0.9f, 1.0f - 0.999f);
    /* first step: m/c1 = g, v/c2 = g^2, so x -= lr * g / (|g| + eps) = lr * sign(g) */
    cr_assert_float_eq(x[0], 1.0f - 0.01f, 1e-6);
}
