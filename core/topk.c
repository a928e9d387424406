/* Scoring kernels and top-k selection (include/weft/topk.h).
 * The selection is a binary min-heap whose root is the worst kept entry under the order
 * "higher score first, then lower id first"; finish() turns it into a sorted list. */
#include "weft/topk.h"

#include <cblas.h>
#include <math.h>
#include <stdlib.h>

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

static bool is_excluded(const weft_topk_exclude *ex, uint32_t id)
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

/* Rows scored per sgemv call: 1 KiB of scores on the stack, and a block of e that stays
 * in L2 for typical d. */
#define SCAN_BLOCK 256

size_t weft_topk_scan(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score)
{
    weft_topk t;
    weft_topk_init(&t, k, id, score);
    float buf[SCAN_BLOCK];
    for (size_t base = 0; base < n; base += SCAN_BLOCK) {
        size_t m = n - base < SCAN_BLOCK ? n - base : SCAN_BLOCK;
        cblas_sgemv(CblasRowMajor, CblasNoTrans, (int)m, (int)d, 1.0f, e + base * d, (int)d, q,
                    1, 0.0f, buf, 1);
        for (size_t i = 0; i < m; i++) {
            uint32_t c = (uint32_t)(base + i);
            if (weft_topk_would_enter(&t, c, buf[i]) && !is_excluded(ex, c))
                weft_topk_push(&t, c, buf[i]);
        }
    }
    return weft_topk_finish(&t);
}
