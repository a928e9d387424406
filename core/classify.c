/* Classification metrics (include/weft/classify.h). */
#include "weft/classify.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"

size_t weft_classify_argmax(const float *p, size_t n)
{
    size_t best = 0;
    for (size_t j = 1; j < n; j++)
        if (p[j] > p[best])
            best = j;
    return best;
}

void weft_classify_metrics_fini(weft_classify_metrics *m)
{
    if (!m)
        return;
    free(m->precision);
    free(m->recall);
    free(m->f1);
    free(m->support);
    free(m->confusion);
    memset(m, 0, sizeof *m);
}

weft_err weft_classify_metrics_compute(const float *prob, const int32_t *y, const uint8_t *part,
                                       size_t n, size_t n_classes, uint8_t which,
                                       weft_classify_metrics *out, weft_error *err)
{
    weft_classify_metrics m = { 0 };
    m.n_classes = n_classes;
    m.precision = weft_calloc_array(n_classes, sizeof *m.precision);
    m.recall = weft_calloc_array(n_classes, sizeof *m.recall);
    m.f1 = weft_calloc_array(n_classes, sizeof *m.f1);
    m.support = weft_calloc_array(n_classes, sizeof *m.support);
    m.confusion = n_classes && n_classes <= SIZE_MAX / n_classes
                      ? weft_calloc_array(n_classes * n_classes, sizeof *m.confusion) : NULL;
    uint64_t *predicted = weft_calloc_array(n_classes ? n_classes : 1, sizeof *predicted);
    if (!m.precision || !m.recall || !m.f1 || !m.support || !m.confusion || !predicted) {
        free(predicted);
        weft_classify_metrics_fini(&m);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for metrics");
    }
    /* Calibration bins: count, correct, summed confidence. */
    double bin_n[WEFT_CLASSIFY_ECE_BINS] = { 0 }, bin_ok[WEFT_CLASSIFY_ECE_BINS] = { 0 },
           bin_conf[WEFT_CLASSIFY_ECE_BINS] = { 0 };
    size_t correct = 0;
    double nll = 0.0;
    for (size_t v = 0; v < n; v++) {
        if (part[v] != which || y[v] < 0 || (size_t)y[v] >= n_classes)
            continue;
        const float *p = prob + v * n_classes;
        size_t t = (size_t)y[v], k = weft_classify_argmax(p, n_classes);
        m.n++;
        m.support[t]++;
        predicted[k]++;
        m.confusion[t * n_classes + k]++;
        correct += k == t;
        double pt = p[t] < 1e-15f ? 1e-15 : (double)p[t];
        nll -= log(pt);
        double conf = p[k];
        size_t b = (size_t)(conf * WEFT_CLASSIFY_ECE_BINS);   /* bins (i/15, (i+1)/15] */
        if (b > 0 && conf * WEFT_CLASSIFY_ECE_BINS == (double)b)
            b--;
        if (b >= WEFT_CLASSIFY_ECE_BINS)
            b = WEFT_CLASSIFY_ECE_BINS - 1;
        bin_n[b] += 1.0;
        bin_ok[b] += k == t;
        bin_conf[b] += conf;
    }
    if (m.n == 0) {
        free(predicted);
        weft_classify_metrics_fini(&m);
        return weft_error_set(err, WEFT_ERR_INVALID, "no labelled node to evaluate");
    }
    m.accuracy = (double)correct / (double)m.n;
    m.log_loss = nll / (double)m.n;
    size_t n_present = 0;
    double f1_sum = 0.0;
    for (size_t c = 0; c < n_classes; c++) {
        uint64_t tp = m.confusion[c * n_classes + c];
        m.precision[c] = predicted[c] ? (double)tp / (double)predicted[c] : 0.0;
        m.recall[c] = m.support[c] ? (double)tp / (double)m.support[c] : 0.0;
        double s = m.precision[c] + m.recall[c];
        m.f1[c] = s > 0.0 ? 2.0 * m.precision[c] * m.recall[c] / s : 0.0;
        if (m.support[c] || predicted[c]) {
            n_present++;
            f1_sum += m.f1[c];
        }
    }
    m.macro_f1 = n_present ? f1_sum / (double)n_present : 0.0;
    for (size_t b = 0; b < WEFT_CLASSIFY_ECE_BINS; b++)
        if (bin_n[b] > 0)
            m.ece += fabs(bin_ok[b] - bin_conf[b]) / (double)m.n;
    free(predicted);
    *out = m;
    return WEFT_OK;
}

json_t *weft_classify_metrics_json(const weft_classify_metrics *m, const weft_names_view *classes)
{
    json_t *per = json_object(), *matrix = json_array(), *names = json_array();
    json_t *o = json_pack("{s:I, s:f, s:f, s:f, s:f}", "nodes", (json_int_t)m->n, "accuracy",
                          m->accuracy, "macro_f1", m->macro_f1, "ece", m->ece, "log_loss",
                          m->log_loss);
    int bad = !per || !matrix || !names || !o;
    for (size_t c = 0; !bad && c < m->n_classes; c++) {
        const char *name = weft_names_get(classes, (uint32_t)c, NULL);
        bad |= json_object_set_new(per, name, json_pack("{s:f, s:f, s:f, s:I}", "precision",
                                                        m->precision[c], "recall", m->recall[c],
                                                        "f1", m->f1[c], "support",
                                                        (json_int_t)m->support[c]));
        bad |= json_array_append_new(names, json_string(name));
        json_t *row = json_array();
        for (size_t k = 0; row && k < m->n_classes; k++)
            bad |= json_array_append_new(row, json_integer(
                                                  (json_int_t)m->confusion[c * m->n_classes + k]));
        bad |= json_array_append_new(matrix, row);
    }
    if (!bad) {
        bad |= json_object_set_new(o, "per_class", per);
        per = NULL;
        bad |= json_object_set_new(o, "confusion", json_pack("{s:o, s:o}", "classes", names,
                                                             "matrix", matrix));
        names = matrix = NULL;
    }
    json_decref(per);
    json_decref(names);
    json_decref(matrix);
    if (bad) {
        json_decref(o);
        return NULL;
    }
    return o;
}
