/* Trivial baselines (include/weft/baseline.h). */
#include "weft/baseline.h"

#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"

weft_err weft_baseline_popularity_init(weft_baseline_popularity *p, const weft_triple *train,
                                       size_t m, size_t n_nodes, size_t n_relations,
                                       weft_error *err)
{
    memset(p, 0, sizeof *p);
    size_t cells = n_relations * n_nodes;
    if (n_nodes && cells / n_nodes != n_relations)
        return weft_error_set(err, WEFT_ERR_NOMEM, "popularity table too large");
    p->in_deg = weft_calloc_array(cells, sizeof(float));
    p->out_deg = weft_calloc_array(cells, sizeof(float));
    if (!p->in_deg || !p->out_deg) {
        weft_baseline_popularity_fini(p);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the popularity baseline");
    }
    p->n_nodes = n_nodes;
    p->n_relations = n_relations;
    for (size_t i = 0; i < m; i++) {
        p->in_deg[(size_t)train[i].r * n_nodes + train[i].t] += 1.0f;
        p->out_deg[(size_t)train[i].r * n_nodes + train[i].s] += 1.0f;
    }
    return WEFT_OK;
}

void weft_baseline_popularity_fini(weft_baseline_popularity *p)
{
    if (!p)
        return;
    free(p->in_deg);
    free(p->out_deg);
    p->in_deg = p->out_deg = NULL;
}

void weft_baseline_popularity_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head,
                                     float *out)
{
    (void)anchor;
    const weft_baseline_popularity *p = ctx;
    const float *deg = is_head ? p->out_deg : p->in_deg;
    memcpy(out, deg + (size_t)r * p->n_nodes, p->n_nodes * sizeof *out);
}
