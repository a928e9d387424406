/* Trivial baselines (include/weft/baseline.h). */
#include "weft/baseline.h"

#include <math.h>
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

/* Class frequencies of the training nodes into @p freq (n_classes). @return training nodes. */
static size_t train_frequencies(const int32_t *y, const uint8_t *part, size_t n,
                                size_t n_classes, double *freq)
{
    size_t n_train = 0;
    memset(freq, 0, n_classes * sizeof *freq);
    for (size_t v = 0; v < n; v++)
        if (part[v] == 1 /* WEFT_LABEL_TRAIN */ && y[v] >= 0 && (size_t)y[v] < n_classes) {
            freq[y[v]] += 1.0;
            n_train++;
        }
    for (size_t c = 0; c < n_classes && n_train; c++)
        freq[c] /= (double)n_train;
    return n_train;
}

weft_err weft_baseline_majority(const int32_t *y, const uint8_t *part, size_t n,
                                size_t n_classes, float *prob, weft_error *err)
{
    double *freq = weft_alloc_array(n_classes ? n_classes : 1, sizeof *freq);
    if (!freq)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the majority baseline");
    size_t n_train = train_frequencies(y, part, n, n_classes, freq);
    for (size_t v = 0; n_train && v < n; v++)
        for (size_t c = 0; c < n_classes; c++)
            prob[v * n_classes + c] = (float)freq[c];
    free(freq);
    return n_train ? WEFT_OK : weft_error_set(err, WEFT_ERR_INVALID, "majority baseline: no "
                                              "training node");
}

weft_err weft_baseline_label_propagation(const weft_sparse *adj, const int32_t *y,
                                         const uint8_t *part, size_t n_classes,
                                         size_t max_iter, double tol, float *prob,
                                         size_t *n_iter, weft_error *err)
{
    size_t n = adj->n_rows, c = n_classes;
    if (n && c > SIZE_MAX / n / 2)
        return weft_error_set(err, WEFT_ERR_LIMIT, "label propagation: too many classes");
    double *cur = weft_calloc_array(n * c + 1, sizeof *cur);
    double *next = weft_calloc_array(n * c + 1, sizeof *next);
    double *freq = weft_alloc_array(c ? c : 1, sizeof *freq);
    if (!cur || !next || !freq) {
        free(cur);
        free(next);
        free(freq);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for label propagation");
    }
    weft_err rc = WEFT_OK;
    if (!train_frequencies(y, part, n, c, freq)) {
        rc = weft_error_set(err, WEFT_ERR_INVALID, "label propagation: no training node");
        goto done;
    }
    for (size_t v = 0; v < n; v++)
        if (part[v] == 1 && y[v] >= 0)
            cur[v * c + (size_t)y[v]] = 1.0;
    /* As scikit-learn's LabelPropagation.fit: the convergence test compares the last two
     * iterates before each step. */
    size_t it = 0;
    for (double change = INFINITY; it < max_iter && change >= tol; it++) {
        for (size_t v = 0; v < n; v++) {
            double *row = next + v * c;
            memset(row, 0, c * sizeof *row);
            if (part[v] == 1 && y[v] >= 0) {   /* clamped */
                row[y[v]] = 1.0;
                continue;
            }
            double deg = 0.0;
            for (uint64_t k = adj->off[v]; k < adj->off[v + 1]; k++) {
                const double *src = cur + (size_t)adj->col[k] * c;
                double w = adj->val[k];
                deg += w;
                for (size_t j = 0; j < c; j++)
                    row[j] += w * src[j];
            }
            double sum = 0.0;
            for (size_t j = 0; j < c; j++)
                sum += row[j];
            if (sum > 0.0)   /* the 1/deg of D^-1 A cancels in this normalisation */
                for (size_t j = 0; j < c; j++)
                    row[j] /= sum;
        }
        change = 0.0;
        for (size_t i = 0; i < n * c; i++)
            change += fabs(next[i] - cur[i]);
        double *t = cur;
        cur = next;
        next = t;
    }
    for (size_t v = 0; v < n; v++) {
        double sum = 0.0;
        for (size_t j = 0; j < c; j++)
            sum += cur[v * c + j];
        for (size_t j = 0; j < c; j++)   /* unreached nodes: the training frequencies */
            prob[v * c + j] = (float)(sum > 0.0 ? cur[v * c + j] / sum : freq[j]);
    }
    if (n_iter)
        *n_iter = it;
done:
    free(cur);
    free(next);
    free(freq);
    return rc;
}
