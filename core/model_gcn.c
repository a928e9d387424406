/* GCN layers (include/weft/model_gcn.h).
 *
 * Each layer multiplies its input by W first and mixes over the graph second, U = drop(H) W
 * then Z = A' U + b, so the sparse product runs at the (usually smaller) output width and the
 * last layer's U is exactly what attribution needs. Sparse products are weft_sparse_mm (rows
 * over threads); dense ones are cblas_sgemm. */
#include "weft/model_gcn.h"

#include <cblas.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"

static const char *const act_names[] = { [WEFT_GCN_ACT_RELU] = "relu",
                                         [WEFT_GCN_ACT_SIGMOID] = "sigmoid",
                                         [WEFT_GCN_ACT_LINEAR] = "linear" };

const char *weft_gcn_act_name(weft_gcn_act v)
{
    return v >= WEFT_GCN_ACT_RELU && v <= WEFT_GCN_ACT_LINEAR ? act_names[v] : NULL;
}

bool weft_gcn_act_parse(const char *s, weft_gcn_act *out)
{
    for (int v = WEFT_GCN_ACT_RELU; v <= WEFT_GCN_ACT_LINEAR; v++)
        if (!strcmp(s, act_names[v])) {
            *out = (weft_gcn_act)v;
            return true;
        }
    return false;
}

weft_err weft_gcn_shape_check(const weft_gcn_shape *s, weft_error *err)
{
    if (s->n_layers < 1 || s->n_layers > WEFT_GCN_MAX_LAYERS)
        return weft_error_set(err, WEFT_ERR_INVALID, "gcn: %zu layers (1 to %d)", s->n_layers,
                              WEFT_GCN_MAX_LAYERS);
    if (s->n_nodes == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "gcn: no node");
    for (size_t l = 0; l <= s->n_layers; l++)
        if (s->dims[l] == 0 || s->dims[l] > (1u << 24))
            return weft_error_set(err, WEFT_ERR_INVALID, "gcn: width %zu of layer %zu is out "
                                  "of range", s->dims[l], l);
    if (!weft_gcn_act_name(s->act))
        return weft_error_set(err, WEFT_ERR_INVALID, "gcn: unknown activation");
    return WEFT_OK;
}

/* Widest buffer the backward pass needs per node: every layer's output, and its input when
 * dense (given sparse features have no dense gradient). */
static size_t max_width(const weft_gcn_shape *s)
{
    size_t w = s->has_embedding ? s->dims[0] : 0;
    for (size_t l = 1; l <= s->n_layers; l++)
        w = s->dims[l] > w ? s->dims[l] : w;
    return w;
}

/* Floats of each parameter block, in slab order: embedding, then W_l and b_l per layer. */
static bool params_size(const weft_gcn_shape *s, size_t *total)
{
    size_t n = 0;
    if (s->has_embedding) {
        if (s->n_nodes > SIZE_MAX / s->dims[0])
            return false;
        n = s->n_nodes * s->dims[0];
    }
    for (size_t l = 0; l < s->n_layers; l++) {
        size_t w = s->dims[l] * s->dims[l + 1] + (s->has_bias ? s->dims[l + 1] : 0);
        if (n > SIZE_MAX - w)
            return false;
        n += w;
    }
    *total = n;
    return true;
}

weft_err weft_gcn_params_init(weft_gcn_params *p, const weft_gcn_shape *s, weft_error *err)
{
    weft_err rc = weft_gcn_shape_check(s, err);
    if (rc != WEFT_OK)
        return rc;
    memset(p, 0, sizeof *p);
    size_t n;
    if (!params_size(s, &n) || !(p->slab = weft_calloc_array(n, sizeof *p->slab)))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for GCN parameters");
    p->n = n;
    float *at = p->slab;
    if (s->has_embedding) {
        p->embedding = at;
        at += s->n_nodes * s->dims[0];
    }
    for (size_t l = 0; l < s->n_layers; l++) {
        p->w[l] = at;
        at += s->dims[l] * s->dims[l + 1];
        if (s->has_bias) {
            p->b[l] = at;
            at += s->dims[l + 1];
        }
    }
    return WEFT_OK;
}

void weft_gcn_params_fini(weft_gcn_params *p)
{
    if (!p)
        return;
    free(p->slab);
    memset(p, 0, sizeof *p);
}

void weft_gcn_params_glorot(weft_gcn_params *p, const weft_gcn_shape *s, weft_rng *rng)
{
    memset(p->slab, 0, p->n * sizeof *p->slab);
    if (p->embedding) {
        float r = sqrtf(3.0f / (float)s->dims[0]);
        for (size_t i = 0; i < s->n_nodes * s->dims[0]; i++)
            p->embedding[i] = (2.0f * weft_rng_float(rng) - 1.0f) * r;
    }
    for (size_t l = 0; l < s->n_layers; l++) {
        float r = sqrtf(6.0f / (float)(s->dims[l] + s->dims[l + 1]));
        for (size_t i = 0; i < s->dims[l] * s->dims[l + 1]; i++)
            p->w[l][i] = (2.0f * weft_rng_float(rng) - 1.0f) * r;
    }
}

