/* Scoring kernels and top-k selection (include/weft/topk.h).
 * The selection is a binary min-heap whose root is the worst kept entry under the order
 * "higher score first, then lower id first"; finish() turns it into a sorted list.
 *
 * The scans score every row with the summation order of weft_kernel_dot (include/weft/
 * kernels.h): lane l of 16 sums the products e[p] * q[p] for p = l, l + 16, l + 32, ...
 * in that order, each product rounded to float before it is added (no fused multiply-add:
 * -std=c11 keeps GCC from contracting), and the 16 lanes are then added pairwise (lane
 * l + 8 into l, then + 4, + 2, + 1). Every path below (AVX-512, the cloned portable loops,
 * one query or a batch) follows that order, so they return the same scores bit for bit and
 * the same lists.
 *
 * Fusing the selection into the scan: rows are visited in increasing id order, so a row
 * can only enter a full selection with a score strictly above the worst kept one (on equal
 * scores the kept, lower id wins). Each query keeps that bar as a threshold ("enter when
 * score >= bar", bar = the next float above the worst kept score, or -inf while the
 * selection is not full); a block's scores are compared with it in registers and only the
 * rows that pass are offered to the heap. Scores never go through memory. */
#include "weft/topk.h"

#include <math.h>
#include <stdatomic.h>
#include <stdlib.h>

#include "internal.h"

#if defined(__x86_64__) && defined(__GNUC__)
#define WEFT_TOPK_X86 1
#include <immintrin.h>
#endif

/* True when (ia, sa) ranks strictly after (ib, sb). */
static bool worse(uint32_t ia, float sa, uint32_t ib, float sb)
{
    return sa < sb || (sa == sb && ia > ib);
}

void weft_topk_init(weft_topk *t, size_t k, uint32_t *id, float *score)
{
    t->k = k;
    t->n = 0;
    t->id = id;
    t->score = score;
}

bool weft_topk_would_enter(const weft_topk *t, uint32_t id, float score)
{
    if (isnan(score) || t->k == 0)
        return false;
    return t->n < t->k || worse(t->id[0], t->score[0], id, score);
}

static void swap_at(weft_topk *t, size_t a, size_t b)
{
    uint32_t i = t->id[a];
    float s = t->score[a];
    t->id[a] = t->id[b];
    t->score[a] = t->score[b];
    t->id[b] = i;
    t->score[b] = s;
}

static void sift_down(weft_topk *t, size_t i, size_t n)
{
    for (;;) {
        size_t l = 2 * i + 1, r = l + 1, m = i;
        if (l < n && worse(t->id[l], t->score[l], t->id[m], t->score[m]))
            m = l;
        if (r < n && worse(t->id[r], t->score[r], t->id[m], t->score[m]))
            m = r;
        if (m == i)
            return;
        swap_at(t, i, m);
        i = m;
    }
}

void weft_topk_push(weft_topk *t, uint32_t id, float score)
{
    if (!weft_topk_would_enter(t, id, score))
        return;
    if (t->n < t->k) {
        size_t i = t->n++;
        t->id[i] = id;
        t->score[i] = score;
        while (i > 0) {
            size_t p = (i - 1) / 2;
            if (!worse(t->id[i], t->score[i], t->id[p], t->score[p]))
                break;
            swap_at(t, i, p);
            i = p;
        }
        return;
    }
    t->id[0] = id;
    t->score[0] = score;
    sift_down(t, 0, t->n);
}

size_t weft_topk_finish(weft_topk *t)
{
    /* Heap sort: repeatedly move the worst to the end, giving best-first order. */
    for (size_t end = t->n; end > 1; end--) {
        swap_at(t, 0, end - 1);
        sift_down(t, 0, end - 1);
    }
    return t->n;
}

size_t weft_topk_select(const float *scores, size_t n, size_t k, uint32_t *id, float *score)
{
    weft_topk t;
    weft_topk_init(&t, k, id, score);
    for (size_t i = 0; i < n; i++)
        weft_topk_push(&t, (uint32_t)i, scores[i]);
    return weft_topk_finish(&t);
}

