/* Link model training (include/weft/train_link.h).
 *
 * Two ways through the data, both in mini-batches whose dense products go through
 * weft_gemm on every core:
 *  - logistic loss: B positives against K tail and K head corruptions drawn once for the
 *    batch, scored as two B x K products;
 *  - softmax loss: B queries scored against all N nodes (S = Q E^T, B x N), row-wise softmax
 *    cross-entropy, then dQ = G E and dE = G^T Q, and a dense optimiser step over every row.
 * Every model is a query vector q(anchor, relation) against candidate rows (model.h), so
 * both paths are model-agnostic. Gradients of a batch are summed before any row moves, and
 * rows are stepped in ascending order, so a run is a function of its seed. */
#include "weft/train_link.h"

#include <cblas.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/gemm.h"
#include "weft/kernels.h"
#include "weft/rng.h"

/* ---- names of the options ---- */

static const char *const loss_names[] = { [WEFT_LOSS_LOGISTIC] = "logistic",
                                          [WEFT_LOSS_SOFTMAX] = "softmax" };
static const char *const optim_names[] = { [WEFT_OPTIM_ADAGRAD] = "adagrad",
                                           [WEFT_OPTIM_ADAM] = "adam" };
static const char *const reg_names[] = { [WEFT_REG_L2] = "l2", [WEFT_REG_N3] = "n3" };

static const char *name_of(const char *const *names, size_t n, int v)
{
    return v > 0 && (size_t)v < n ? names[v] : NULL;
}

static bool parse_name(const char *const *names, size_t n, const char *s, int *out)
{
    for (size_t i = 1; i < n; i++)
        if (names[i] && !strcmp(names[i], s)) {
            *out = (int)i;
            return true;
        }
    return false;
}

#define COUNT(a) (sizeof(a) / sizeof((a)[0]))

const char *weft_train_loss_name(weft_loss v) { return name_of(loss_names, COUNT(loss_names), (int)v); }
const char *weft_train_optim_name(weft_optim v) { return name_of(optim_names, COUNT(optim_names), (int)v); }
const char *weft_train_reg_name(weft_reg v) { return name_of(reg_names, COUNT(reg_names), (int)v); }

bool weft_train_loss_parse(const char *s, weft_loss *out)
{
    int v;
    if (!parse_name(loss_names, COUNT(loss_names), s, &v))
        return false;
    *out = (weft_loss)v;
    return true;
}

bool weft_train_optim_parse(const char *s, weft_optim *out)
{
    int v;
    if (!parse_name(optim_names, COUNT(optim_names), s, &v))
        return false;
    *out = (weft_optim)v;
    return true;
}

bool weft_train_reg_parse(const char *s, weft_reg *out)
{
    int v;
    if (!parse_name(reg_names, COUNT(reg_names), s, &v))
        return false;
    *out = (weft_reg)v;
    return true;
}

/* ---- defaults ---- */

/* Scores of one softmax batch, B x N floats, kept at or below this (256 MiB). */
#define SOFTMAX_MAX_CELLS (64u << 20)

/* The logistic loss's values: one set for every kind, since Adagrad's per-coordinate scaling
 * makes the first steps about lr whatever the initial scale (common practice; measured on
 * tests/data/cora for dot and on WN18RR for DistMult, see DEVELOPERS.md "Defaults"). */
static void logistic_defaults(weft_train_link_config *c)
{
    c->loss = WEFT_LOSS_LOGISTIC;
    c->optim = WEFT_OPTIM_ADAGRAD;
    c->batch = 0;   /* automatic: about a hundred batches an epoch, 16 to 1000 edges each */
    c->negatives = c->kind == WEFT_LINK_DOT ? 32 : 128;
    c->lr = 0.1f;
    c->reg = c->kind == WEFT_LINK_DOT ? WEFT_REG_L2 : WEFT_REG_N3;
    c->reg_weight = c->kind == WEFT_LINK_DOT ? 1e-5f : 1e-3f;
    c->init_scale = 0.1f;
    c->patience = c->kind == WEFT_LINK_DOT ? 10 : 3;
}

/* The softmax loss: 1-vs-all with reciprocal relations, Adagrad, N3 (the recipe of Lacroix,
 * Usunier & Obozinski 2018 for DistMult and ComplEx). Batch, N3 weight and initial scale are
 * those of the PyTorch reference in ../shared/bench/ref_kge.py (filtered MRR 0.438 on
 * WN18RR); the learning rate is ours, measured on WN18RR with DistMult: validation MRR after
 * 4 epochs 0.417 at lr 0.3 against 0.377 at 0.1, and after 2 epochs 0.357 at 0.3 against
 * 0.270 at 1.0. The batch shrinks so that its scores stay within SOFTMAX_MAX_CELLS. */
