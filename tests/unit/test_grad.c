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

/* The same check for every link model through the generic forward/backward, with
 * relations and reciprocal rows in play. */
#include "weft/model.h"

enum { G_ENT = 6, G_REL = 2, G_DIM = 6, G_B = 7 };

static double model_loss(const weft_link_model *m, const uint32_t *trip, const float *w)
{
    float out[G_B], q[WEFT_MODEL_MAX_DIM];
    weft_model_forward(m, out, trip, G_B, q);
    double acc = 0;
    for (size_t i = 0; i < G_B; i++)
        acc += (double)w[i] * out[i];
    return acc;
}

static void check_model(weft_link_kind kind, bool has_reciprocal)
{
    weft_rng rng;
    weft_rng_seed(&rng, 17 + (uint64_t)kind);
    static float e[G_ENT * G_DIM], r[2 * G_REL * G_DIM], de[G_ENT * G_DIM], dr[2 * G_REL * G_DIM];
    float w[G_B], q[2 * WEFT_MODEL_MAX_DIM];
    /* relation ids >= G_REL stand for reciprocal rows when has_reciprocal */
    uint32_t trip[G_B * 3] = { 0, 0, 1, 2, 1, 2, 3, 0, 4, 1, 1, 3, 4, 0, 0, 5, 1, 5, 2, 0, 3 };
    if (has_reciprocal) {
        trip[4] = 2 + 1;   /* (2, 1^-1, 2) */
        trip[13] = 2;      /* (4, 0^-1, 0) */
    }
    for (size_t i = 0; i < G_ENT * G_DIM; i++)
        e[i] = weft_rng_float(&rng) * 2 - 1;
    for (size_t i = 0; i < 2 * G_REL * G_DIM; i++)
        r[i] = weft_rng_float(&rng) * 2 - 1;
    for (size_t i = 0; i < G_B; i++)
        w[i] = weft_rng_float(&rng) * 2 - 1;
    weft_link_model m = { kind, G_ENT, G_REL, G_DIM, has_reciprocal, e,
                          kind == WEFT_LINK_DOT ? NULL : r };
    memset(de, 0, sizeof de);
    memset(dr, 0, sizeof dr);
    weft_model_backward(&m, de, kind == WEFT_LINK_DOT ? NULL : dr, w, trip, G_B, q);
    const float h = 1e-2f;
    float *params[2] = { e, r }, *grads[2] = { de, dr };
    size_t sizes[2] = { G_ENT * G_DIM, kind == WEFT_LINK_DOT ? 0 : 2 * G_REL * G_DIM };
    for (size_t p = 0; p < 2; p++)
        for (size_t i = 0; i < sizes[p]; i++) {
            float keep = params[p][i];
            params[p][i] = keep + h;
            double up = model_loss(&m, trip, w);
            params[p][i] = keep - h;
            double down = model_loss(&m, trip, w);
            params[p][i] = keep;
            double num = (up - down) / (2.0 * h);
            cr_assert(fabs(num - grads[p][i]) <= 1e-3 + 1e-2 * fabs(num),
                      "%s %s[%zu]: numeric %g, analytic %g", weft_model_kind_name(kind),
                      p ? "relation" : "entity", i, num, (double)grads[p][i]);
        }
}

Test(grad, dot_through_the_generic_path) { check_model(WEFT_LINK_DOT, false); }
Test(grad, distmult_backward_matches_central_differences) { check_model(WEFT_LINK_DISTMULT, false); }
Test(grad, distmult_with_reciprocal_rows) { check_model(WEFT_LINK_DISTMULT, true); }
Test(grad, complex_backward_matches_central_differences) { check_model(WEFT_LINK_COMPLEX, false); }
Test(grad, complex_with_reciprocal_rows) { check_model(WEFT_LINK_COMPLEX, true); }

/* Head queries (used by the logistic loss's head corruptions): q(a, r, head) . x must equal
 * the tail score with a in the tail slot, and its backward must match central differences. */
static double head_loss(weft_link_kind kind, const float *a, const float *r, const float *x)
{
    float q[G_DIM];
    weft_model_query_row(kind, q, a, r, G_DIM, true);
    double acc = 0;
    for (size_t i = 0; i < G_DIM; i++)
        acc += (double)q[i] * x[i];
    return acc;
}

static void check_head(weft_link_kind kind)
{
    weft_rng rng;
    weft_rng_seed(&rng, 29);
    float a[G_DIM], r[G_DIM], x[G_DIM], da[G_DIM] = { 0 }, dr[G_DIM] = { 0 }, qt[G_DIM];
    for (size_t i = 0; i < G_DIM; i++) {
        a[i] = weft_rng_float(&rng) * 2 - 1;
        r[i] = weft_rng_float(&rng) * 2 - 1;
        x[i] = weft_rng_float(&rng) * 2 - 1;
    }
    /* score(x, r, a) by the tail form must equal the head query of a scored against x */
    weft_model_query_row(kind, qt, x, r, G_DIM, false);
    double tail = 0;
    for (size_t i = 0; i < G_DIM; i++)
        tail += (double)qt[i] * a[i];
    cr_assert_float_eq(head_loss(kind, a, r, x), tail, 1e-5);
    weft_model_query_row_backward(kind, da, dr, x, a, r, G_DIM, true);
    const float h = 1e-2f;
    float *params[2] = { a, r }, *grads[2] = { da, dr };
    for (size_t p = 0; p < 2; p++)
        for (size_t i = 0; i < G_DIM; i++) {
            float keep = params[p][i];
            params[p][i] = keep + h;
            double up = head_loss(kind, a, r, x);
            params[p][i] = keep - h;
            double down = head_loss(kind, a, r, x);
            params[p][i] = keep;
            double num = (up - down) / (2.0 * h);
            cr_assert(fabs(num - grads[p][i]) <= 1e-3 + 1e-2 * fabs(num),
                      "%s head %s[%zu]: numeric %g, analytic %g", weft_model_kind_name(kind),
                      p ? "r" : "a", i, num, (double)grads[p][i]);
        }
}

Test(grad, distmult_head_query) { check_head(WEFT_LINK_DISTMULT); }
Test(grad, complex_head_query) { check_head(WEFT_LINK_COMPLEX); }