bool weft_topk_is_excluded(const weft_topk_exclude *ex, uint32_t id)
{
    if (!ex)
        return false;
    if (ex->has_self && ex->self == id)
        return true;
    size_t lo = 0, hi = ex->n_sorted;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (ex->sorted[mid] < id)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo < ex->n_sorted && ex->sorted[lo] == id;
}

/* The bar a later row's score must reach to enter t (see the top of this file): any
 * non-NaN score while t has room, else a score above the worst kept one. Since every later
 * id is higher than all kept ids, "score >= next float above the worst" is exactly
 * weft_topk_would_enter. A worst of +inf gives +inf: a later +inf then passes the bar and
 * is refused by the heap, which is rare and still exact. */
static float entry_bar(const weft_topk *t)
{
    if (t->n < t->k)
        return -INFINITY;
    return nextafterf(t->score[0], INFINITY);
}

/* Offer row c with score s to t unless excluded; the exclusion search runs only for rows
 * that would enter. */
static void offer(weft_topk *t, const weft_topk_exclude *ex, uint32_t c, float s)
{
    if (weft_topk_would_enter(t, c, s) && !weft_topk_is_excluded(ex, c))
        weft_topk_push(t, c, s);
}

/* Set by weft_topk_allow_native(false): the one mutable global of this module. */
static atomic_bool native_allowed = true;

void weft_topk_allow_native(bool allow)
{
    atomic_store(&native_allowed, allow);
}

/* ---- portable path: compiled per instruction set (WEFT_CLONES), used without AVX-512 ---- */

/* Rows scored per call of score_rows: their scores (256 bytes) stay in L1 between the
 * scoring loop and the bar check, and in the batch the block of e stays in L1/L2 while every
 * query of the group goes over it. */
enum { PORTABLE_ROWS = 64 };

/* Queries whose selections and bars one pass over e serves (the rest of a batch takes
 * further passes). */
enum { BATCH_GROUP = 64 };

/* out[i] = weft_kernel_dot(e + i d, q, d) for i < m, in the same order of operations
 * (kernels.c), written out here so the loop is cloned and inlined with the rows. */
WEFT_CLONES
static void score_rows(float *out, const float *e, size_t m, size_t d, const float *q)
{
    for (size_t i = 0; i < m; i++) {
        const float *row = e + i * d;
        float acc[16] = { 0 };
        size_t p = 0;
        for (; p + 16 <= d; p += 16)
            for (size_t j = 0; j < 16; j++)
                acc[j] += row[p + j] * q[p + j];
        for (size_t j = 0; p < d; p++, j++)
            acc[j] += row[p] * q[p];
        for (size_t w = 8; w > 0; w /= 2)
            for (size_t j = 0; j < w; j++)
                acc[j] += acc[j + w];
        out[i] = acc[0];
    }
}

/* Rows [r0, r1) (at most PORTABLE_ROWS) for one query. */
static void scan_rows_portable(const float *e, size_t r0, size_t r1, size_t d, const float *q,
                               weft_topk *t, const weft_topk_exclude *ex)
{
    float s[PORTABLE_ROWS];
    score_rows(s, e + r0 * d, r1 - r0, d, q);
    float bar = entry_bar(t);
    for (size_t i = 0; i < r1 - r0; i++) {
        if (s[i] >= bar) {
            offer(t, ex, (uint32_t)(r0 + i), s[i]);
            bar = entry_bar(t);
        }
    }
}

static void scan_portable(const float *e, size_t n, size_t d, const float *q, weft_topk *t,
                          const weft_topk_exclude *ex)
{
    for (size_t r0 = 0; r0 < n; r0 += PORTABLE_ROWS)
        scan_rows_portable(e, r0, n - r0 < PORTABLE_ROWS ? n : r0 + PORTABLE_ROWS, d, q, t, ex);
}