weft_err weft_gcn_cache_init(weft_gcn_cache *c, const weft_gcn_shape *s, const weft_sparse *x,
                             weft_error *err)
{
    weft_err rc = weft_gcn_shape_check(s, err);
    if (rc != WEFT_OK)
        return rc;
    memset(c, 0, sizeof *c);
    size_t n = s->n_nodes, total = 0, nnz = x ? weft_sparse_nnz(x) : 0;
    /* in + keep for every layer with a dense input, u and h for every layer, two work
     * buffers, and the feature values twice. Widths are bounded by 2^24 (shape check). */
    for (size_t l = 0; l < s->n_layers; l++) {
        if (l > 0 || s->has_embedding)
            total += 2 * s->dims[l];
        total += 2 * s->dims[l + 1];
    }
    total += 2 * max_width(s);
    if (total > SIZE_MAX / n / sizeof(float) - 2 * nnz)
        return weft_error_set(err, WEFT_ERR_NOMEM, "gcn: workspace too large");
    if (!(c->slab = weft_alloc_array(total * n + 2 * nnz + 1, sizeof *c->slab)))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the GCN workspace "
                              "(%zu floats per node)", total);
    float *at = c->slab;
    for (size_t l = 0; l < s->n_layers; l++) {
        if (l > 0 || s->has_embedding) {
            c->in[l] = at;
            at += n * s->dims[l];
            c->keep[l] = at;
            at += n * s->dims[l];
        }
        c->u[l] = at;
        at += n * s->dims[l + 1];
        c->h[l + 1] = at;
        at += n * s->dims[l + 1];
    }
    c->work_a = at;
    at += n * max_width(s);
    c->work_b = at;
    at += n * max_width(s);
    if (x) {
        c->x_val = at;
        at += nnz;
        c->x_val_t = at;
    }
    return WEFT_OK;
}

void weft_gcn_cache_fini(weft_gcn_cache *c)
{
    if (!c)
        return;
    free(c->slab);
    memset(c, 0, sizeof *c);
}

/* Inverted dropout scales: keep[i] = 0 with probability p, else 1/(1-p). Each 64-bit draw
 * gives four 16-bit uniforms, so p is used to within 2^-16. */
static void dropout_scales(float *keep, size_t n, float p, weft_rng *rng)
{
    uint32_t cut = (uint32_t)((double)p * 65536.0 + 0.5);
    float scale = 1.0f / (1.0f - p);
    size_t i = 0;
    while (i < n) {
        uint64_t bits = weft_rng_next(rng);
        for (int q = 0; q < 4 && i < n; q++, i++, bits >>= 16)
            keep[i] = (uint32_t)(bits & 0xffff) >= cut ? scale : 0.0f;
    }
}

/* Inverted dropout of n entries: keep[i] is 0 or 1/(1-p), out[i] = src[i] * keep[i]. */
static void dropout_dense(float *out, float *keep, const float *src, size_t n, float p,
                          weft_rng *rng)
{
    if (!rng || p <= 0.0f) {
        memcpy(out, src, n * sizeof *out);
        for (size_t i = 0; i < n; i++)
            keep[i] = 1.0f;
        return;
    }
    dropout_scales(keep, n, p, rng);
    for (size_t i = 0; i < n; i++)
        out[i] = src[i] * keep[i];
}

static void activate(float *h, size_t n, weft_gcn_act act)
{
    if (act == WEFT_GCN_ACT_RELU) {
        for (size_t i = 0; i < n; i++)
            h[i] = h[i] > 0.0f ? h[i] : 0.0f;
    } else if (act == WEFT_GCN_ACT_SIGMOID) {
        for (size_t i = 0; i < n; i++)
            h[i] = 1.0f / (1.0f + expf(-h[i]));
    }
}

/* dz = dh * act'(z), from the activated output h (relu: h > 0; sigmoid: h (1 - h)). */
static void activate_backward(float *d, const float *h, size_t n, weft_gcn_act act)
{
    if (act == WEFT_GCN_ACT_RELU) {
        for (size_t i = 0; i < n; i++)
            d[i] = h[i] > 0.0f ? d[i] : 0.0f;
    } else if (act == WEFT_GCN_ACT_SIGMOID) {
        for (size_t i = 0; i < n; i++)
            d[i] *= h[i] * (1.0f - h[i]);
    }
}

static void add_bias(float *z, const float *b, size_t n, size_t d)
{
    if (!b)
        return;
    for (size_t i = 0; i < n; i++)
        for (size_t j = 0; j < d; j++)
            z[i * d + j] += b[j];
}

