/* Evaluation of link predictions (include/weft/eval.h): filtered ranks on all cores, their
 * summaries overall and per relation, and AUC-ROC / average precision against sampled
 * non-edges. Every figure is summed in a fixed order, so results never depend on the number
 * of threads. */
#include "weft/eval.h"

#include <cblas.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/gemm.h"
#include "weft/kernels.h"
#include "weft/rng.h"

double weft_eval_rank(const float *scores, size_t n, uint32_t target, const uint32_t *filtered,
                      size_t n_filtered, bool has_self, uint32_t self)
{
    float ts = scores[target];
    bool drop_self = has_self && self != target && self < n;
    /* Count over every candidate at once (vectorised), then take back the ones that do not
     * compete: the target itself, self, and each known answer (the filter list is short). */
    size_t higher = 0, equal = 0, left_out = drop_self;
    if (!isnan(ts)) {
        weft_kernel_count_vs(scores, n, ts, &higher, &equal);
        equal--;   /* the target equals itself */
        if (drop_self) {
            higher -= scores[self] > ts;
            equal -= scores[self] == ts;
        }
    }
    for (size_t i = 0; i < n_filtered; i++) {
        uint32_t c = filtered[i];
        if (c == target || c >= n || (drop_self && c == self) || (i > 0 && filtered[i - 1] == c))
            continue;
        left_out++;
        if (!isnan(ts)) {
            higher -= scores[c] > ts;
            equal -= scores[c] == ts;
        }
    }
    if (isnan(ts))   /* a NaN answer ranks behind every candidate that competes */
        return (double)(n - left_out);
    return 1.0 + (double)higher + (double)equal / 2.0;
}

/* Run @p worker on each of @p n jobs laid out @p size bytes apart: jobs 1.. on threads of
 * their own, job 0 (and any job whose thread failed to start, or all of them when the thread
 * table cannot be allocated) on the calling thread. Returns when every job has finished. */
static void run_jobs(void *jobs, size_t size, size_t n, void *(*worker)(void *))
{
    char *base = jobs;
    pthread_t *tids = weft_calloc_array(n, sizeof *tids);
    bool *started = weft_calloc_array(n, sizeof *started);
    bool can_spawn = tids && started;
    for (size_t t = 1; can_spawn && t < n; t++)
        started[t] = pthread_create(&tids[t], NULL, worker, base + t * size) == 0;
    for (size_t t = 0; t < n; t++)
        if (!can_spawn || !started[t])
            worker(base + t * size);
    for (size_t t = 1; can_spawn && t < n; t++)
        if (started[t])
            pthread_join(tids[t], NULL);
    free(tids);
    free(started);
}

/* Scores of model queries come in blocks: one sgemm of (block x dim) query vectors against
 * the (n_nodes x dim) entity matrix reads the matrix once per block instead of once per
 * query (sgemv), which is what bounds evaluation on large graphs. Blocks sit at fixed query
 * offsets whatever the thread count, so the same block is always computed the same way. */
#define MODEL_BLOCK_MAX 128
#define MODEL_BLOCK_CELLS ((size_t)4 << 20)   /* scores per block: 16 MB of floats */

struct rank_job {
    const weft_triple *test;
    size_t n_nodes, n_dirs;
    const weft_eval_filter *filter;
    weft_eval_score_fn score;
    void *ctx;
    const weft_link_model *model;   /* non-NULL: the blocked sgemm path */
    size_t block;                   /* queries per block (model path), else 1 */
    double *ranks;     /* (m * n_dirs) queries: tail rank, then head rank when n_dirs == 2 */
    size_t first, last;             /* queries [first, last) */
    bool is_nomem;
};

/* Query q of the job: the tail (even) or head (odd, both directions) of triple q / n_dirs. */
static void query_of(const struct rank_job *job, size_t q, uint32_t *anchor, uint32_t *answer,
                     bool *is_head)
{
    const weft_triple *e = &job->test[q / job->n_dirs];
    *is_head = job->n_dirs == 2 && q % 2 == 1;
    *anchor = *is_head ? e->t : e->s;
    *answer = *is_head ? e->s : e->t;
}