static void batch_portable(const float *e, size_t n, size_t d, const float *q, size_t nq,
                           weft_topk *t, const weft_topk_exclude *ex)
{
    for (size_t r0 = 0; r0 < n; r0 += PORTABLE_ROWS) {
        size_t r1 = n - r0 < PORTABLE_ROWS ? n : r0 + PORTABLE_ROWS;
        for (size_t j = 0; j < nq; j++)
            scan_rows_portable(e, r0, r1, d, q + j * d, &t[j], ex ? ex + j : NULL);
    }
}

#ifdef WEFT_TOPK_X86

/* ---- AVX-512 path ----
 * A block of 16 scores is 16 accumulators (one per row, or per (row, query) pair in the
 * batch), each holding the 16 lanes of weft_kernel_dot, then one transposing reduction that
 * adds the lanes pairwise in the same order for all 16 at once and leaves the 16 sums in one
 * register. fold8..fold1 are its four steps; after them, lane 4a + b holds the sum of
 * accumulator a + 4b, so the item meant for lane L goes into accumulator ACC_OF_LANE(L). */
#define AVX512 __attribute__((target("avx512f"), always_inline)) static inline

/* Lanes l and l + 8 of a (into output lanes 0..7) and of b (8..15). */
AVX512 __m512 fold8(__m512 a, __m512 b)
{
    return _mm512_add_ps(_mm512_shuffle_f32x4(a, b, _MM_SHUFFLE(1, 0, 1, 0)),
                         _mm512_shuffle_f32x4(a, b, _MM_SHUFFLE(3, 2, 3, 2)));
}

/* Partials l and l + 4 of the four vectors a and b carry (8 each), 4 per 128-bit quarter. */
AVX512 __m512 fold4(__m512 a, __m512 b)
{
    return _mm512_add_ps(_mm512_shuffle_f32x4(a, b, _MM_SHUFFLE(2, 0, 2, 0)),
                         _mm512_shuffle_f32x4(a, b, _MM_SHUFFLE(3, 1, 3, 1)));
}

/* Within each quarter: partials l and l + 2. */
AVX512 __m512 fold2(__m512 a, __m512 b)
{
    return _mm512_add_ps(_mm512_shuffle_ps(a, b, _MM_SHUFFLE(1, 0, 1, 0)),
                         _mm512_shuffle_ps(a, b, _MM_SHUFFLE(3, 2, 3, 2)));
}

/* Within each quarter: partials l and l + 1, the final sums. */
AVX512 __m512 fold1(__m512 a, __m512 b)
{
    return _mm512_add_ps(_mm512_shuffle_ps(a, b, _MM_SHUFFLE(2, 0, 2, 0)),
                         _mm512_shuffle_ps(a, b, _MM_SHUFFLE(3, 1, 3, 1)));
}

AVX512 __m512 reduce16(const __m512 acc[16])
{
    __m512 u[8], x[4], y[2];
#pragma GCC unroll 16
    for (int i = 0; i < 8; i++)
        u[i] = fold8(acc[2 * i], acc[2 * i + 1]);
#pragma GCC unroll 16
    for (int i = 0; i < 4; i++)
        x[i] = fold4(u[2 * i], u[2 * i + 1]);
    y[0] = fold2(x[0], x[1]);
    y[1] = fold2(x[2], x[3]);
    return fold1(y[0], y[1]);
}

/* The accumulator whose sum reduce16 leaves in lane L (see above). */
#define ACC_OF_LANE(L) (((L) >> 2) + 4 * ((L) & 3))

/* Offer the lanes of @p s set in @p m (lane L: row r0 + L) to t. */
__attribute__((target("avx512f"))) static void offer_lanes(weft_topk *t,
                                                           const weft_topk_exclude *ex,
                                                           size_t r0, __m512 s, __mmask16 m)
{
    float v[16];
    _mm512_storeu_ps(v, s);
    for (unsigned bits = m; bits; bits &= bits - 1) {
        unsigned lane = (unsigned)__builtin_ctz(bits);
        offer(t, ex, (uint32_t)(r0 + lane), v[lane]);
    }
}

