/* Top-k scans shared between concurrent requests. A top-k query reads the whole embedding
 * matrix (or the int8 index's codes), so its cost is memory bandwidth (and, for many queries
 * at once, arithmetic); queries that arrive together are answered by one pass
 * (weft_topk_scan_batch reads each block of rows once for up to 64 queries,
 * weft_index_int8_search_many each chunk of codes) and get the same lists a scan of their
 * own would give. A request thread that finds no pass running leads one over everything waiting on the
 * same matrix (after letting the requests at work join, see gather()); the others sleep, each
 * on its own condition variable, until their pass is done or, when a pass ends with requests
 * still queued, the oldest of them is woken to lead the next. At most `leaders` passes run at
 * once (one per core by default). */
#include "http.h"

#include <pthread.h>
#include <sched.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/index.h"
#include "weft/topk.h"

/* Most queries in one pass: what weft_topk_scan_batch reads a block for at once. */
#define MAX_BATCH 64

struct scan_req {
    const float *e, *q;
    size_t n, d, k;
    const weft_topk_exclude *ex;
    const weft_index_codes *codes;  /* an int8 search of these codes, or NULL */
    const weft_index_ivf *ivf;      /* an ivf search of this index, or NULL */
    size_t oversample, nprobe;
    const weft_index_filter *f;     /* an index search's filter */
    weft_err rc;                    /* an index search's outcome, and why it failed */
    weft_error err;
    uint32_t *id;
    float *score;
    size_t count;
    bool is_done, is_taken;
    pthread_cond_t wake;            /* signalled when done, or when asked to lead */
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
    struct scan_req *head, **tail;  /* the queue, oldest first */
    size_t n_taken;                 /* requests in a running pass */
    const http_metrics *watched;    /* its in-flight gauge (http_scan_watch), or NULL */
    unsigned n_leaders, max_leaders;
    struct leader_space space[HTTP_SCAN_MAX_LEADERS];
} sched = { PTHREAD_MUTEX_INITIALIZER, NULL, &sched.head, 0, NULL, 0, 1, { { 0 } } };

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

void http_scan_watch(const http_metrics *m)
{
    pthread_mutex_lock(&sched.lock);
    sched.watched = m;
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

/* Answer @p batch (n int8 searches of the same codes) with one pass. */
static void run_int8(struct scan_req **batch, size_t n)
{
    weft_index_query qs[MAX_BATCH];
    for (size_t i = 0; i < n; i++)
        qs[i] = (weft_index_query){ .q = batch[i]->q, .k = batch[i]->k, .f = batch[i]->f,
                                    .id = batch[i]->id, .score = batch[i]->score };
    weft_error err;
    weft_error_clear(&err);
    weft_err rc = weft_index_int8_search_many(batch[0]->codes, batch[0]->e,
                                              batch[0]->oversample, qs, n, &err);
    for (size_t i = 0; i < n; i++) {
        batch[i]->rc = rc;
        batch[i]->err = err;
        batch[i]->count = rc == WEFT_OK ? qs[i].n_out : 0;
    }
}

/* Answer @p batch (n ivf searches of the same index) one by one. */
static void run_ivf(struct scan_req **batch, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        struct scan_req *r = batch[i];
        weft_error_clear(&r->err);
        r->rc = weft_index_ivf_search(r->ivf, r->e, r->q, r->k, r->nprobe, r->oversample, r->f,
                                      r->id, r->score, &r->count, &r->err);
    }
}

/* Answer @p batch (n requests on one matrix, or one index) with one pass, or one scan each
 * when the workspace cannot grow. Runs without the lock. */
static void run_batch(struct leader_space *sp, struct scan_req **batch, size_t n)
{
    if (n == 0)
        return;
    if (batch[0]->codes) {
        run_int8(batch, n);
        return;
    }
    if (batch[0]->ivf) {
        run_ivf(batch, n);
        return;
    }
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

/* Queued requests (under the lock). */
static size_t queue_length(void)
{
    size_t n = 0;
    for (const struct scan_req *r = sched.head; r; r = r->next)
        n++;
    return n;
}

/* Longest a new leader waits for other requests to join its pass (gather()). */
#define GATHER_MAX_NS 2000000L

static double elapsed_ns(const struct timespec *since)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    return (double)(now.tv_sec - since->tv_sec) * 1e9 + (double)(now.tv_nsec - since->tv_nsec);
}

/* Requests in flight that neither wait in the queue nor in a running pass: their threads
 * have work of their own (reading the request, writing a response). Under the lock. */
static long busy_elsewhere(size_t queued)
{
    if (!sched.watched)
        return 0;
    return http_metrics_in_flight(sched.watched) - (long)queued - (long)sched.n_taken;
}

/* Before a new leader takes its batch, let the requests that are being worked on reach the
 * queue. On a busy core a leader would otherwise scan alone: when a pass ends, its requests'
 * threads wake one by one to answer, the clients send their next requests, and the first
 * thread to receive one finds the queue empty while the rest still wait for the core. So the
 * leader yields the core to the threads ready to run, and goes on once a yield changes
 * nothing (neither the queue nor the count of requests at work, see busy_elsewhere()), the
 * batch is full, or GATHER_MAX_NS have passed. Alone on its core, a yield returns at once.
 * Called and returns with the lock held, by a thread counted in n_leaders. */