static double rank_query(const struct rank_job *job, const float *scores, size_t q)
{
    uint32_t anchor, answer;
    bool is_head;
    query_of(job, q, &anchor, &answer, &is_head);
    const weft_csr *known = is_head ? job->filter->known_in : job->filter->known_out;
    uint64_t first = 0;
    size_t count = 0;
    if (known)
        weft_csr_range(known, anchor, job->test[q / job->n_dirs].r, &first, &count);
    return weft_eval_rank(scores, job->n_nodes, answer, known ? known->nbr + first : NULL,
                          count, job->filter->exclude_self, anchor);
}

static void rank_one_by_one(struct rank_job *job, float *scores)
{
    for (size_t q = job->first; q < job->last; q++) {
        uint32_t anchor, answer;
        bool is_head;
        query_of(job, q, &anchor, &answer, &is_head);
        job->score(job->ctx, anchor, job->test[q / job->n_dirs].r, is_head, scores);
        job->ranks[q] = rank_query(job, scores, q);
    }
}

/* @p scores holds job->block rows of n_nodes, @p qv job->block rows of dim. */
static void rank_in_blocks(struct rank_job *job, float *scores, float *qv)
{
    const weft_link_model *m = job->model;
    size_t n = job->n_nodes, d = m->dim;
    for (size_t q0 = job->first; q0 < job->last; q0 += job->block) {
        size_t b = job->last - q0 < job->block ? job->last - q0 : job->block;
        for (size_t j = 0; j < b; j++) {
            uint32_t anchor, answer;
            bool is_head;
            query_of(job, q0 + j, &anchor, &answer, &is_head);
            weft_model_query(m, anchor, job->test[(q0 + j) / job->n_dirs].r, is_head,
                             qv + j * d);
        }
        /* scores (b, n) = qv (b, d) . entity (n, d)^T */
        weft_gemm(false, true, b, n, d, 1.0f, qv, d, m->entity, d, 0.0f, scores, n, 1);
        for (size_t j = 0; j < b; j++)
            job->ranks[q0 + j] = rank_query(job, scores + j * n, q0 + j);
    }
}

static void *rank_worker(void *arg)
{
    struct rank_job *job = arg;
    if (job->first == job->last)
        return NULL;
    float *scores = weft_alloc_array(job->block, job->n_nodes * sizeof *scores);
    float *qv = job->model ? weft_alloc_array(job->block, job->model->dim * sizeof *qv) : NULL;
    if (!scores || (job->model && !qv)) {
        job->is_nomem = true;
    } else if (job->model) {
        rank_in_blocks(job, scores, qv);
    } else {
        rank_one_by_one(job, scores);
    }
    free(scores);
    free(qv);
    return NULL;
}