/* Rows whose sums advance together in the one-query scan: GROUP independent chains of adds
 * keep the adders busy while each waits on its previous add, and each chunk of the query is
 * loaded once for all of them. Measured with bench_topk beside ref_topk at 40,943 x 200
 * (one query, q/s over the reference's, median of 7 alternating rounds, without the
 * prefetching below): 2 rows 0.81, 4 rows 1.01, 8 rows 1.05, 16 rows 1.05; at 1,000,000 x 128
 * all are at the memory's pace. */
enum { GROUP = 8 };

/* At the start of each 16-row step, the scan asks for the step's bytes shifted this far
 * ahead (one prefetch per 64-byte line, into L1): the rows the step reaches last and the
 * start of the next step. Measured per fresh process (ms a query, mean of queries 2-13 and
 * 28-40, 6 processes; OpenBLAS sgemv + heap beside): at 40,943 x 200 none 1.26 / 0.94,
 * 2 KiB 0.88 / 0.85, 4 KiB 0.99 / 0.76, reference 1.16 / 1.25; at 1,000,000 x 128 (first 12
 * queries) none 20.0, 2 KiB 18.4, 4 KiB 22.3, reference 28.5. (Repeated scans of the 33 MB
 * matrix run faster than the memory's bandwidth allows, so part of it comes from L3.) */
enum { PREFETCH_AHEAD = 2048 };

/* Lane sums of GROUP consecutive rows (lane l over p = l, l + 16, ... < d; @p tail masks the
 * last d % 16), each into the accumulator whose output lane is its row's. */
AVX512 void group_lanes(__m512 acc[16], const float *const row[GROUP], int first_lane,
                        const float *q, size_t d_full, __mmask16 tail)
{
    __m512 a[GROUP];
#pragma GCC unroll 16
    for (int m = 0; m < GROUP; m++)
        a[m] = _mm512_setzero_ps();
    for (size_t c = 0; c < d_full; c += 16) {
        __m512 qc = _mm512_loadu_ps(q + c);
#pragma GCC unroll 16
        for (int m = 0; m < GROUP; m++)
            a[m] = _mm512_add_ps(a[m], _mm512_mul_ps(_mm512_loadu_ps(row[m] + c), qc));
    }
    if (tail) {
        __m512 qc = _mm512_maskz_loadu_ps(tail, q + d_full);
#pragma GCC unroll 16
        for (int m = 0; m < GROUP; m++)
            a[m] = _mm512_add_ps(a[m],
                                 _mm512_mul_ps(_mm512_maskz_loadu_ps(tail, row[m] + d_full), qc));
    }
#pragma GCC unroll 16
    for (int m = 0; m < GROUP; m++)
        acc[ACC_OF_LANE(first_lane + m)] = a[m];
}

/* group_lanes when d % 16 == 8 and row[0] is 64-byte aligned, so every even row is too:
 * an odd row then starts 32 bytes into a cache line, and each 64-byte load of it would
 * straddle two lines. Its chunks are put together from aligned loads instead, the upper half
 * of one line and the lower half of the next (valignd), so each line is loaded once; the
 * first line's lower half is the end of the row before. Same lanes, order and sums as
 * group_lanes. The rows must be GROUP consecutive rows of e. Measured at 40,943 x 200 (q/s
 * over the reference's, median of 9 rounds, without prefetching): 1.14, against 1.12 with
 * plain loads. */
