/* Top-k scans shared between concurrent requests. A top-k query reads the whole embedding
 * matrix, so its cost is memory bandwidth; queries that arrive together are answered by one
 * pass (weft_topk_scan_batch reads each block of rows once for up to 64 queries) and get the
 * same lists a scan of their own would give. A request thread that finds no pass running
 * leads one over everything waiting on the same matrix; the others sleep until theirs is
 * done. At most `leaders` passes run at once (one per core by default). */
#include "http.h"

#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/topk.h"

/* Most queries in one pass: what weft_topk_scan_batch reads a block for at once. */
#define MAX_BATCH 64

struct scan_req {
    const float *e, *q;
    size_t n, d, k;
    const weft_topk_exclude *ex;
    uint32_t *id;
    float *score;
    size_t count;
    bool is_done, is_taken;
    struct scan_req *next;
};

/* The queue and the leaders' workspace (each leader owns one slot while it runs). */
struct leader_space {
    bool is_busy;
    float *q;                       /* (MAX_BATCH, d_cap) */
    size_t d_cap;
    uint32_t *id;                   /* (MAX_BATCH, k_cap) */
    float *score;
    size_t k_cap;
};

static struct {
    pthread_mutex_t lock;
    pthread_cond_t done;
    struct scan_req *head;
    unsigned n_leaders, max_leaders;
    struct leader_space space[HTTP_SCAN_MAX_LEADERS];
} sched = { PTHREAD_MUTEX_INITIALIZER, PTHREAD_COND_INITIALIZER, NULL, 0, 1, { { 0 } } };

void http_scan_init(unsigned leaders)
{
    if (leaders < 1)
        leaders = 1;
    if (leaders > HTTP_SCAN_MAX_LEADERS)
        leaders = HTTP_SCAN_MAX_LEADERS;
    pthread_mutex_lock(&sched.lock);
    sched.max_leaders = leaders;
    pthread_mutex_unlock(&sched.lock);
}

void http_scan_fini(void)
{
    pthread_mutex_lock(&sched.lock);
    for (size_t i = 0; i < HTTP_SCAN_MAX_LEADERS; i++) {
        struct leader_space *sp = &sched.space[i];
        free(sp->q);
        free(sp->id);
        free(sp->score);
        memset(sp, 0, sizeof *sp);
    }
    pthread_mutex_unlock(&sched.lock);
}

/* Grow @p sp for @p d and @p k; false when out of memory. */
static bool space_fit(struct leader_space *sp, size_t d, size_t k)
{
    if (d > sp->d_cap) {
        float *q = weft_alloc_array(MAX_BATCH, d * sizeof *q);
        if (!q)
            return false;
        free(sp->q);
        sp->q = q;
        sp->d_cap = d;
    }
    if (k > sp->k_cap) {
        uint32_t *id = weft_alloc_array(MAX_BATCH, k * sizeof *id);
        float *score = weft_alloc_array(MAX_BATCH, k * sizeof *score);
        if (!id || !score) {
            free(id);
            free(score);
            return false;
        }
        free(sp->id);
        free(sp->score);
        sp->id = id;
        sp->score = score;
        sp->k_cap = k;
    }
    return true;
}

/* Answer @p batch (n requests on one matrix) with one pass, or one scan each when the
 * workspace cannot grow. Runs without the lock. */
static void run_batch(struct leader_space *sp, struct scan_req **batch, size_t n)
{
    if (n == 0)
        return;
    size_t k = 0, d = batch[0]->d;
    for (size_t i = 0; i < n; i++)
        k = batch[i]->k > k ? batch[i]->k : k;
    if (n == 1 || !space_fit(sp, d, k)) {
        for (size_t i = 0; i < n; i++) {
            struct scan_req *r = batch[i];
            r->count = weft_topk_scan(r->e, r->n, r->d, r->q, r->k, r->ex, r->id, r->score);
        }
        return;
    }
    weft_topk_exclude ex[MAX_BATCH];
    size_t count[MAX_BATCH];
    for (size_t i = 0; i < n; i++) {
        memcpy(sp->q + i * d, batch[i]->q, d * sizeof *sp->q);
        ex[i] = batch[i]->ex ? *batch[i]->ex : (weft_topk_exclude){ 0 };
    }
    weft_topk_scan_batch(batch[0]->e, batch[0]->n, d, sp->q, n, k, ex, sp->id, sp->score,
                         count);
    for (size_t i = 0; i < n; i++) {
        struct scan_req *r = batch[i];
        /* A longer list's first entries are the shorter list (same order, same ties). */
        r->count = count[i] < r->k ? count[i] : r->k;
        memcpy(r->id, sp->id + i * k, r->count * sizeof *r->id);
        memcpy(r->score, sp->score + i * k, r->count * sizeof *r->score);
    }
}

size_t http_scan_topk(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score)
{
    struct scan_req me = { e, q, n, d, k, ex, id, score, 0, false, false, NULL };
    if (k == 0)
        return 0;
    pthread_mutex_lock(&sched.lock);
    me.next = sched.head;   /* order does not matter: every request waiting is in the pass */
    sched.head = &me;
    while (!me.is_done) {
        if (sched.n_leaders >= sched.max_leaders || me.is_taken) {
            pthread_cond_wait(&sched.done, &sched.lock);
            continue;
        }
        /* Lead: take every waiting request on the first waiting request's matrix. */
        struct leader_space *sp = NULL;
        for (size_t i = 0; !sp && i < HTTP_SCAN_MAX_LEADERS; i++)
            if (!sched.space[i].is_busy)
                sp = &sched.space[i];
        sp->is_busy = true;
        sched.n_leaders++;
        struct scan_req *batch[MAX_BATCH], **link = &sched.head, *first = NULL;
        size_t nb = 0;
        while (*link && nb < MAX_BATCH) {
            struct scan_req *r = *link;
            if (!first)
                first = r;
            if (r->e == first->e && r->n == first->n && r->d == first->d) {
                r->is_taken = true;
                batch[nb++] = r;
                *link = r->next;   /* out of the queue */
            } else {
                link = &r->next;
            }
        }
        pthread_mutex_unlock(&sched.lock);
        run_batch(sp, batch, nb);
        pthread_mutex_lock(&sched.lock);
        for (size_t i = 0; i < nb; i++)
            batch[i]->is_done = true;
        sp->is_busy = false;
        sched.n_leaders--;
        pthread_cond_broadcast(&sched.done);
    }
    pthread_mutex_unlock(&sched.lock);
    return me.count;
}