static void softmax_defaults(weft_train_link_config *c, size_t n_entities)
{
    c->loss = WEFT_LOSS_SOFTMAX;
    c->optim = WEFT_OPTIM_ADAGRAD;
    c->reg = WEFT_REG_N3;
    c->lr = 0.3f;
    c->reg_weight = 0.1f;
    c->init_scale = 1e-3f;
    c->patience = 3;
    size_t b = SOFTMAX_MAX_CELLS / (n_entities ? n_entities : 1);
    c->batch = b < 1 ? 1 : b < 1000 ? b : 1000;
}

void weft_train_link_defaults(weft_train_link_config *c, weft_link_kind kind, weft_loss loss,
                              size_t n_entities)
{
    memset(c, 0, sizeof *c);
    c->kind = kind;
    c->n_threads = 1;
    c->seed = 1;
    c->eval_every = 1;
    c->epochs = 100;
    c->dim = kind == WEFT_LINK_DOT ? 64 : 200;
    if (loss == 0)   /* choose: 1-vs-all for typed relations while a batch of scores fits */
        loss = kind != WEFT_LINK_DOT && n_entities * 128 <= SOFTMAX_MAX_CELLS
                   ? WEFT_LOSS_SOFTMAX : WEFT_LOSS_LOGISTIC;
    if (loss == WEFT_LOSS_SOFTMAX)
        softmax_defaults(c, n_entities);
    else
        logistic_defaults(c);
}

/* ---- parameters and optimiser state ---- */

void weft_link_params_fini(weft_link_params *p)
{
    if (!p)
        return;
    free(p->slab);
    free(p->state);
    memset(p, 0, sizeof *p);
}

weft_link_model weft_link_params_model(const weft_link_params *p)
{
    weft_link_model m = { p->kind, p->n_entities, p->n_relations, p->dim, p->has_reciprocal,
                          p->entity, p->relation };
    return m;
}

struct trainer {
    const weft_train_link_config *cfg;
    const weft_triple *train;
    size_t m, n_ent, n_rel, n_rel_rows, d;
    weft_link_params p;
    size_t n_param;        /* floats in p.slab */
    float *state;          /* optimiser state: Adagrad sums, or Adam m then v (2 * n_param) */
    uint64_t step;         /* optimiser steps taken (Adam's bias correction) */
    weft_rng rng;          /* shuffles; thread generators are seeded from it */
};

/* Gaussian draw by Box-Muller from the explicit generator. */
static float gaussian(weft_rng *rng)
{
    double u = weft_rng_double(rng), v = weft_rng_double(rng);
    return (float)(sqrt(-2.0 * log(1.0 - u)) * cos(6.283185307179586 * v));
}

/* The optimiser's second-moment state (Adagrad's sums of squared gradients, Adam's v), laid
 * out as the slab. */
static float *second_moment(const struct trainer *t)
{
    return t->cfg->optim == WEFT_OPTIM_ADAM ? t->state + t->n_param : t->state;
}

static weft_err trainer_init(struct trainer *t, const weft_train_link_config *cfg,
                             const weft_triple *train, size_t m, size_t n_ent, size_t n_rel,
                             weft_error *err)
{
    memset(t, 0, sizeof *t);
    t->cfg = cfg;
    t->train = train;
    t->m = m;
    t->n_ent = n_ent;
    t->n_rel = n_rel;
    t->d = cfg->dim;
    bool has_rel = cfg->kind != WEFT_LINK_DOT;
    bool is_reciprocal = has_rel && cfg->loss == WEFT_LOSS_SOFTMAX;
    t->n_rel_rows = has_rel ? n_rel * (is_reciprocal ? 2 : 1) : 0;
    size_t rows = n_ent + t->n_rel_rows;
    if (rows < n_ent || (t->d && rows > SIZE_MAX / t->d / 3))
        return weft_error_set(err, WEFT_ERR_NOMEM, "embedding tables too large");
    t->n_param = rows * t->d;
    t->p.slab = weft_alloc_array(t->n_param, sizeof(float));
    size_t n_state = cfg->optim == WEFT_OPTIM_ADAM ? 2 * t->n_param : t->n_param;
    t->state = weft_calloc_array(n_state, sizeof(float));
    if (!t->p.slab || !t->state)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu x %zu embeddings",
                              rows, t->d);
    t->p.kind = cfg->kind;
    t->p.n_entities = n_ent;
    t->p.n_relations = n_rel;
    t->p.dim = t->d;
    t->p.has_reciprocal = is_reciprocal;
    t->p.entity = t->p.slab;
    t->p.relation = has_rel ? t->p.slab + n_ent * t->d : NULL;
    weft_rng_seed(&t->rng, cfg->seed);
    for (size_t i = 0; i < t->n_param; i++)
        t->p.slab[i] = cfg->init_scale * gaussian(&t->rng);
    const weft_train_warm *w = cfg->warm;
    for (size_t v = 0; w && w->entity && v < n_ent; v++)
        if (w->has_entity[v])
            memcpy(t->p.entity + v * t->d, w->entity + v * t->d, t->d * sizeof(float));
    for (size_t r = 0; w && w->relation && t->p.relation && r < t->n_rel_rows; r++)
        if (w->has_relation[r])
            memcpy(t->p.relation + r * t->d, w->relation + r * t->d, t->d * sizeof(float));
    for (size_t row = 0; w && w->state && row < n_ent + t->n_rel_rows; row++) {
        bool is_warm = row < n_ent ? w->entity && w->has_entity[row]
                                   : w->relation && w->has_relation[row - n_ent];
        float *s = second_moment(t) + row * t->d;
        for (size_t j = 0; is_warm && j < t->d; j++)
            s[j] = w->state[row];
    }
    return WEFT_OK;
}

