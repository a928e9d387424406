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

/** True when @p ex (may be NULL) leaves out @p id: a binary search of the sorted list. */
bool weft_topk_is_excluded(const weft_topk_exclude *ex, uint32_t id);

/**
 * Best @p k rows of @p e (n, d, row-major) by inner product with @p q (d), leaving out
 * @p ex (may be NULL). The score of row i is exactly weft_kernel_dot(e + i d, q, d)
 * (include/weft/kernels.h: 16 lanes, each product rounded to float before it is added, the
 * lanes added pairwise at the end; no fused multiply-add anywhere), on every path and CPU,
 * so it is also what weft_topk_scan_batch gives for the same query and what a caller gets
 * for that row from weft_kernel_dot. Order as above: higher score first, equal scores by
 * lower id, +-inf rank as numbers, NaN scores never enter. An excluded id costs a binary
 * search only when its score would enter.
 * @param e      n x d floats; may be NULL when n == 0; n <= 2^32 (ids are uint32_t)
 * @param q      d floats; may be NULL when d == 0 (every score is then 0)
 * @param id, score  k entries each, written best first
 * @return count written: min(k, n minus excluded rows and rows scoring NaN)
 * Threads: reentrant, allocates nothing. Cost: one pass over e, O(n d + c log k) with c the
 * rows that pass the selection's bar. With AVX-512 (weft_topk_is_native) it reads e at close
 * to the core's memory bandwidth: 16 rows per step, 8 of them in flight at once, and the bar
 * checked on the 16 scores in registers; elsewhere the portable loops, compiled for AVX2 and
 * for the baseline.
 */
size_t weft_topk_scan(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score);

/**
 * weft_topk_scan for @p n_queries queries at once: query j is row j of @p q (n_queries, d),
 * leaves out @p ex[j] (ex may be NULL: nothing left out; else n_queries entries), and gets
 * its list in @p id[j k ..] and @p score[j k ..] (n_queries x k each) and its length in
 * @p count[j] (n_queries). Every list is identical, ids and scores, to what weft_topk_scan
 * returns for that query alone.
 * Threads: reentrant, allocates nothing (about 3 KiB of stack). Cost: the arithmetic of
 * n_queries scans, but e is read from memory once per 64 queries: with AVX-512, each block
 * of 16 KiB of e is scored from L1 against up to 64 queries by a register tile of 4 rows x
 * 4 queries, while the next block is prefetched.
 */
void weft_topk_scan_batch(const float *e, size_t n, size_t d, const float *q, size_t n_queries,
                          size_t k, const weft_topk_exclude *ex, uint32_t *id, float *score,
                          size_t *count);

/** True when the scans use their AVX-512 kernels on this CPU (false: the portable loops). */
bool weft_topk_is_native(void);

/**
 * Allow (true, the default) or forbid the scans' AVX-512 kernels, process-wide; forbidding
 * sends them to the portable loops, which give the same results. For tests and side-by-side
 * measurements. Thread-safe.
 */
void weft_topk_allow_native(bool allow);

#endif
