/* weft: scoring kernels and top-k selection. Order everywhere: higher score first, and on
 * equal scores the lower id first, so results are deterministic. NaN scores never enter. */
#ifndef WEFT_TOPK_H
#define WEFT_TOPK_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/** A bounded selection over caller-provided buffers of k entries. Fields are private. */
typedef struct weft_topk {
    size_t k, n;
    uint32_t *id;
    float *score;
} weft_topk;

/** Start an empty selection of at most @p k into @p id and @p score (k entries each, kept). */
void weft_topk_init(weft_topk *t, size_t k, uint32_t *id, float *score);

/** True when (@p id, @p score) would enter the selection now. O(1). */
bool weft_topk_would_enter(const weft_topk *t, uint32_t id, float score);

/** Offer a candidate; kept if it ranks among the best k so far. O(log k). */
void weft_topk_push(weft_topk *t, uint32_t id, float score);

/** Sort the kept entries best first, in place in the buffers; @return their count (<= k). */
size_t weft_topk_finish(weft_topk *t);

/**
 * Best @p k of @p scores[0..n): ids and scores into @p id and @p score, best first.
 * @return count written, min(k, n minus NaNs). O(n log k).
 */
size_t weft_topk_select(const float *scores, size_t n, size_t k, uint32_t *id, float *score);

/** Candidates a scan leaves out: a sorted id list and optionally one id (self). */
typedef struct weft_topk_exclude {
    const uint32_t *sorted; /**< ascending; may be NULL when n_sorted == 0 */
    size_t n_sorted;
    bool has_self;
    uint32_t self;
} weft_topk_exclude;

/**
 * Best @p k rows of @p e (n, d, row-major) by inner product with @p q (d), leaving out
 * @p ex (may be NULL). Scores rows in blocks through cblas_sgemv into a stack buffer, so it
 * allocates nothing; an excluded id costs a binary search only when it would enter.
 * @return count written to @p id / @p score, best first.
 */
size_t weft_topk_scan(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score);

#endif