AVX512 void group_lanes_half(__m512 acc[16], const float *const row[GROUP], int first_lane,
                             const float *q, size_t d_full, __mmask16 tail)
{
    __m512 a[GROUP], line[GROUP];
#pragma GCC unroll 16
    for (int m = 0; m < GROUP; m++) {
        a[m] = _mm512_setzero_ps();
        if (m % 2)
            line[m] = _mm512_load_ps(row[m] - 8);
    }
    for (size_t c = 0; c < d_full; c += 16) {
        __m512 qc = _mm512_loadu_ps(q + c);
#pragma GCC unroll 16
        for (int m = 0; m < GROUP; m++) {
            __m512 x;
            if (m % 2) {
                __m512 next = _mm512_load_ps(row[m] - 8 + c + 16);
                x = _mm512_castsi512_ps(_mm512_alignr_epi32(_mm512_castps_si512(next),
                                                            _mm512_castps_si512(line[m]), 8));
                line[m] = next;
            } else {
                x = _mm512_load_ps(row[m] + c);
            }
            a[m] = _mm512_add_ps(a[m], _mm512_mul_ps(x, qc));
        }
    }
    __m512 qc = _mm512_maskz_loadu_ps(tail, q + d_full);   /* tail: the last 8 of the row */
#pragma GCC unroll 16
    for (int m = 0; m < GROUP; m++) {
        __m512 x;
        if (m % 2)
            x = _mm512_castsi512_ps(_mm512_maskz_alignr_epi32(
                tail, _mm512_castps_si512(line[m]), _mm512_castps_si512(line[m]), 8));
        else
            x = _mm512_maskz_load_ps(tail, row[m] + d_full);
        a[m] = _mm512_add_ps(a[m], _mm512_mul_ps(x, qc));
    }
#pragma GCC unroll 16
    for (int m = 0; m < GROUP; m++)
        acc[ACC_OF_LANE(first_lane + m)] = a[m];
}

/* One query, 16 rows per step, in address order (GROUP rows at a time); rows past n repeat
 * row n - 1 and their lanes are masked off. */
__attribute__((target("avx512f"))) static void scan_avx512(const float *e, size_t n, size_t d,
                                                           const float *q, weft_topk *t,
                                                           const weft_topk_exclude *ex)
{
    size_t d_full = d & ~(size_t)15;
    __mmask16 tail = (__mmask16)((1u << (d & 15)) - 1);
    bool is_half = d % 16 == 8 && (uintptr_t)e % 64 == 0;
    __m512 bar = _mm512_set1_ps(entry_bar(t));
    const char *base = (const char *)e;
    size_t bytes = n * d * sizeof *e, step = 16 * d * sizeof *e;
    for (size_t r0 = 0; r0 < n; r0 += 16) {
        size_t from = r0 * d * sizeof *e + PREFETCH_AHEAD;
        size_t to = from >= bytes ? from : bytes - from > step ? from + step : bytes;
        for (size_t b = from; b < to; b += 64)
            _mm_prefetch(base + b, _MM_HINT_T0);
        __m512 acc[16];
#pragma GCC unroll 16
        for (int g = 0; g < 16; g += GROUP) {
            const float *row[GROUP];
#pragma GCC unroll 16
            for (int m = 0; m < GROUP; m++) {
                size_t r = r0 + (size_t)(g + m);
                row[m] = e + (r < n ? r : n - 1) * d;
            }
            if (is_half && n - r0 >= 16)   /* full blocks only: clamped rows break parity */
                group_lanes_half(acc, row, g, q, d_full, tail);
            else
                group_lanes(acc, row, g, q, d_full, tail);
        }
        __m512 s = reduce16(acc);
        __mmask16 valid = n - r0 >= 16 ? 0xffff : (__mmask16)((1u << (n - r0)) - 1);
        __mmask16 m = _mm512_mask_cmp_ps_mask(valid, s, bar, _CMP_GE_OQ);
        if (m) {
            offer_lanes(t, ex, r0, s, m);
            bar = _mm512_set1_ps(entry_bar(t));
        }
    }
}

/* The batch's register tile: BR rows x BQ queries = 16 pairs, lane L = row L / BQ, query
 * L % BQ. Every chunk of 16 columns loads BR row vectors and BQ query vectors for 16
 * multiply-adds. Measured at 1,000,000 x 128, 64 queries (queries/s of CPU time, 3 runs
 * each): 4 x 4 553-608, 2 x 8 410-423, 8 x 2 438-478, 1 x 16 370-423. */
enum { BR = 4, BQ = 4 };

/* Bytes of e per block of the batch: the block stays in L1, beside the group's queries,
 * while every query of the group passes over it. Measured as above: 16 KiB
 * 553-608, 8 KiB 487-563, 32 KiB 487-587. Prefetching the next block during the passes over
 * this one: 504-509 against 416-437 without. */
enum { BATCH_BLOCK_BYTES = 16384 };