/* Each row's mean second-moment state into a new array (the rows of the slab: entities,
 * then relations); NULL when out of memory. */
static float *row_states(struct trainer *t)
{
    size_t rows = t->n_param / (t->d ? t->d : 1);
    float *out = weft_alloc_array(rows ? rows : 1, sizeof *out);
    const float *s = second_moment(t);
    for (size_t row = 0; out && row < rows; row++) {
        double sum = 0.0;
        for (size_t j = 0; j < t->d; j++)
            sum += s[row * t->d + j];
        out[row] = (float)(sum / (double)t->d);
    }
    return out;
}

static void trainer_fini(struct trainer *t)
{
    weft_link_params_fini(&t->p);
    free(t->state);
}

/* Add the regulariser's gradient for row x (d) into g, with weight w. N3 on ComplEx uses
 * the modulus of each complex coordinate (Lacroix et al. 2018): d|z|^3/d re = 3 |z| re. */
static void add_reg_grad(const weft_train_link_config *cfg, float *g, const float *x, size_t d,
                         float w)
{
    if (w == 0.0f)
        return;
    if (cfg->reg == WEFT_REG_L2) {
        weft_kernel_axpy(g, 2.0f * w, x, d);
        return;
    }
    if (cfg->kind == WEFT_LINK_COMPLEX) {
        size_t h = d / 2;
        for (size_t i = 0; i < h; i++) {
            float mod = sqrtf(x[i] * x[i] + x[h + i] * x[h + i]);
            g[i] += 3.0f * w * mod * x[i];
            g[h + i] += 3.0f * w * mod * x[h + i];
        }
        return;
    }
    for (size_t i = 0; i < d; i++)
        g[i] += 3.0f * w * fabsf(x[i]) * x[i];
}

/* One optimiser step on @p n parameters starting at slab offset @p off. */
static void optim_step(struct trainer *t, size_t off, const float *g, size_t n)
{
    float *w = t->p.slab + off;
    if (t->cfg->optim == WEFT_OPTIM_ADAGRAD) {
        weft_kernel_adagrad(w, t->state + off, g, n, t->cfg->lr);
        return;
    }
    double k = (double)(t->step ? t->step : 1);
    float c1 = (float)(1.0 - pow(0.9, k)), c2 = (float)(1.0 - pow(0.999, k));
    weft_kernel_adam(w, t->state + off, t->state + t->n_param + off, g, n, t->cfg->lr, c1, c2);
}

static size_t entity_off(const struct trainer *t, uint32_t e)
{
    return (size_t)e * t->d;
}

static size_t relation_off(const struct trainer *t, uint32_t r)
{
    return (t->n_ent + r) * t->d;
}

/* ---- logistic loss with sampled negatives ---- */

/* Rows of the parameter slab touched by a batch: their gradients accumulate in one dense
 * buffer and each gets one optimiser step, in ascending row order (so the result does not
 * depend on the order positives were met). */
struct touched {
    uint32_t *rows;
    size_t n;
    bool *mark;      /* per slab row */
};

static void touch(struct touched *tc, size_t row)
{
    if (!tc->mark[row]) {
        tc->mark[row] = true;
        tc->rows[tc->n++] = (uint32_t)row;
    }
}

static int cmp_u32(const void *a, const void *b)
{
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return (x > y) - (x < y);
}