weft_err weft_eval_ranks(const weft_triple *test, size_t m, size_t n_nodes, bool both_directions,
                         const weft_eval_filter *filter, weft_eval_score_fn score, void *ctx,
                         size_t n_threads, double *ranks, weft_error *err)
{
    if (m == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no test edges to evaluate on");
    size_t n_dirs = both_directions ? 2 : 1, n_queries = m * n_dirs;
    const weft_link_model *model = score == weft_eval_model_scores ? ctx : NULL;
    size_t block = 1;
    if (model) {
        block = n_nodes ? MODEL_BLOCK_CELLS / n_nodes : MODEL_BLOCK_MAX;
        block = block < 1 ? 1 : block > MODEL_BLOCK_MAX ? MODEL_BLOCK_MAX : block;
    }
    size_t n_blocks = (n_queries + block - 1) / block;
    if (n_threads < 1)
        n_threads = 1;
    if (n_threads > n_blocks)
        n_threads = n_blocks;
    struct rank_job *jobs = weft_calloc_array(n_threads, sizeof *jobs);
    if (!jobs)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory evaluating %zu edges", m);
    for (size_t t = 0; t < n_threads; t++) {
        /* whole blocks per thread; the last block may be short */
        size_t first = n_blocks * t / n_threads * block;
        size_t last = n_blocks * (t + 1) / n_threads * block;
        jobs[t] = (struct rank_job){ test, n_nodes, n_dirs, filter, score, ctx, model, block,
                                     ranks, first, last < n_queries ? last : n_queries, false };
    }
    /* Each thread runs its own sgemm: OpenBLAS gets one thread per call meanwhile, else the
     * two layers of threads oversubscribe the cores (docs/dependencies.md, OpenBLAS). */
    int blas_threads = openblas_get_num_threads();
    if (n_threads > 1)
        openblas_set_num_threads(1);
    run_jobs(jobs, sizeof *jobs, n_threads, rank_worker);
    if (n_threads > 1)
        openblas_set_num_threads(blas_threads);
    weft_err rc = WEFT_OK;
    for (size_t t = 0; t < n_threads; t++)
        if (jobs[t].is_nomem)
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory evaluating %zu edges", m);
    free(jobs);
    return rc;
}

/* Sums of one group of ranks; weft_rank_metrics holds the sums until finish_metrics(). */
static void add_rank(weft_rank_metrics *acc, double rank)
{
    acc->n_queries++;
    acc->mrr += 1.0 / rank;
    acc->mean_rank += rank;
    acc->hits1 += rank <= 1.0;
    acc->hits3 += rank <= 3.0;
    acc->hits10 += rank <= 10.0;
}

static void finish_metrics(weft_rank_metrics *acc)
{
    if (acc->n_queries == 0)
        return;
    double q = (double)acc->n_queries;
    acc->mrr /= q;
    acc->mean_rank /= q;
    acc->hits1 /= q;
    acc->hits3 /= q;
    acc->hits10 /= q;
}

void weft_eval_summarise(const double *ranks, size_t n, weft_rank_metrics *out)
{
    weft_rank_metrics acc = { 0 };
    for (size_t i = 0; i < n; i++)
        add_rank(&acc, ranks[i]);
    finish_metrics(&acc);
    *out = acc;
}

weft_err weft_eval_ranking(const weft_triple *test, size_t m, size_t n_nodes,
                           bool both_directions, const weft_eval_filter *filter,
                           weft_eval_score_fn score, void *ctx, size_t n_threads,
                           weft_rank_metrics *out, weft_error *err)
{
    if (m == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no test edges to evaluate on");
    size_t n_dirs = both_directions ? 2 : 1;
    double *ranks = weft_alloc_array(m, n_dirs * sizeof *ranks);
    if (!ranks)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory evaluating %zu edges", m);
    weft_err rc = weft_eval_ranks(test, m, n_nodes, both_directions, filter, score, ctx,
                                  n_threads, ranks, err);
    if (rc == WEFT_OK)
        weft_eval_summarise(ranks, m * n_dirs, out);
    free(ranks);
    return rc;
}

weft_err weft_eval_ranking_by_relation(const weft_triple *test, size_t m, size_t n_nodes,
                                       size_t n_relations, bool both_directions,
                                       const weft_eval_filter *filter, weft_eval_score_fn score,
                                       void *ctx, size_t n_threads, weft_rank_metrics *overall,
                                       weft_rank_metrics *per_relation, weft_error *err)
{
    for (size_t i = 0; i < m; i++)
        if (test[i].r >= n_relations)
            return weft_error_set(err, WEFT_ERR_INVALID,
                                  "test edge %zu: relation id %lu beyond %zu relations", i,
                                  (unsigned long)test[i].r, n_relations);
    if (m == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no test edges to evaluate on");
    size_t n_dirs = both_directions ? 2 : 1;
    double *ranks = weft_alloc_array(m, n_dirs * sizeof *ranks);
    weft_rank_metrics *acc = weft_calloc_array(n_relations, sizeof *acc);
    weft_err rc = WEFT_OK;
    if (!ranks || !acc) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory evaluating %zu edges", m);
        goto done;
    }
    rc = weft_eval_ranks(test, m, n_nodes, both_directions, filter, score, ctx, n_threads,
                         ranks, err);
    if (rc != WEFT_OK)
        goto done;
    weft_eval_summarise(ranks, m * n_dirs, overall);
    for (size_t i = 0; i < m; i++)
        for (size_t d = 0; d < n_dirs; d++)
            add_rank(&acc[test[i].r], ranks[i * n_dirs + d]);
    for (size_t r = 0; r < n_relations; r++)
        finish_metrics(&acc[r]);
    memcpy(per_relation, acc, n_relations * sizeof *acc);
done:
    free(ranks);
    free(acc);
    return rc;
}

void weft_eval_model_scores(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out)
{
    const weft_link_model *model = ctx;
    float *q = weft_alloc_array(model->dim, sizeof *q);
    if (!q) {
        /* Out of memory: score nothing (all NaN ranks last), never crash mid-evaluation. */
        for (size_t c = 0; c < model->n_entities; c++)
            out[c] = NAN;
        return;
    }
    weft_model_query(model, anchor, r, is_head, q);
    cblas_sgemv(CblasRowMajor, CblasNoTrans, (int)model->n_entities, (int)model->dim, 1.0f,
                model->entity, (int)model->dim, q, 1, 0.0f, out, 1);
    free(q);
}

/* ---- AUC-ROC and average precision ---- */

typedef struct scored {
    float score;
    bool is_pos;
} scored;

/* Descending scores, NaN after every number. */
static int cmp_scored_desc(const void *a, const void *b)
{
    float x = ((const scored *)a)->score, y = ((const scored *)b)->score;
    bool xn = isnan(x), yn = isnan(y);
    if (xn || yn)
        return (int)xn - (int)yn;
    return x > y ? -1 : x < y;
}

static bool same_score(float x, float y)
{
    return x == y || (isnan(x) && isnan(y));
}

/* @p scores and @p labels as one array sorted by cmp_scored_desc (caller frees). Order
 * within a group of tied scores is unspecified: the callers only ever use group totals. */
static scored *sort_scored(const float *scores, const bool *labels, size_t n, size_t *n_pos,
                           weft_error *err)
{
    scored *a = weft_alloc_array(n, sizeof *a);
    if (!a) {
        weft_error_set(err, WEFT_ERR_NOMEM, "out of memory sorting %zu scores", n);
        return NULL;
    }
    size_t p = 0;
    for (size_t i = 0; i < n; i++) {
        a[i] = (scored){ scores[i], labels[i] };
        p += labels[i];
    }
    qsort(a, n, sizeof *a, cmp_scored_desc);
    *n_pos = p;
    return a;
}

/* End of the group of scores tied with a[i]; counts its positives and negatives. */
static size_t group_end(const scored *a, size_t n, size_t i, double *pos, double *neg)
{
    size_t j = i;
    *pos = *neg = 0.0;
    while (j < n && same_score(a[j].score, a[i].score)) {
        if (a[j].is_pos)
            *pos += 1.0;
        else
            *neg += 1.0;
        j++;
    }
    return j;
}

/* Walking from the highest score down, a group of p positives and q negatives tied at one
 * score beats every negative below it (p * below) and ties with its own q (p * q / 2). */
weft_err weft_eval_auc(const float *scores, const bool *labels, size_t n, double *out,
                       weft_error *err)
{
    size_t n_pos = 0;
    scored *a = sort_scored(scores, labels, n, &n_pos, err);
    if (!a)
        return WEFT_ERR_NOMEM;
    if (n_pos == 0 || n_pos == n) {
        free(a);
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "AUC needs positives and negatives: %zu of %zu are positive",
                              n_pos, n);
    }
    double n_neg = (double)(n - n_pos), neg_above = 0.0, sum = 0.0;
    for (size_t i = 0; i < n;) {
        double p, q;
        i = group_end(a, n, i, &p, &q);
        sum += p * (n_neg - neg_above - q) + 0.5 * p * q;
        neg_above += q;
    }
    free(a);
    *out = sum / ((double)n_pos * n_neg);
    return WEFT_OK;
}

/* Each distinct score is one threshold; its recall step is p / n_pos and its precision the
 * share of positives among everything scored at or above it. */
weft_err weft_eval_average_precision(const float *scores, const bool *labels, size_t n,
                                     double *out, weft_error *err)
{
    size_t n_pos = 0;
    scored *a = sort_scored(scores, labels, n, &n_pos, err);
    if (!a)
        return WEFT_ERR_NOMEM;
    if (n_pos == 0) {
        free(a);
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "average precision needs a positive: none of %zu is", n);
    }
    double tp = 0.0, fp = 0.0, ap = 0.0;
    for (size_t i = 0; i < n;) {
        double p, q;
        i = group_end(a, n, i, &p, &q);
        tp += p;
        fp += q;
        if (p > 0)
            ap += (p / (double)n_pos) * (tp / (tp + fp));
    }
    free(a);
    *out = ap;
    return WEFT_OK;
}

