/* Central-difference gradient checks: loss = sum(w .* forward(x)) with random w, summed in
 * double; pass when |num - ana| <= 1e-3 + 1e-2 * |num| at every coordinate. */
#include <criterion/criterion.h>
#include <math.h>
#include <string.h>

#include "weft/model_dot.h"
#include "weft/rng.h"

enum { N_ENT = 5, DIM = 4, B = 6 };

static double dot_loss(const float *e, const uint32_t *trip, const float *w)
{
    float out[B];
    weft_dot_forward(out, e, trip, B, DIM);
    double acc = 0;
    for (size_t i = 0; i < B; i++)
        acc += (double)w[i] * out[i];
    return acc;
}

Test(grad, dot_backward_matches_central_differences)
{
    weft_rng rng;
    weft_rng_seed(&rng, 5);
    float e[N_ENT * DIM], de[N_ENT * DIM], w[B];
    /* Includes a self-loop (2, 2) and a repeated node, where gradients add up. */
    uint32_t trip[B * 3] = { 0, 0, 1, 2, 0, 2, 3, 0, 4, 1, 0, 3, 4, 0, 0, 0, 0, 3 };
    for (size_t i = 0; i < N_ENT * DIM; i++)
        e[i] = weft_rng_float(&rng) * 2 - 1;
    for (size_t i = 0; i < B; i++)
        w[i] = weft_rng_float(&rng) * 2 - 1;
    memset(de, 0, sizeof de);
    weft_dot_backward(de, w, e, trip, B, DIM);
    const float h = 1e-2f;
    for (size_t i = 0; i < N_ENT * DIM; i++) {
        float keep = e[i];
        e[i] = keep + h;
        double up = dot_loss(e, trip, w);
        e[i] = keep - h;
        double down = dot_loss(e, trip, w);
        e[i] = keep;
        double num = (up - down) / (2.0 * h);
        cr_assert(fabs(num - de[i]) <= 1e-3 + 1e-2 * fabs(num),
                  "entity[%zu]: numeric %g, analytic %g", i, num, (double)de[i]);
    }
}