/* One optimiser step per touched row, then clear their gradients and marks. */
static void step_touched(struct trainer *t, struct touched *tc, float *grad)
{
    qsort(tc->rows, tc->n, sizeof *tc->rows, cmp_u32);
    size_t d = t->d;
    for (size_t i = 0; i < tc->n; i++) {
        size_t off = (size_t)tc->rows[i] * d;
        optim_step(t, off, grad + off, d);
        memset(grad + off, 0, d * sizeof *grad);
        tc->mark[tc->rows[i]] = false;
    }
    tc->n = 0;
}

/* The logistic loss over mini-batches with shared negatives (common practice: one draw of
 * K tail and K head corruptions serves every positive of the batch, so the scores are two
 * B x K products). Each positive still meets cfg->negatives uniform corruptions, half of
 * them heads and half tails. */
struct logistic_state {
    size_t batch, k_tail, k_head;
    size_t *order;
    float *qt, *qh;        /* batch x d: tail and head queries */
    float *xt, *xh;        /* batch x k: scores, then their gradients */
    float *nt, *nh;        /* k x d: the negative rows */
    uint32_t *it, *ih;     /* k: their ids */
    float *dqt, *dqh;      /* batch x d */
    float *dnt, *dnh;      /* k x d */
    float *grad;           /* n_param */
    struct touched tc;
};

static weft_err logistic_init(struct logistic_state *ls, struct trainer *t, weft_error *err)
{
    memset(ls, 0, sizeof *ls);
    const weft_train_link_config *cfg = t->cfg;
    size_t auto_batch = t->m / 100 < 16 ? 16 : t->m / 100 > 1000 ? 1000 : t->m / 100;
    ls->batch = cfg->batch ? cfg->batch : auto_batch;
    ls->k_tail = cfg->negatives - cfg->negatives / 2;
    ls->k_head = cfg->negatives / 2;
    size_t b = ls->batch, k = ls->k_tail > ls->k_head ? ls->k_tail : ls->k_head, d = t->d;
    size_t rows = t->n_ent + t->n_rel_rows;
    ls->order = weft_alloc_array(t->m, sizeof *ls->order);
    ls->qt = weft_alloc_array(b * 2, d * sizeof(float));
    ls->xt = weft_alloc_array(b * 2, (k ? k : 1) * sizeof(float));
    ls->nt = weft_alloc_array(k * 2 + 1, d * sizeof(float));
    ls->it = weft_alloc_array(k * 2 + 1, sizeof(uint32_t));
    ls->dqt = weft_alloc_array(b * 2, d * sizeof(float));
    ls->dnt = weft_alloc_array(k * 2 + 1, d * sizeof(float));
    ls->grad = weft_calloc_array(t->n_param, sizeof(float));
    ls->tc.rows = weft_alloc_array(rows, sizeof(uint32_t));
    ls->tc.mark = weft_calloc_array(rows, sizeof(bool));
    if (!ls->order || !ls->qt || !ls->xt || !ls->nt || !ls->it || !ls->dqt || !ls->dnt ||
        !ls->grad || !ls->tc.rows || !ls->tc.mark)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for training state");
    ls->qh = ls->qt + b * d;
    ls->xh = ls->xt + b * (k ? k : 1);
    ls->nh = ls->nt + k * d;
    ls->ih = ls->it + k;
    ls->dqh = ls->dqt + b * d;
    ls->dnh = ls->dnt + k * d;
    for (size_t i = 0; i < t->m; i++)
        ls->order[i] = i;
    return WEFT_OK;
}

static void logistic_fini(struct logistic_state *ls)
{
    free(ls->order);
    free(ls->qt);
    free(ls->xt);
    free(ls->nt);
    free(ls->it);
    free(ls->dqt);
    free(ls->dnt);
    free(ls->grad);
    free(ls->tc.rows);
    free(ls->tc.mark);
}

/* Draw k uniform node ids and gather their rows. */
static void draw_negatives(struct trainer *t, uint32_t *ids, float *rows, size_t k)
{
    for (size_t j = 0; j < k; j++) {
        ids[j] = weft_rng_below(&t->rng, (uint32_t)t->n_ent);
        memcpy(rows + j * t->d, t->p.entity + entity_off(t, ids[j]), t->d * sizeof(float));
    }
}

/* Scores x (nb x k) of the queries against the negatives become gradients (scale / nb per
 * term); returns the summed loss. */
static double negative_terms(float *x, size_t nb, size_t k, float scale)
{
    double loss = 0.0;
    for (size_t i = 0; i < nb * k; i++) {
        float g;
        loss += weft_kernel_logistic(x[i], false, &g);
        x[i] = g * scale;
    }
    return loss;
}

