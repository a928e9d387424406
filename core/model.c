/* Link model kinds and their shared scoring (include/weft/model.h). */
#include "weft/model.h"

#include <math.h>
#include <string.h>

const char *weft_model_kind_name(weft_link_kind kind)
{
    switch (kind) {
    case WEFT_LINK_DOT: return "dot";
    }
    return NULL;
}

bool weft_model_kind_parse(const char *name, weft_link_kind *out)
{
    if (!strcmp(name, "dot")) {
        *out = WEFT_LINK_DOT;
        return true;
    }
    return false;
}

void weft_model_query(const weft_link_model *m, uint32_t anchor, uint32_t r, bool is_head,
                      float *q)
{
    (void)r;
    (void)is_head;   /* dot is symmetric: heads and tails rank alike */
    memcpy(q, m->entity + (size_t)anchor * m->dim, m->dim * sizeof *q);
}

float weft_model_score(const weft_link_model *m, uint32_t s, uint32_t r, uint32_t t)
{
    (void)r;
    const float *a = m->entity + (size_t)s * m->dim, *b = m->entity + (size_t)t * m->dim;
    double acc = 0.0;
    for (size_t i = 0; i < m->dim; i++)
        acc += (double)a[i] * b[i];
    return (float)acc;
}

double weft_model_sigmoid(double x)
{
    if (x >= 0)
        return 1.0 / (1.0 + exp(-x));
    double z = exp(x);
    return z / (1.0 + z);
}
