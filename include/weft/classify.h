/* weft: how well predicted class probabilities match held-out labels. */
#ifndef WEFT_CLASSIFY_H
#define WEFT_CLASSIFY_H

#include <jansson.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/names.h"

/** Bins of the expected calibration error (Guo et al. 2017 use 15). */
#define WEFT_CLASSIFY_ECE_BINS 15

/** Metrics over one set of labelled nodes. Release with weft_classify_metrics_fini(). */
typedef struct weft_classify_metrics {
    size_t n;              /**< nodes evaluated */
    size_t n_classes;
    double accuracy;
    double macro_f1;       /**< mean F1 over the classes present among the true or predicted
                                labels (scikit-learn's f1_score(average="macro")) */
    double ece;            /**< expected calibration error of the top probability, 15 equal
                                bins, weighted by their share of nodes */
    double log_loss;       /**< mean -log p(true class), probabilities clipped at 1e-15 */
    double *precision;     /**< (n_classes); 0 when the class is never predicted */
    double *recall;        /**< (n_classes); 0 when the class has no node */
    double *f1;            /**< (n_classes) */
    uint64_t *support;     /**< (n_classes): true nodes per class */
    uint64_t *confusion;   /**< (n_classes, n_classes): row = true class, column = predicted */
} weft_classify_metrics;

/**
 * Score @p prob (n, n_classes) row-major, against @p y for the nodes v with part[v] ==
 * @p which. The prediction is the most probable class (ties: the lowest id).
 * @return WEFT_OK, WEFT_ERR_INVALID (no such node), WEFT_ERR_NOMEM
 */
weft_err weft_classify_metrics_compute(const float *prob, const int32_t *y, const uint8_t *part,
                                       size_t n, size_t n_classes, uint8_t which,
                                       weft_classify_metrics *out, weft_error *err);

/** Release @p m's arrays and zero it; NULL does nothing. */
void weft_classify_metrics_fini(weft_classify_metrics *m);

/**
 * {"nodes", "accuracy", "macro_f1", "ece", "log_loss", "per_class": {class: {precision,
 * recall, f1, support}}, "confusion": {"classes": [...], "matrix": [[...]]}}; NULL when out of
 * memory. Caller owns the reference.
 */
json_t *weft_classify_metrics_json(const weft_classify_metrics *m, const weft_names_view *classes);

/** Index of the largest of @p p[0..n) (ties: the lowest index). */
size_t weft_classify_argmax(const float *p, size_t n);

#endif