/* Add dN = X^T Q (k x d) into the gradients of the negative rows. */
static void negative_grads(struct trainer *t, struct logistic_state *ls, const float *x,
                           const float *q, const uint32_t *ids, float *dn, size_t nb, size_t k)
{
    size_t d = t->d;
    if (k == 0)
        return;
    weft_gemm(true, false, k, d, nb, 1.0f, x, k, q, d, 0.0f, dn, d, t->cfg->n_threads);
    for (size_t j = 0; j < k; j++) {
        weft_kernel_axpy(ls->grad + entity_off(t, ids[j]), 1.0f, dn + j * d, d);
        touch(&ls->tc, ids[j]);
    }
}

static double logistic_batch(struct trainer *t, struct logistic_state *ls, const size_t *ids,
                             size_t nb)
{
    const weft_train_link_config *cfg = t->cfg;
    size_t d = t->d, kt = ls->k_tail, kh = ls->k_head, nt = cfg->n_threads;
    const float *E = t->p.entity;
    float scale = 1.0f / (float)nb, w = cfg->reg_weight / (float)nb;
    double loss = 0.0;
    for (size_t b = 0; b < nb; b++) {
        const weft_triple *e = &t->train[ids[b]];
        const float *rel = t->p.relation ? t->p.relation + (size_t)e->r * d : NULL;
        weft_model_query_row(cfg->kind, ls->qt + b * d, E + entity_off(t, e->s), rel, d, false);
        weft_model_query_row(cfg->kind, ls->qh + b * d, E + entity_off(t, e->t), rel, d, true);
    }
    draw_negatives(t, ls->it, ls->nt, kt);
    draw_negatives(t, ls->ih, ls->nh, kh);
    if (kt)
        weft_gemm(false, true, nb, kt, d, 1.0f, ls->qt, d, ls->nt, d, 0.0f, ls->xt, kt, nt);
    if (kh)
        weft_gemm(false, true, nb, kh, d, 1.0f, ls->qh, d, ls->nh, d, 0.0f, ls->xh, kh, nt);
    /* Negatives are averaged, so their number sets the variance of the estimate and not the
     * balance between positive and negative evidence (common practice). */
    float neg_scale = scale / (float)(kt + kh);
    loss += (negative_terms(ls->xt, nb, kt, neg_scale) + negative_terms(ls->xh, nb, kh, neg_scale))
            / (double)(kt + kh);
    /* dQ = X N for both sides, before any row moves */
    if (kt)
        weft_gemm(false, false, nb, d, kt, 1.0f, ls->xt, kt, ls->nt, d, 0.0f, ls->dqt, d, nt);
    else
        memset(ls->dqt, 0, nb * d * sizeof(float));
    if (kh)
        weft_gemm(false, false, nb, d, kh, 1.0f, ls->xh, kh, ls->nh, d, 0.0f, ls->dqh, d, nt);
    else
        memset(ls->dqh, 0, nb * d * sizeof(float));
    negative_grads(t, ls, ls->xt, ls->qt, ls->it, ls->dnt, nb, kt);
    negative_grads(t, ls, ls->xh, ls->qh, ls->ih, ls->dnh, nb, kh);
    for (size_t b = 0; b < nb; b++) {
        const weft_triple *e = &t->train[ids[b]];
        const float *qt = ls->qt + b * d, *es = E + entity_off(t, e->s), *et = E + entity_off(t, e->t);
        const float *rel = t->p.relation ? t->p.relation + (size_t)e->r * d : NULL;
        float g;
        loss += weft_kernel_logistic(weft_kernel_dot(qt, et, d), true, &g);
        g *= scale;
        float *gs = ls->grad + entity_off(t, e->s), *gt = ls->grad + entity_off(t, e->t);
        float *gr = rel ? ls->grad + relation_off(t, e->r) : NULL;
        weft_kernel_axpy(ls->dqt + b * d, g, et, d);   /* the positive's share of dq_tail */
        weft_kernel_axpy(gt, g, qt, d);
        weft_model_query_row_backward(cfg->kind, gs, gr, ls->dqt + b * d, es, rel, d, false);
        weft_model_query_row_backward(cfg->kind, gt, gr, ls->dqh + b * d, et, rel, d, true);
        add_reg_grad(cfg, gs, es, d, w);
        add_reg_grad(cfg, gt, et, d, w);
        touch(&ls->tc, e->s);
        touch(&ls->tc, e->t);
        if (rel) {
            add_reg_grad(cfg, gr, rel, d, w);
            touch(&ls->tc, t->n_ent + e->r);
        }
    }
    t->step++;
    step_touched(t, &ls->tc, ls->grad);
    return loss;
}

static void shuffle(weft_rng *rng, size_t *a, size_t n)
{
    for (size_t i = n; i > 1; i--) {   /* Fisher-Yates */
        size_t j = weft_rng_below(rng, (uint32_t)i);
        size_t tmp = a[i - 1];
        a[i - 1] = a[j];
        a[j] = tmp;
    }
}

