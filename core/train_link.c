/* Link model training: negative sampling, logistic loss, Adagrad, Hogwild-style threads
 * (Recht et al. 2011: lock-free updates to shared parameters). With one thread the run is a
 * pure function of the seed. */
#include "weft/train_link.h"

#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/rng.h"

#define ADAGRAD_EPS 1e-10f

void weft_train_link_defaults(weft_train_link_config *c)
{
    memset(c, 0, sizeof *c);
    c->kind = WEFT_LINK_DOT;
    c->dim = 64;
    c->epochs = 50;
    c->negatives = 5;
    c->n_threads = 1;
    c->lr = 0.1f;
    c->l2 = 1e-5f;
    c->seed = 1;
}

void weft_link_params_fini(weft_link_params *p)
{
    if (!p)
        return;
    free(p->slab);
    memset(p, 0, sizeof *p);
}

weft_link_model weft_link_params_model(const weft_link_params *p)
{
    weft_link_model m = { p->kind, p->n_entities, p->n_relations, p->dim, p->entity,
                          p->relation };
    return m;
}

static double softplus(double x)
{
    return x > 0 ? x + log1p(exp(-x)) : log1p(exp(x));
}

static float dotf(const float *a, const float *b, size_t d)
{
    float acc = 0.0f;
    for (size_t i = 0; i < d; i++)
        acc += a[i] * b[i];
    return acc;
}

/* One Adagrad step on row @p w with gradient @p g (plus the L2 term 2 * l2 * w). */
static void adagrad_row(float *w, float *acc, const float *g, size_t d, float lr, float l2)
{
    for (size_t i = 0; i < d; i++) {
        float gi = g[i] + 2.0f * l2 * w[i];
        acc[i] += gi * gi;
        w[i] -= lr * gi / sqrtf(acc[i] + ADAGRAD_EPS);
    }
}

struct shard {
    const weft_train_link_config *cfg;
    const weft_triple *train;
    const size_t *order;
    size_t first, last;
    size_t n_entities;
    weft_link_params *p;
    weft_rng rng;
    float *work;        /* 3 * dim: gradients of head, tail, one negative */
    double loss;
    bool is_started;
};

/* Dot model, one positive and its negatives. Head and tail gradients accumulate over the
 * negatives and are applied once; each negative node is updated as soon as it is drawn. */
static double step_dot(struct shard *sh, const weft_triple *pos)
{
    const weft_train_link_config *cfg = sh->cfg;
    size_t d = cfg->dim;
    float *E = sh->p->entity, *A = sh->p->accum;
    float *gs = sh->work, *gt = gs + d, *gn = gt + d;
    float *es = E + (size_t)pos->s * d, *et = E + (size_t)pos->t * d;
    memset(gs, 0, 2 * d * sizeof *gs);

    float x = dotf(es, et, d);
    double loss = softplus(-x);
    float g = (float)(1.0 / (1.0 + exp(-x)) - 1.0);   /* d softplus(-x) / dx */
    for (size_t i = 0; i < d; i++) {
        gs[i] += g * et[i];
        gt[i] += g * es[i];
    }
    for (size_t k = 0; k < cfg->negatives; k++) {
        bool is_head = weft_rng_next(&sh->rng) >> 63;
        uint32_t c = weft_rng_below(&sh->rng, (uint32_t)sh->n_entities);
        float *ec = E + (size_t)c * d;
        const float *other = is_head ? et : es;   /* the end that stays */
        float xn = dotf(ec, other, d);
        loss += softplus(xn);
        float gn_scale = (float)(1.0 / (1.0 + exp(-xn)));   /* d softplus(x) / dx */
        float *g_other = is_head ? gt : gs;
        for (size_t i = 0; i < d; i++) {
            g_other[i] += gn_scale * ec[i];
            gn[i] = gn_scale * other[i];
        }
        adagrad_row(ec, A + (size_t)c * d, gn, d, cfg->lr, cfg->l2);
    }
    adagrad_row(es, A + (size_t)pos->s * d, gs, d, cfg->lr, cfg->l2);
    adagrad_row(et, A + (size_t)pos->t * d, gt, d, cfg->lr, cfg->l2);
    return loss;
}

static void *run_shard(void *arg)
{
    struct shard *sh = arg;
    sh->loss = 0.0;
    for (size_t i = sh->first; i < sh->last; i++)
        sh->loss += step_dot(sh, &sh->train[sh->order[i]]);
    return NULL;
}

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static weft_err check_config(const weft_train_link_config *cfg, size_t m, size_t n_entities,
                             weft_error *err)
{
    if (cfg->kind != WEFT_LINK_DOT)
        return weft_error_set(err, WEFT_ERR_INVALID, "unsupported link model kind %d",
                              (int)cfg->kind);
    if (m == 0 || n_entities == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no training edges");
    if (n_entities > UINT32_MAX)
        return weft_error_set(err, WEFT_ERR_LIMIT, "too many nodes: %zu", n_entities);
    if (cfg->dim == 0 || cfg->epochs == 0 || cfg->n_threads == 0 || !(cfg->lr > 0) ||
        !(cfg->l2 >= 0))
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "dim, epochs, threads and lr must be positive, l2 not negative");
    return WEFT_OK;
}