static void gather(void)
{
    struct timespec began;
    clock_gettime(CLOCK_MONOTONIC, &began);
    size_t queued = queue_length();
    long busy = busy_elsewhere(queued);
    while (queued < MAX_BATCH && elapsed_ns(&began) < GATHER_MAX_NS) {
        pthread_mutex_unlock(&sched.lock);
        sched_yield();
        pthread_mutex_lock(&sched.lock);
        size_t queued_now = queue_length();
        long busy_now = busy_elsewhere(queued_now);
        if (queued_now == queued && busy_now == busy)
            break;
        queued = queued_now;
        busy = busy_now;
    }
}

/* Whether @p a and @p b can share a pass: the same matrix, and the same index (or none). */
static bool same_pass(const struct scan_req *a, const struct scan_req *b)
{
    const uint8_t *ca = a->codes ? a->codes->code : NULL, *cb = b->codes ? b->codes->code : NULL;
    const float *ia = a->ivf ? a->ivf->centroid : NULL, *ib = b->ivf ? b->ivf->centroid : NULL;
    return a->e == b->e && a->n == b->n && a->d == b->d && ca == cb && ia == ib
           && a->oversample == b->oversample && a->nprobe == b->nprobe;
}

/* Take up to MAX_BATCH queued requests that can share the oldest one's pass out of the
 * queue, oldest first. Under the lock. */
static size_t take_batch(struct scan_req **batch)
{
    struct scan_req **link = &sched.head, *first = sched.head;
    size_t nb = 0;
    while (*link && nb < MAX_BATCH) {
        struct scan_req *r = *link;
        if (same_pass(r, first)) {
            r->is_taken = true;
            batch[nb++] = r;
            *link = r->next;
        } else {
            link = &r->next;
        }
    }
    sched.tail = &sched.head;
    while (*sched.tail)
        sched.tail = &(*sched.tail)->next;
    return nb;
}

/* Queue @p me and return once its pass is done: led by this thread, or by another. */
static void submit(struct scan_req *me)
{
    pthread_cond_init(&me->wake, NULL);
    pthread_mutex_lock(&sched.lock);
    *sched.tail = me;
    sched.tail = &me->next;
    while (!me->is_done) {
        if (me->is_taken || sched.n_leaders >= sched.max_leaders) {
            pthread_cond_wait(&me->wake, &sched.lock);
            continue;
        }
        /* Lead: the oldest waiting request's pass, everything waiting that can share it. */
        struct leader_space *sp = NULL;
        for (size_t i = 0; !sp && i < HTTP_SCAN_MAX_LEADERS; i++)
            if (!sched.space[i].is_busy)
                sp = &sched.space[i];
        sp->is_busy = true;
        sched.n_leaders++;
        gather();
        struct scan_req *batch[MAX_BATCH];
        size_t nb = take_batch(batch);
        sched.n_taken += nb;
        pthread_mutex_unlock(&sched.lock);
        run_batch(sp, batch, nb);
        pthread_mutex_lock(&sched.lock);
        sched.n_taken -= nb;
        for (size_t i = 0; i < nb; i++) {
            batch[i]->is_done = true;
            pthread_cond_signal(&batch[i]->wake);
        }
        sp->is_busy = false;
        sched.n_leaders--;
        if (sched.head)   /* hand the next pass to the oldest request still waiting */
            pthread_cond_signal(&sched.head->wake);
    }
    pthread_mutex_unlock(&sched.lock);
    pthread_cond_destroy(&me->wake);
}

/* submit() for an index search: its list's length into *@p n_out, its outcome. */
static weft_err submit_index(struct scan_req *me, size_t *n_out, weft_error *err)
{
    submit(me);
    *n_out = me->count;
    if (me->rc != WEFT_OK && err)
        *err = me->err;
    return me->rc;
}

size_t http_scan_topk(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score)
{
    if (k == 0)
        return 0;
    struct scan_req me = { .e = e, .q = q, .n = n, .d = d, .k = k, .ex = ex, .id = id,
                           .score = score };
    submit(&me);
    return me.count;
}

weft_err http_scan_int8(const weft_index_codes *c, const float *e, size_t oversample,
                        const float *q, size_t k, const weft_index_filter *f, uint32_t *id,
                        float *score, size_t *n_out, weft_error *err)
{
    *n_out = 0;
    if (k == 0 || c->n == 0)
        return WEFT_OK;
    struct scan_req me = { .e = e, .q = q, .n = c->n, .d = c->d, .k = k, .codes = c,
                           .oversample = oversample, .f = f, .id = id, .score = score };
    return submit_index(&me, n_out, err);
}

weft_err http_scan_ivf(const weft_index_ivf *ix, const float *e, size_t nprobe,
                       size_t oversample, const float *q, size_t k, const weft_index_filter *f,
                       uint32_t *id, float *score, size_t *n_out, weft_error *err)
{
    *n_out = 0;
    if (k == 0 || ix->n == 0)
        return WEFT_OK;
    struct scan_req me = { .e = e, .q = q, .n = ix->n, .d = ix->d, .k = k, .ivf = ix,
                           .nprobe = nprobe, .oversample = oversample, .f = f, .id = id,
                           .score = score };
    return submit_index(&me, n_out, err);
}