/* One epoch; returns the mean loss per positive. */
static double logistic_epoch(struct trainer *t, struct logistic_state *ls)
{
    shuffle(&t->rng, ls->order, t->m);
    double loss = 0.0;
    for (size_t i = 0; i < t->m; i += ls->batch) {
        size_t nb = t->m - i < ls->batch ? t->m - i : ls->batch;
        loss += logistic_batch(t, ls, ls->order + i, nb);
    }
    return loss / (double)t->m;
}

/* ---- softmax loss over all nodes ---- */

struct softmax_state {
    size_t n_queries, batch;
    weft_triple *queries;   /* (anchor, relation row, answer): tails, then reciprocal heads */
    size_t *order;
    float *scores;          /* batch x n_ent */
    float *q, *dq;          /* batch x d */
    float *grad;            /* gradient of every parameter, n_param */
    struct touched rel;     /* relation rows used by this batch (slab row numbers) */
};

static weft_err softmax_init(struct softmax_state *ss, struct trainer *t, weft_error *err)
{
    memset(ss, 0, sizeof *ss);
    bool has_inverse = t->n_rel_rows > t->n_rel;
    ss->n_queries = 2 * t->m;
    ss->batch = t->cfg->batch;
    ss->queries = weft_alloc_array(ss->n_queries, sizeof *ss->queries);
    ss->order = weft_alloc_array(ss->n_queries, sizeof *ss->order);
    ss->scores = weft_alloc_array(ss->batch, t->n_ent * sizeof(float));
    ss->q = weft_alloc_array(ss->batch, t->d * sizeof(float));
    ss->dq = weft_alloc_array(ss->batch, t->d * sizeof(float));
    ss->grad = weft_calloc_array(t->n_param, sizeof(float));
    size_t rows = t->n_ent + t->n_rel_rows;
    ss->rel.rows = weft_alloc_array(rows, sizeof(uint32_t));
    ss->rel.mark = weft_calloc_array(rows, sizeof(bool));
    if (!ss->queries || !ss->order || !ss->scores || !ss->q || !ss->dq || !ss->grad ||
        !ss->rel.rows || !ss->rel.mark)
        return weft_error_set(err, WEFT_ERR_NOMEM,
                              "out of memory for 1-vs-all batches of %zu x %zu scores",
                              ss->batch, t->n_ent);
    for (size_t i = 0; i < t->m; i++) {
        const weft_triple *e = &t->train[i];
        ss->queries[i] = *e;
        /* The head query of (s, r, t) is the tail query of (t, r^-1, s); dot needs no
         * inverse row (its score is symmetric). */
        ss->queries[t->m + i] =
            (weft_triple){ e->t, has_inverse ? e->r + (uint32_t)t->n_rel : e->r, e->s };
    }
    for (size_t i = 0; i < ss->n_queries; i++)
        ss->order[i] = i;
    return WEFT_OK;
}

static void softmax_fini(struct softmax_state *ss)
{
    free(ss->queries);
    free(ss->order);
    free(ss->scores);
    free(ss->q);
    free(ss->dq);
    free(ss->grad);
    free(ss->rel.rows);
    free(ss->rel.mark);
}

struct rows_job {
    struct softmax_state *ss;
    const size_t *batch_ids;
    size_t n_ent, first, last;
    float scale;
    double loss;
    bool is_started;
};

static void *softmax_rows(void *arg)
{
    struct rows_job *j = arg;
    j->loss = 0.0;
    for (size_t b = j->first; b < j->last; b++) {
        const weft_triple *qy = &j->ss->queries[j->batch_ids[b]];
        j->loss += weft_kernel_softmax_xent(j->ss->scores + b * j->n_ent, j->n_ent, qy->t,
                                            j->scale);
    }
    return NULL;
}

/* Softmax cross-entropy of every row of the batch, rows split over the threads. */
static double softmax_all_rows(struct trainer *t, struct softmax_state *ss, const size_t *ids,
                               size_t nb)
{
    enum { MAX_THREADS = 64 };
    size_t n_threads = t->cfg->n_threads < MAX_THREADS ? t->cfg->n_threads : MAX_THREADS;
    if (n_threads > nb)
        n_threads = nb;
    struct rows_job jobs[MAX_THREADS];
    pthread_t tids[MAX_THREADS];
    for (size_t k = 0; k < n_threads; k++) {
        jobs[k] = (struct rows_job){ ss, ids, t->n_ent, nb * k / n_threads,
                                     nb * (k + 1) / n_threads, 1.0f / (float)nb, 0.0, false };
        jobs[k].is_started = k > 0 && pthread_create(&tids[k], NULL, softmax_rows, &jobs[k]) == 0;
    }
    for (size_t k = 0; k < n_threads; k++)
        if (!jobs[k].is_started)
            softmax_rows(&jobs[k]);
    double loss = 0.0;
    for (size_t k = 0; k < n_threads; k++) {
        if (jobs[k].is_started)
            pthread_join(tids[k], NULL);
        loss += jobs[k].loss;
    }
    return loss;
}