weft_err weft_eval_sample_negatives(const weft_triple *test, size_t m, size_t per_edge,
                                    size_t n_nodes, const weft_eval_filter *filter,
                                    uint64_t seed, weft_triple **out, size_t *n_out,
                                    weft_error *err)
{
    if (n_nodes == 0 || n_nodes > UINT32_MAX)
        return weft_error_set(err, WEFT_ERR_INVALID, "cannot draw negatives among %zu nodes",
                              n_nodes);
    if (per_edge && m > SIZE_MAX / per_edge)
        return weft_error_set(err, WEFT_ERR_NOMEM, "too many negatives");
    weft_triple *neg = weft_alloc_array(m * per_edge, sizeof *neg);
    if (!neg)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu negatives",
                              m * per_edge);
    const weft_csr *known = filter ? filter->known_out : NULL;
    bool exclude_self = filter && filter->exclude_self;
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    size_t n = 0;
    for (size_t i = 0; i < m; i++)
        for (size_t k = 0; k < per_edge; k++)
            for (size_t tries = 0; tries < WEFT_EVAL_NEGATIVE_TRIES; tries++) {
                weft_triple x = test[i];
                bool is_head = weft_rng_next(&rng) >> 63;
                uint32_t c = weft_rng_below(&rng, (uint32_t)n_nodes);
                if (is_head)
                    x.s = c;
                else
                    x.t = c;
                if ((exclude_self && x.s == x.t) || (known && weft_csr_has(known, x.s, x.r, x.t)))
                    continue;
                neg[n++] = x;
                break;
            }
    *out = neg;
    *n_out = n;
    return WEFT_OK;
}