AVX512 __m512 tile_scores(const float *const row[BR], const float *const qv[BQ], size_t d_full,
                          __mmask16 tail)
{
    __m512 acc[16];
#pragma GCC unroll 16
    for (int i = 0; i < 16; i++)
        acc[i] = _mm512_setzero_ps();
    for (size_t c = 0; c < d_full; c += 16) {
        __m512 ev[BR];
#pragma GCC unroll 16
        for (int r = 0; r < BR; r++)
            ev[r] = _mm512_loadu_ps(row[r] + c);
#pragma GCC unroll 16
        for (int j = 0; j < BQ; j++) {
            __m512 qc = _mm512_loadu_ps(qv[j] + c);
#pragma GCC unroll 16
            for (int r = 0; r < BR; r++) {
                int i = ACC_OF_LANE(r * BQ + j);
                acc[i] = _mm512_add_ps(acc[i], _mm512_mul_ps(ev[r], qc));
            }
        }
    }
    if (tail) {
        __m512 ev[BR];
#pragma GCC unroll 16
        for (int r = 0; r < BR; r++)
            ev[r] = _mm512_maskz_loadu_ps(tail, row[r] + d_full);
#pragma GCC unroll 16
        for (int j = 0; j < BQ; j++) {
            __m512 qc = _mm512_maskz_loadu_ps(tail, qv[j] + d_full);
#pragma GCC unroll 16
            for (int r = 0; r < BR; r++) {
                int i = ACC_OF_LANE(r * BQ + j);
                acc[i] = _mm512_add_ps(acc[i], _mm512_mul_ps(ev[r], qc));
            }
        }
    }
    return reduce16(acc);
}

/* Bars of queries j0 .. j0 + BQ - 1 in the tile's lane order (lane L: query j0 + L % BQ);
 * bar[] has 16 readable entries from j0. */
AVX512 __m512 tile_bars(const float *bar, size_t j0)
{
    const __m512i query_of_lane = _mm512_set_epi32(
        15 % BQ, 14 % BQ, 13 % BQ, 12 % BQ, 11 % BQ, 10 % BQ, 9 % BQ, 8 % BQ, 7 % BQ, 6 % BQ,
        5 % BQ, 4 % BQ, 3 % BQ, 2 % BQ, 1 % BQ, 0);
    return _mm512_permutexvar_ps(query_of_lane, _mm512_loadu_ps(bar + j0));
}

/* Offer the tile lanes set in @p m: lane L is row r0 + L / BQ for query j0 + L % BQ. */
__attribute__((target("avx512f"))) static void offer_tile(weft_topk *t, float *bar,
                                                          const weft_topk_exclude *ex,
                                                          size_t r0, size_t j0, __m512 s,
                                                          __mmask16 m)
{
    float v[16];
    _mm512_storeu_ps(v, s);
    for (unsigned bits = m; bits; bits &= bits - 1) {
        unsigned lane = (unsigned)__builtin_ctz(bits);
        size_t j = j0 + lane % BQ;
        offer(&t[j], ex ? ex + j : NULL, (uint32_t)(r0 + lane / BQ), v[lane]);
        bar[j] = entry_bar(&t[j]);
    }
}

/* Up to BATCH_GROUP queries over all rows, block by block; within a block, each query sees
 * its rows in increasing order, as the bars require. Rows past n and queries past nq repeat
 * the last one and their lanes are masked off. */