/* One batch of nb queries: forward, softmax, backward, regulariser, optimiser. */
static double softmax_batch(struct trainer *t, struct softmax_state *ss, const size_t *ids,
                            size_t nb)
{
    const weft_train_link_config *cfg = t->cfg;
    size_t d = t->d, n = t->n_ent;
    const float *E = t->p.entity;
    for (size_t b = 0; b < nb; b++) {
        const weft_triple *qy = &ss->queries[ids[b]];
        const float *rel = t->p.relation ? t->p.relation + (size_t)qy->r * d : NULL;
        weft_model_query_row(cfg->kind, ss->q + b * d, E + entity_off(t, qy->s), rel, d, false);
    }
    size_t nt = cfg->n_threads;
    weft_gemm(false, true, nb, n, d, 1.0f, ss->q, d, E, d, 0.0f, ss->scores, n, nt);
    double loss = softmax_all_rows(t, ss, ids, nb);
    /* scores now hold G = (softmax - onehot) / nb. dQ = G E; dE = G^T Q (every row). */
    weft_gemm(false, false, nb, d, n, 1.0f, ss->scores, n, E, d, 0.0f, ss->dq, d, nt);
    weft_gemm(true, false, n, d, nb, 1.0f, ss->scores, n, ss->q, d, 0.0f, ss->grad, d, nt);
    float w = cfg->reg_weight / (float)nb;
    for (size_t b = 0; b < nb; b++) {
        const weft_triple *qy = &ss->queries[ids[b]];
        const float *rel = t->p.relation ? t->p.relation + (size_t)qy->r * d : NULL;
        float *drel = rel ? ss->grad + relation_off(t, qy->r) : NULL;
        const float *ea = E + entity_off(t, qy->s);
        weft_model_query_row_backward(cfg->kind, ss->grad + entity_off(t, qy->s), drel,
                                      ss->dq + b * d, ea, rel, d, false);
        add_reg_grad(cfg, ss->grad + entity_off(t, qy->s), ea, d, w);
        add_reg_grad(cfg, ss->grad + entity_off(t, qy->t), E + entity_off(t, qy->t), d, w);
        if (rel) {
            add_reg_grad(cfg, drel, rel, d, w);
            touch(&ss->rel, t->n_ent + qy->r);
        }
    }
    t->step++;
    optim_step(t, 0, ss->grad, n * d);   /* every entity row has a gradient */
    step_touched(t, &ss->rel, ss->grad);
    return loss;
}

static double softmax_epoch(struct trainer *t, struct softmax_state *ss)
{
    shuffle(&t->rng, ss->order, ss->n_queries);
    double loss = 0.0;
    for (size_t i = 0; i < ss->n_queries; i += ss->batch) {
        size_t nb = ss->n_queries - i < ss->batch ? ss->n_queries - i : ss->batch;
        loss += softmax_batch(t, ss, ss->order + i, nb);
    }
    return loss / (double)ss->n_queries;
}

/* ---- the run ---- */

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static weft_err check_config(const weft_train_link_config *cfg, size_t m, size_t n_entities,
                             weft_error *err)
{
    if (!weft_model_kind_name(cfg->kind) || !weft_train_loss_name(cfg->loss) ||
        !weft_train_optim_name(cfg->optim) || !weft_train_reg_name(cfg->reg))
        return weft_error_set(err, WEFT_ERR_INVALID, "unknown model, loss, optimiser or regulariser");
    if (m == 0 || n_entities == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "no training edges");
    if (n_entities > UINT32_MAX || m > SIZE_MAX / 4)
        return weft_error_set(err, WEFT_ERR_LIMIT, "too many nodes or edges");
    if (cfg->dim == 0 || cfg->dim > WEFT_MODEL_MAX_DIM || cfg->epochs == 0 ||
        cfg->n_threads == 0 || (cfg->batch == 0 && cfg->loss == WEFT_LOSS_SOFTMAX) ||
        cfg->eval_every == 0 || !(cfg->lr > 0) ||
        !(cfg->reg_weight >= 0) || !(cfg->init_scale > 0) || !(cfg->max_seconds >= 0))
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "dim (1 to %d), epochs, threads, batch, eval interval, lr and init "
                              "must be positive, the regularisation weight not negative",
                              WEFT_MODEL_MAX_DIM);
    if (cfg->kind == WEFT_LINK_COMPLEX && cfg->dim % 2)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "complex needs an even dim (real and imaginary halves), not %zu",
                              cfg->dim);
    return WEFT_OK;
}