/* ---- scores of single triples, grouped by (source, relation) ---- */

typedef struct triple_key {
    uint32_t s, r;
    size_t i;   /* index into the caller's triples */
} triple_key;

static int cmp_key(const void *a, const void *b)
{
    const triple_key *x = a, *y = b;
    if (x->s != y->s)
        return x->s < y->s ? -1 : 1;
    if (x->r != y->r)
        return x->r < y->r ? -1 : 1;
    return x->i < y->i ? -1 : x->i > y->i;
}

struct pair_job {
    const weft_triple *e;
    const triple_key *keys;
    size_t first, last;   /* keys[first..last): whole (s, r) groups */
    size_t n_nodes;
    weft_eval_score_fn score;
    void *ctx;
    float *out;
    bool is_nomem;
};

static void *pair_worker(void *arg)
{
    struct pair_job *job = arg;
    if (job->first == job->last)
        return NULL;
    float *buf = weft_alloc_array(job->n_nodes, sizeof *buf);
    if (!buf) {
        job->is_nomem = true;
        return NULL;
    }
    for (size_t k = job->first; k < job->last; k++) {
        const triple_key *key = &job->keys[k];
        if (k == job->first || key->s != key[-1].s || key->r != key[-1].r)
            job->score(job->ctx, key->s, key->r, false, buf);
        job->out[key->i] = buf[job->e[key->i].t];
    }
    free(buf);
    return NULL;
}

/* Thread shares start at the n * t / n_threads-th key, moved forward to a group start. */
static size_t share_start(const triple_key *keys, size_t n, size_t t, size_t n_threads)
{
    size_t b = n * t / n_threads;
    while (b > 0 && b < n && keys[b].s == keys[b - 1].s && keys[b].r == keys[b - 1].r)
        b++;
    return b;
}