/* Allocate the slab and draw the initial embeddings, U(-a, a) with a = 0.5 / sqrt(dim), so
 * initial scores are near zero and the logistic loss starts near log 2 per term. */
static weft_err init_params(const weft_train_link_config *cfg, size_t n_entities,
                            size_t n_relations, weft_link_params *p, weft_error *err)
{
    size_t n_param = n_entities * cfg->dim;
    if (n_param / cfg->dim != n_entities || n_param > SIZE_MAX / 2)
        return weft_error_set(err, WEFT_ERR_NOMEM, "embedding table too large");
    memset(p, 0, sizeof *p);
    p->slab = weft_calloc_array(2 * n_param, sizeof(float));
    if (!p->slab)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu x %zu embeddings",
                              n_entities, cfg->dim);
    p->kind = cfg->kind;
    p->n_entities = n_entities;
    p->n_relations = n_relations;
    p->dim = cfg->dim;
    p->entity = p->slab;
    p->accum = p->slab + n_param;
    weft_rng rng;
    weft_rng_seed(&rng, cfg->seed);
    float a = 0.5f / sqrtf((float)cfg->dim);
    for (size_t i = 0; i < n_param; i++)
        p->entity[i] = (2.0f * weft_rng_float(&rng) - 1.0f) * a;
    return WEFT_OK;
}

weft_err weft_train_link_run(const weft_train_link_config *cfg, const weft_triple *train,
                             size_t m, size_t n_entities, size_t n_relations,
                             weft_train_progress_fn progress, void *ctx, weft_link_params *out,
                             weft_error *err)
{
    weft_err rc = check_config(cfg, m, n_entities, err);
    if (rc != WEFT_OK)
        return rc;
    size_t n_threads = cfg->n_threads < m ? cfg->n_threads : m;
    weft_link_params p;
    size_t *order = weft_alloc_array(m, sizeof *order);
    struct shard *shards = weft_calloc_array(n_threads, sizeof *shards);
    float *work = weft_alloc_array(n_threads * 3, cfg->dim * sizeof(float));
    pthread_t *tids = weft_calloc_array(n_threads, sizeof *tids);
    if (!order || !shards || !work || !tids) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for training state");
        goto done;
    }
    if ((rc = init_params(cfg, n_entities, n_relations, &p, err)) != WEFT_OK)
        goto done;
    for (size_t i = 0; i < m; i++)
        order[i] = i;
    weft_rng rng;
    weft_rng_seed(&rng, cfg->seed ^ 0x5eed0f0dd5eedULL);
    for (size_t t = 0; t < n_threads; t++)
        weft_rng_seed(&shards[t].rng, weft_rng_next(&rng));

    for (size_t epoch = 1; epoch <= cfg->epochs; epoch++) {
        double t0 = now_seconds();
        for (size_t i = m; i > 1; i--) {   /* Fisher-Yates, seeded */
            size_t j = weft_rng_below(&rng, (uint32_t)i);
            size_t tmp = order[i - 1];
            order[i - 1] = order[j];
            order[j] = tmp;
        }
        for (size_t t = 0; t < n_threads; t++) {
            struct shard *sh = &shards[t];
            sh->cfg = cfg;
            sh->train = train;
            sh->order = order;
            sh->first = m * t / n_threads;
            sh->last = m * (t + 1) / n_threads;
            sh->n_entities = n_entities;
            sh->p = &p;
            sh->work = work + t * 3 * cfg->dim;
            sh->is_started = t > 0 && pthread_create(&tids[t], NULL, run_shard, sh) == 0;
        }
        for (size_t t = 0; t < n_threads; t++)
            if (!shards[t].is_started)
                run_shard(&shards[t]);
        double loss = 0.0;
        for (size_t t = 0; t < n_threads; t++) {
            if (shards[t].is_started)
                pthread_join(tids[t], NULL);
            loss += shards[t].loss;
        }
        double secs = now_seconds() - t0;
        if (progress) {
            weft_train_epoch ep = { epoch, cfg->epochs, loss / (double)m, secs,
                                    secs > 0 ? (double)m / secs : 0.0 };
            progress(ctx, &ep);
        }
    }
    *out = p;
done:
    free(order);
    free(shards);
    free(work);
    free(tids);
    return rc;
}