/* Filtered validation MRR of the current parameters. */
static weft_err validate(const struct trainer *t, const weft_train_validation *val,
                         double *mrr, weft_error *err)
{
    weft_link_model model = weft_link_params_model(&t->p);
    weft_rank_metrics rm;
    weft_err rc = weft_eval_ranking(val->valid, val->n_valid, t->n_ent, val->both_directions,
                                    val->filter, weft_eval_model_scores, &model,
                                    t->cfg->n_threads, &rm, err);
    if (rc == WEFT_OK)
        *mrr = rm.mrr;
    return rc;
}

weft_err weft_train_link_run(const weft_train_link_config *cfg, const weft_triple *train,
                             size_t m, size_t n_entities, size_t n_relations,
                             const weft_train_validation *val, weft_train_progress_fn progress,
                             void *ctx, weft_link_params *out, weft_train_result *result,
                             weft_error *err)
{
    weft_err rc = check_config(cfg, m, n_entities, err);
    if (rc != WEFT_OK)
        return rc;
    struct trainer t;
    struct logistic_state ls = { 0 };
    struct softmax_state ss = { 0 };
    float *best = NULL;
    bool is_softmax = cfg->loss == WEFT_LOSS_SOFTMAX;
    bool has_val = val && val->n_valid > 0;
    weft_train_result res = { .best_valid_mrr = NAN };
    if ((rc = trainer_init(&t, cfg, train, m, n_entities, n_relations, err)) != WEFT_OK)
        goto done;
    rc = is_softmax ? softmax_init(&ss, &t, err) : logistic_init(&ls, &t, err);
    if (rc != WEFT_OK)
        goto done;
    if (has_val && !(best = weft_alloc_array(t.n_param, sizeof *best))) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the best parameters");
        goto done;
    }
    openblas_set_num_threads((int)cfg->n_threads);
    size_t bad_evals = 0;
    for (size_t epoch = 1; epoch <= cfg->epochs; epoch++) {
        double t0 = now_seconds();
        double loss = is_softmax ? softmax_epoch(&t, &ss) : logistic_epoch(&t, &ls);
        double secs = now_seconds() - t0;
        res.train_seconds += secs;
        weft_train_epoch ep = { epoch, cfg->epochs, loss, secs, secs > 0 ? (double)m / secs : 0,
                                NAN, 0.0, res.best_epoch };
        res.epochs_run = epoch;
        if (!isfinite(loss)) {
            rc = weft_error_set(err, WEFT_ERR_INVALID,
                                "training diverged at epoch %zu (loss %g): lower the learning "
                                "rate or raise the regularisation", epoch, loss);
            goto done;
        }
        if (has_val && (epoch % cfg->eval_every == 0 || epoch == cfg->epochs)) {
            double e0 = now_seconds(), mrr = 0;
            if ((rc = validate(&t, val, &mrr, err)) != WEFT_OK)
                goto done;
            ep.valid_mrr = mrr;
            ep.eval_seconds = now_seconds() - e0;
            res.eval_seconds += ep.eval_seconds;
            if (!(mrr <= res.best_valid_mrr)) {   /* first evaluation, or better */
                res.best_valid_mrr = mrr;
                res.best_epoch = epoch;
                memcpy(best, t.p.slab, t.n_param * sizeof *best);
                bad_evals = 0;
            } else {
                bad_evals++;
            }
            ep.best_epoch = res.best_epoch;
        }
        if (progress)
            progress(ctx, &ep);
        if (cfg->patience && bad_evals >= cfg->patience) {
            res.is_early_stop = true;
            break;
        }
        /* Stop before an epoch that would end past the budget, judged by this one. */
        if (cfg->max_seconds > 0 && res.train_seconds + secs > cfg->max_seconds) {
            res.is_out_of_time = epoch < cfg->epochs;
            break;
        }
    }
    if (has_val && res.best_epoch)
        memcpy(t.p.slab, best, t.n_param * sizeof *best);
    else
        res.best_epoch = res.epochs_run;
    if (!(t.p.state = row_states(&t))) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the optimiser state");
        goto done;
    }
    *out = t.p;
    t.p.slab = NULL;   /* handed to the caller */
    t.p.state = NULL;
    if (result)
        *result = res;
done:
    free(best);
    if (is_softmax)
        softmax_fini(&ss);
    else
        logistic_fini(&ls);
    trainer_fini(&t);
    return rc;
}