__attribute__((target("avx512f"))) static void batch_avx512(const float *e, size_t n, size_t d,
                                                            const float *q, size_t nq,
                                                            weft_topk *t,
                                                            const weft_topk_exclude *ex)
{
    size_t d_full = d & ~(size_t)15;
    __mmask16 tail = (__mmask16)((1u << (d & 15)) - 1);
    float bar[BATCH_GROUP + 16];
    for (size_t j = 0; j < BATCH_GROUP + 16; j++)
        bar[j] = j < nq ? entry_bar(&t[j]) : INFINITY;
    size_t block = d ? BATCH_BLOCK_BYTES / (d * sizeof *e) : 256;
    block = block < BR ? BR : block - block % BR;
    /* While the passes of the queries go over one block, the next block is asked for in
     * equal slices, one per pass, so it arrives from memory before it is needed. */
    size_t n_pass = (nq + BQ - 1) / BQ;
    size_t slice = (block * d * sizeof *e + n_pass - 1) / n_pass;
    const char *base = (const char *)e;
    size_t bytes = n * d * sizeof *e;
    for (size_t b0 = 0; b0 < n; b0 += block) {
        size_t b1 = n - b0 < block ? n : b0 + block;
        for (size_t j0 = 0; j0 < nq; j0 += BQ) {
            size_t from = b1 * d * sizeof *e + j0 / BQ * slice;
            for (size_t b = from; b < from + slice && b < bytes; b += 64)
                _mm_prefetch(base + b, _MM_HINT_T0);
            const float *qv[BQ];
            for (int j = 0; j < BQ; j++)
                qv[j] = q + (j0 + (size_t)j < nq ? j0 + (size_t)j : nq - 1) * d;
            __m512 bars = tile_bars(bar, j0);
            for (size_t r0 = b0; r0 < b1; r0 += BR) {
                const float *row[BR];
                for (int r = 0; r < BR; r++)
                    row[r] = e + (r0 + (size_t)r < n ? r0 + (size_t)r : n - 1) * d;
                __m512 s = tile_scores(row, qv, d_full, tail);
                /* bars past nq are +inf: a score passes them only if it is +inf, so mask
                 * those lanes explicitly; rows past n likewise. */
                __mmask16 valid = 0xffff;
                if (n - r0 < BR)
                    valid = (__mmask16)((1u << ((n - r0) * BQ)) - 1);
                if (nq - j0 < BQ) {
                    unsigned cols = (1u << (nq - j0)) - 1, lanes = 0;
                    for (int r = 0; r < BR; r++)
                        lanes |= cols << (r * BQ);
                    valid &= (__mmask16)lanes;
                }
                __mmask16 m = _mm512_mask_cmp_ps_mask(valid, s, bars, _CMP_GE_OQ);
                if (m) {
                    offer_tile(t, bar, ex, r0, j0, s, m);
                    bars = tile_bars(bar, j0);
                }
            }
        }
    }
}

static bool use_avx512(void)
{
    return atomic_load(&native_allowed) && __builtin_cpu_supports("avx512f");
}

#else

static bool use_avx512(void)
{
    return false;
}

#endif

bool weft_topk_is_native(void)
{
    return use_avx512();
}

size_t weft_topk_scan(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score)
{
    weft_topk t;
    weft_topk_init(&t, k, id, score);
    if (n == 0 || k == 0)
        return 0;
#ifdef WEFT_TOPK_X86
    if (use_avx512()) {
        scan_avx512(e, n, d, q, &t, ex);
        return weft_topk_finish(&t);
    }
#endif
    scan_portable(e, n, d, q, &t, ex);
    return weft_topk_finish(&t);
}

void weft_topk_scan_batch(const float *e, size_t n, size_t d, const float *q, size_t n_queries,
                          size_t k, const weft_topk_exclude *ex, uint32_t *id, float *score,
                          size_t *count)
{
    for (size_t g = 0; g < n_queries; g += BATCH_GROUP) {
        size_t nq = n_queries - g < BATCH_GROUP ? n_queries - g : BATCH_GROUP;
        weft_topk t[BATCH_GROUP];
        for (size_t j = 0; j < nq; j++)
            weft_topk_init(&t[j], k, id + (g + j) * k, score + (g + j) * k);
        const weft_topk_exclude *exg = ex ? ex + g : NULL;
        if (n > 0 && k > 0) {
#ifdef WEFT_TOPK_X86
            if (use_avx512())
                batch_avx512(e, n, d, q + g * d, nq, t, exg);
            else
#endif
                batch_portable(e, n, d, q + g * d, nq, t, exg);
        }
        for (size_t j = 0; j < nq; j++)
            count[g + j] = weft_topk_finish(&t[j]);
    }
}