weft_err weft_eval_triple_scores(const weft_triple *e, size_t n, size_t n_nodes,
                                 weft_eval_score_fn score, void *ctx, size_t n_threads,
                                 float *out, weft_error *err)
{
    if (n == 0)
        return WEFT_OK;
    if (n_threads < 1)
        n_threads = 1;
    if (n_threads > n)
        n_threads = n;
    triple_key *keys = weft_alloc_array(n, sizeof *keys);
    struct pair_job *jobs = weft_calloc_array(n_threads, sizeof *jobs);
    weft_err rc = WEFT_OK;
    if (!keys || !jobs) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory scoring %zu edges", n);
        goto done;
    }
    for (size_t i = 0; i < n; i++)
        keys[i] = (triple_key){ e[i].s, e[i].r, i };
    qsort(keys, n, sizeof *keys, cmp_key);
    for (size_t t = 0; t < n_threads; t++)
        jobs[t] = (struct pair_job){ e, keys, share_start(keys, n, t, n_threads),
                                     share_start(keys, n, t + 1, n_threads), n_nodes, score,
                                     ctx, out, false };
    run_jobs(jobs, sizeof *jobs, n_threads, pair_worker);
    for (size_t t = 0; t < n_threads; t++)
        if (jobs[t].is_nomem)
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory scoring %zu edges", n);
done:
    free(keys);
    free(jobs);
    return rc;
}

weft_err weft_eval_binary(const weft_triple *pos, size_t n_pos, const weft_triple *neg,
                          size_t n_neg, size_t n_nodes, weft_eval_score_fn score, void *ctx,
                          size_t n_threads, weft_binary_metrics *out, weft_error *err)
{
    if (n_pos == 0 || n_neg == 0)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "AUC needs positives and negatives: %zu and %zu given", n_pos,
                              n_neg);
    if (n_pos > SIZE_MAX - n_neg)
        return weft_error_set(err, WEFT_ERR_NOMEM, "too many edges to score");
    size_t n = n_pos + n_neg;
    float *scores = weft_alloc_array(n, sizeof *scores);
    bool *labels = weft_alloc_array(n, sizeof *labels);
    weft_binary_metrics b = { n_pos, n_neg, 0.0, 0.0 };
    weft_err rc = WEFT_OK;
    if (!scores || !labels) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory scoring %zu edges", n);
        goto done;
    }
    for (size_t i = 0; i < n; i++)
        labels[i] = i < n_pos;
    if ((rc = weft_eval_triple_scores(pos, n_pos, n_nodes, score, ctx, n_threads, scores,
                                      err)) ||
        (rc = weft_eval_triple_scores(neg, n_neg, n_nodes, score, ctx, n_threads,
                                      scores + n_pos, err)) ||
        (rc = weft_eval_auc(scores, labels, n, &b.auc, err)) ||
        (rc = weft_eval_average_precision(scores, labels, n, &b.ap, err)))
        goto done;
    *out = b;
done:
    free(scores);
    free(labels);
    return rc;
}

/* ---- JSON ---- */

json_t *weft_eval_metrics_json(const weft_rank_metrics *m)
{
    return json_pack("{s:I, s:f, s:f, s:f, s:f, s:f}", "queries", (json_int_t)m->n_queries,
                     "mrr", m->mrr, "mean_rank", m->mean_rank, "hits@1", m->hits1, "hits@3",
                     m->hits3, "hits@10", m->hits10);
}

json_t *weft_eval_binary_json(const weft_binary_metrics *b)
{
    return json_pack("{s:I, s:I, s:f, s:f}", "positives", (json_int_t)b->n_pos, "negatives",
                     (json_int_t)b->n_neg, "auc", b->auc, "ap", b->ap);
}

json_t *weft_eval_per_relation_json(const weft_rank_metrics *per_relation,
                                    const weft_names_view *relations)
{
    json_t *obj = json_object();
    for (size_t r = 0; obj && r < relations->n; r++) {
        if (per_relation[r].n_queries == 0)
            continue;
        const char *name = weft_names_get(relations, (uint32_t)r, NULL);
        if (json_object_set_new(obj, name, weft_eval_metrics_json(&per_relation[r]))) {
            json_decref(obj);
            obj = NULL;
        }
    }
    return obj;
}
