/* Filtered ranking evaluation (include/weft/eval.h). */
#include "weft/eval.h"

#include <cblas.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>

#include "weft/alloc.h"

double weft_eval_rank(const float *scores, size_t n, uint32_t target, const uint32_t *filtered,
                      size_t n_filtered, bool has_self, uint32_t self)
{
    float ts = scores[target];
    size_t higher = 0, equal = 0, f = 0;
    /* Candidates ascend, and so does the filter list: walk both together. */
    for (size_t c = 0; c < n; c++) {
        while (f < n_filtered && filtered[f] < c)
            f++;
        if (c == target || (has_self && c == self) || (f < n_filtered && filtered[f] == c))
            continue;
        float x = scores[c];
        if (isnan(ts) || x > ts)   /* a NaN answer ranks behind every candidate */
            higher++;
        else if (x == ts)
            equal++;
    }
    return 1.0 + (double)higher + (double)equal / 2.0;
}

struct eval_job {
    const weft_triple *test;
    size_t m, n_nodes, n_dirs;
    const weft_eval_filter *filter;
    weft_eval_score_fn score;
    void *ctx;
    double *ranks;     /* (m * n_dirs): tail rank, then head rank when n_dirs == 2 */
    size_t first, last;
    bool is_nomem;
    bool is_started;
};

static void one_query(struct eval_job *job, float *scores, size_t i, bool is_head)
{
    const weft_triple *q = &job->test[i];
    uint32_t anchor = is_head ? q->t : q->s, answer = is_head ? q->s : q->t;
    const weft_csr *known = is_head ? job->filter->known_in : job->filter->known_out;
    job->score(job->ctx, anchor, q->r, is_head, scores);
    uint64_t first = 0;
    size_t count = 0;
    if (known)
        weft_csr_range(known, anchor, q->r, &first, &count);
    job->ranks[i * job->n_dirs + (is_head ? 1 : 0)] =
        weft_eval_rank(scores, job->n_nodes, answer, known ? known->nbr + first : NULL, count,
                       job->filter->exclude_self, anchor);
}

static void *eval_worker(void *arg)
{
    struct eval_job *job = arg;
    float *scores = weft_alloc_array(job->n_nodes, sizeof *scores);
    if (!scores) {
        job->is_nomem = true;
        return NULL;
    }
    for (size_t i = job->first; i < job->last; i++) {
        one_query(job, scores, i, false);
        if (job->n_dirs == 2)
            one_query(job, scores, i, true);
    }
    free(scores);
    return NULL;
}

weft_err weft_eval_ranking(const weft_triple *test, size_t m, size_t n_nodes,
                           bool both_directions, const weft_eval_filter *filter,
                           weft_eval_score_fn score, void *ctx, size_t n_threads,
                           weft_rank_metrics *out, weft_error *err)
{
    if (m == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no test edges to evaluate on");
    if (n_threads < 1)
        n_threads = 1;
    if (n_threads > m)
        n_threads = m;
    size_t n_dirs = both_directions ? 2 : 1;
    double *ranks = weft_alloc_array(m * n_dirs, sizeof *ranks);
    struct eval_job *jobs = weft_calloc_array(n_threads, sizeof *jobs);
    pthread_t *tids = weft_calloc_array(n_threads, sizeof *tids);
    weft_err rc = WEFT_OK;
    if (!ranks || !jobs || !tids) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory evaluating %zu edges", m);
        goto done;
    }
    for (size_t t = 0; t < n_threads; t++) {
        jobs[t] = (struct eval_job){ test, m, n_nodes, n_dirs, filter, score, ctx, ranks,
                                     m * t / n_threads, m * (t + 1) / n_threads, false, false };
        jobs[t].is_started = t > 0 && pthread_create(&tids[t], NULL, eval_worker, &jobs[t]) == 0;
    }
    /* Thread 0's share, and the share of any thread that failed to start, run here. */
    for (size_t t = 0; t < n_threads; t++)
        if (!jobs[t].is_started)
            eval_worker(&jobs[t]);
    for (size_t t = 0; t < n_threads; t++)
        if (jobs[t].is_started)
            pthread_join(tids[t], NULL);
    for (size_t t = 0; t < n_threads; t++)
        if (jobs[t].is_nomem)
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory evaluating %zu edges", m);
    if (rc != WEFT_OK)
        goto done;
    /* Sum in query order so the result does not depend on the thread count. */
    weft_rank_metrics r = { 0 };
    r.n_queries = m * n_dirs;
    for (size_t i = 0; i < r.n_queries; i++) {
        r.mrr += 1.0 / ranks[i];
        r.mean_rank += ranks[i];
        r.hits1 += ranks[i] <= 1.0;
        r.hits3 += ranks[i] <= 3.0;
        r.hits10 += ranks[i] <= 10.0;
    }
    double q = (double)r.n_queries;
    r.mrr /= q;
    r.mean_rank /= q;
    r.hits1 /= q;
    r.hits3 /= q;
    r.hits10 /= q;
    *out = r;
done:
    free(ranks);
    free(jobs);
    free(tids);
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

json_t *weft_eval_metrics_json(const weft_rank_metrics *m)
{
    return json_pack("{s:I, s:f, s:f, s:f, s:f, s:f}", "queries", (json_int_t)m->n_queries,
                     "mrr", m->mrr, "mean_rank", m->mean_rank, "hits@1", m->hits1, "hits@3",
                     m->hits3, "hits@10", m->hits10);
}