void weft_gcn_forward(weft_gcn_cache *c, const weft_gcn_shape *s, const weft_gcn_params *p,
                      const weft_gcn_input *in, float dropout, weft_rng *rng, size_t n_threads)
{
    size_t n = s->n_nodes;
    for (size_t l = 0; l < s->n_layers; l++) {
        size_t d_in = s->dims[l], d_out = s->dims[l + 1];
        if (l == 0 && !s->has_embedding) {
            /* Sparse features: dropout on the stored entries, U = X W. */
            const weft_sparse *x = in->x;
            size_t nnz = weft_sparse_nnz(x);
            if (rng && dropout > 0.0f) {
                dropout_scales(c->x_val, nnz, dropout, rng);
                for (size_t k = 0; k < nnz; k++)
                    c->x_val[k] *= x->val[k];
            } else {
                memcpy(c->x_val, x->val, nnz * sizeof *c->x_val);
            }
            weft_sparse_mm(c->u[0], x, c->x_val, p->w[0], d_out, n_threads);
        } else {
            const float *h = l == 0 ? p->embedding : c->h[l];
            dropout_dense(c->in[l], c->keep[l], h, n * d_in, dropout, rng);
            cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)n, (int)d_out,
                        (int)d_in, 1.0f, c->in[l], (int)d_in, p->w[l], (int)d_out, 0.0f,
                        c->u[l], (int)d_out);
        }
        weft_sparse_mm(c->h[l + 1], in->adj, NULL, c->u[l], d_out, n_threads);
        add_bias(c->h[l + 1], p->b[l], n, d_out);
        if (l + 1 < s->n_layers)
            activate(c->h[l + 1], n * d_out, s->act);
    }
}

void weft_gcn_backward(weft_gcn_params *g, weft_gcn_cache *c, float *dout,
                       const weft_gcn_shape *s, const weft_gcn_params *p,
                       const weft_gcn_input *in, size_t n_threads)
{
    size_t n = s->n_nodes;
    float *dz = dout;   /* dLoss/dZ_l, (n, dims[l+1]); moves between buffers going down */
    for (size_t l = s->n_layers; l-- > 0;) {
        size_t d_in = s->dims[l], d_out = s->dims[l + 1];
        if (l + 1 < s->n_layers)
            activate_backward(dz, c->h[l + 1], n * d_out, s->act);
        if (g->b[l])
            for (size_t i = 0; i < n; i++)
                for (size_t j = 0; j < d_out; j++)
                    g->b[l][j] += dz[i * d_out + j];
        /* dU = A'^T dZ */
        float *du = dz == c->work_a ? c->work_b : c->work_a;
        weft_sparse_mm(du, in->adj_t, NULL, dz, d_out, n_threads);
        if (l == 0 && !s->has_embedding) {
            /* dW_0 = drop(X)^T dU, through the transpose of X with the dropped values. */
            const weft_sparse *xt = in->x_t;
            size_t nnz = weft_sparse_nnz(xt);
            for (size_t k = 0; k < nnz; k++)
                c->x_val_t[k] = c->x_val[in->x_t_from[k]];
            float *dw = dz == c->work_a ? c->work_a : c->work_b;   /* the free buffer */
            if ((size_t)xt->n_rows * d_out > n * max_width(s)) {
                /* X^T dU does not fit a work buffer (more features than nodes): accumulate
                 * row by row. */
                for (size_t f = 0; f < xt->n_rows; f++)
                    for (uint64_t k = xt->off[f]; k < xt->off[f + 1]; k++)
                        cblas_saxpy((int)d_out, c->x_val_t[k], du + (size_t)xt->col[k] * d_out,
                                    1, g->w[0] + f * d_out, 1);
            } else {
                weft_sparse_mm(dw, xt, c->x_val_t, du, d_out, n_threads);
                for (size_t i = 0; i < xt->n_rows * d_out; i++)
                    g->w[0][i] += dw[i];
            }
            break;
        }
        /* dW_l += in_l^T dU;  d in_l = dU W_l^T, then through the dropout mask. */
        cblas_sgemm(CblasRowMajor, CblasTrans, CblasNoTrans, (int)d_in, (int)d_out, (int)n,
                    1.0f, c->in[l], (int)d_in, du, (int)d_out, 1.0f, g->w[l], (int)d_out);
        float *dh = du == c->work_a ? c->work_b : c->work_a;
        cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, (int)n, (int)d_in, (int)d_out, 1.0f,
                    du, (int)d_out, p->w[l], (int)d_out, 0.0f, dh, (int)d_in);
        for (size_t i = 0; i < n * d_in; i++)
            dh[i] *= c->keep[l][i];
        if (l == 0) {
            for (size_t i = 0; i < n * d_in; i++)
                g->embedding[i] += dh[i];
            break;
        }
        dz = dh;
    }
}

size_t weft_gcn_attribute(float *contrib, float *out, const uint64_t *off, const uint32_t *col,
                          const float *val, const float *msg, const float *bias, size_t d,
                          uint32_t v)
{
    for (size_t j = 0; j < d; j++)
        out[j] = bias ? bias[j] : 0.0f;
    size_t r = 0;
    for (uint64_t k = off[v]; k < off[v + 1]; k++, r++) {
        const float *m = msg + (size_t)col[k] * d;
        for (size_t j = 0; j < d; j++) {
            contrib[r * d + j] = val[k] * m[j];
            out[j] += contrib[r * d + j];
        }
    }
    return r;
}
