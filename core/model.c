/* Link model kinds and their shared scoring (include/weft/model.h). Every kind is a query
 * vector q(anchor, relation) scored against candidate rows by an inner product; the
 * kind-specific algebra lives in model_distmult.c and model_complex.c. */
#include "weft/model.h"

#include <math.h>
#include <string.h>

#include "weft/model_complex.h"
#include "weft/model_distmult.h"

const char *weft_model_kind_name(weft_link_kind kind)
{
    switch (kind) {
    case WEFT_LINK_DOT: return "dot";
    case WEFT_LINK_DISTMULT: return "distmult";
    case WEFT_LINK_COMPLEX: return "complex";
    }
    return NULL;
}

bool weft_model_kind_parse(const char *name, weft_link_kind *out)
{
    static const weft_link_kind all[] = { WEFT_LINK_DOT, WEFT_LINK_DISTMULT, WEFT_LINK_COMPLEX };
    for (size_t i = 0; i < sizeof all / sizeof all[0]; i++)
        if (!strcmp(name, weft_model_kind_name(all[i]))) {
            *out = all[i];
            return true;
        }
    return false;
}

void weft_model_query_row(weft_link_kind kind, float *q, const float *a, const float *r,
                          size_t d, bool is_head)
{
    switch (kind) {
    case WEFT_LINK_DOT:
        memcpy(q, a, d * sizeof *q);   /* symmetric: heads and tails alike */
        return;
    case WEFT_LINK_DISTMULT:
        weft_distmult_query(q, a, r, d);   /* symmetric too */
        return;
    case WEFT_LINK_COMPLEX:
        weft_complex_query(q, a, r, d, is_head);
        return;
    }
}

void weft_model_query_row_backward(weft_link_kind kind, float *da, float *dr, const float *dq,
                                   const float *a, const float *r, size_t d, bool is_head)
{
    switch (kind) {
    case WEFT_LINK_DOT:
        for (size_t i = 0; i < d; i++)
            da[i] += dq[i];
        return;
    case WEFT_LINK_DISTMULT:
        weft_distmult_query_backward(da, dr, dq, a, r, d);
        return;
    case WEFT_LINK_COMPLEX:
        weft_complex_query_backward(da, dr, dq, a, r, d, is_head);
        return;
    }
}

/* The relation row a query uses: reciprocal models answer heads with the inverse row. */
static const float *relation_row(const weft_link_model *m, uint32_t r, bool *is_head)
{
    if (!m->relation)
        return NULL;
    if (*is_head && m->has_reciprocal) {
        *is_head = false;
        r += (uint32_t)m->n_relations;
    }
    return m->relation + (size_t)r * m->dim;
}

void weft_model_query(const weft_link_model *m, uint32_t anchor, uint32_t r, bool is_head,
                      float *q)
{
    const float *rel = relation_row(m, r, &is_head);
    weft_model_query_row(m->kind, q, m->entity + (size_t)anchor * m->dim, rel, m->dim, is_head);
}

void weft_model_forward(const weft_link_model *m, float *out, const uint32_t *trip, size_t b,
                        float *q)
{
    size_t d = m->dim;
    for (size_t i = 0; i < b; i++) {
        weft_model_query(m, trip[3 * i], trip[3 * i + 1], false, q);
        const float *et = m->entity + (size_t)trip[3 * i + 2] * d;
        float acc = 0.0f;
        for (size_t j = 0; j < d; j++)
            acc += q[j] * et[j];
        out[i] = acc;
    }
}

void weft_model_backward(const weft_link_model *m, float *de, float *dr, const float *dout,
                         const uint32_t *trip, size_t b, float *q)
{
    size_t d = m->dim;
    float *dq = q + d;
    for (size_t i = 0; i < b; i++) {
        uint32_t s = trip[3 * i], r = trip[3 * i + 1], t = trip[3 * i + 2];
        bool is_head = false;
        const float *rel = relation_row(m, r, &is_head);
        const float *es = m->entity + (size_t)s * d, *et = m->entity + (size_t)t * d;
        weft_model_query_row(m->kind, q, es, rel, d, false);
        for (size_t j = 0; j < d; j++) {
            de[(size_t)t * d + j] += dout[i] * q[j];   /* d(q . e_t)/d e_t = q */
            dq[j] = dout[i] * et[j];
        }
        float *drel = dr && rel ? dr + (size_t)(rel - m->relation) : NULL;
        weft_model_query_row_backward(m->kind, de + (size_t)s * d, drel, dq, es, rel, d, false);
    }
}

float weft_model_score(const weft_link_model *m, uint32_t s, uint32_t r, uint32_t t)
{
    float q[WEFT_MODEL_MAX_DIM];
    weft_model_query(m, s, r, false, q);
    const float *et = m->entity + (size_t)t * m->dim;
    double acc = 0.0;
    for (size_t i = 0; i < m->dim; i++)
        acc += (double)q[i] * et[i];
    return (float)acc;
}

double weft_model_sigmoid(double x)
{
    if (x >= 0)
        return 1.0 / (1.0 + exp(-x));
    double z = exp(x);
    return z / (1.0 + z);
}
