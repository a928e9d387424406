/* Tests of the GCN layers (core/model_gcn.c): central-difference checks of the backward pass
 * for every parameter (loss = sum(R .* output) with a fixed random R, summed in double; pass
 * when |num - ana| <= 1e-3 + 1e-2 * |num|, the rule of test_grad.c), the forward pass against
 * a dense evaluation of its defining formula, dropout, and attribution. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/model_gcn.h"
#include "weft/rng.h"
#include "weft/sparse.h"

enum { N = 7, N_FEATURES = 5, EMB_DIM = 4, HIDDEN = 4, N_CLASSES = 3 };

/* A small graph on 7 nodes: a triangle 0-1-2, a path 2-3-4-5, a chord 1-5, a self-loop on 5
 * and node 6 isolated, so rows of one to four entries occur. */
static const weft_triple graph_edges[] = { { 0, 0, 1 }, { 1, 0, 2 }, { 2, 0, 0 }, { 2, 0, 3 },
                                           { 3, 0, 4 }, { 4, 0, 5 }, { 1, 0, 5 }, { 5, 0, 5 } };

/* The step and the pass rule of the central differences. */
static const float STEP = 1e-2f;
/* Relu: the parameters are drawn until every hidden pre-activation lies at least this far
 * from the kink, so that no step of STEP moves one across it (checked at every step). */
static const double RELU_MARGIN = 0.1;
/* Dropout's generator is re-seeded with this before every forward pass, so that every pass
 * of one check draws the same masks. */
static const uint64_t DROP_SEED = 1234;

typedef struct net {
    weft_gcn_shape s;
    weft_sparse adj, adj_t, x, x_t;
    uint64_t *x_t_from;
    weft_gcn_input in;
    weft_gcn_params p, g;
    weft_gcn_cache c;
    float *r;          /* (N, output width): the loss weights, dLoss/doutput */
    float *dout;       /* a copy of r for backward to clobber */
    float dropout;     /* with dropout > 0, forward passes train (rng) */
} net;

static size_t out_width(const net *t) { return t->s.dims[t->s.n_layers]; }
static const float *output(const net *t) { return t->c.h[t->s.n_layers]; }

static float uniform(weft_rng *rng, float lo, float hi)
{
    return lo + (hi - lo) * weft_rng_float(rng);
}

/* Features (N x N_FEATURES): about half the entries present, values in [0.2, 1.2); node 4
 * has none (a zero row). */
static void make_features(weft_sparse *x, weft_rng *rng)
{
    x->n_rows = N;
    x->n_cols = N_FEATURES;
    x->off = calloc(N + 1, sizeof *x->off);
    x->col = malloc(N * N_FEATURES * sizeof *x->col);
    x->val = malloc(N * N_FEATURES * sizeof *x->val);
    cr_assert(x->off && x->col && x->val);
    size_t k = 0;
    for (size_t i = 0; i < N; i++) {
        for (size_t j = 0; j < N_FEATURES; j++)
            if (i != 4 && (weft_rng_float(rng) < 0.5f || j == i % N_FEATURES)) {
                x->col[k] = (uint32_t)j;
                x->val[k] = uniform(rng, 0.2f, 1.2f);
                k++;
            }
        x->off[i + 1] = k;
    }
}

static void fill_params(net *t, uint64_t seed)
{
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    for (size_t i = 0; i < t->p.n; i++)
        t->p.slab[i] = uniform(&rng, -1.0f, 1.0f);
}

static void net_init(net *t, size_t n_layers, weft_gcn_act act, weft_sparse_norm norm,
                     bool has_embedding, bool has_bias, float dropout)
{
    memset(t, 0, sizeof *t);
    weft_error err = { WEFT_OK, "" };
    t->s.n_nodes = N;
    t->s.n_layers = n_layers;
    t->s.dims[0] = has_embedding ? EMB_DIM : N_FEATURES;
    for (size_t l = 1; l < n_layers; l++)
        t->s.dims[l] = l == 1 ? HIDDEN : HIDDEN - 1;
    t->s.dims[n_layers] = N_CLASSES;
    t->s.has_embedding = has_embedding;
    t->s.has_bias = has_bias;
    t->s.act = act;
    t->dropout = dropout;
    cr_assert_eq(weft_sparse_adjacency(graph_edges, sizeof graph_edges / sizeof graph_edges[0],
                                       N, norm, true, &t->adj, NULL, &err), WEFT_OK, "%s",
                 err.msg);
    t->in.adj = &t->adj;
    if (norm == WEFT_SPARSE_NORM_SYM) {
        t->in.adj_t = &t->adj;   /* symmetric: its own transpose */
    } else {
        cr_assert_eq(weft_sparse_transpose(&t->adj, &t->adj_t, NULL, &err), WEFT_OK);
        t->in.adj_t = &t->adj_t;
    }
    weft_rng rng;
    weft_rng_seed(&rng, 77);
    if (!has_embedding) {
        make_features(&t->x, &rng);
        cr_assert_eq(weft_sparse_transpose(&t->x, &t->x_t, &t->x_t_from, &err), WEFT_OK);
        t->in.x = &t->x;
        t->in.x_t = &t->x_t;
        t->in.x_t_from = t->x_t_from;
    }
    cr_assert_eq(weft_gcn_params_init(&t->p, &t->s, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_gcn_params_init(&t->g, &t->s, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_gcn_cache_init(&t->c, &t->s, has_embedding ? NULL : &t->x, &err), WEFT_OK,
                 "%s", err.msg);
    t->r = malloc(N * out_width(t) * sizeof *t->r);
    t->dout = malloc(N * out_width(t) * sizeof *t->dout);
    cr_assert(t->r && t->dout);
    for (size_t i = 0; i < N * out_width(t); i++)
        t->r[i] = uniform(&rng, -1.0f, 1.0f);
    fill_params(t, 1);
}

static void net_fini(net *t)
{
    weft_gcn_cache_fini(&t->c);
    weft_gcn_params_fini(&t->g);
    weft_gcn_params_fini(&t->p);
    weft_sparse_fini(&t->x_t);
    weft_sparse_fini(&t->x);
    weft_sparse_fini(&t->adj_t);
    weft_sparse_fini(&t->adj);
    free(t->x_t_from);
    free(t->r);
    free(t->dout);
}

static void forward(net *t)
{
    if (t->dropout > 0.0f) {
        weft_rng rng;
        weft_rng_seed(&rng, DROP_SEED);
        weft_gcn_forward(&t->c, &t->s, &t->p, &t->in, t->dropout, &rng, 1);
    } else {
        weft_gcn_forward(&t->c, &t->s, &t->p, &t->in, 0.0f, NULL, 1);
    }
}

static double loss(net *t)
{
    forward(t);
    double acc = 0;
    for (size_t i = 0; i < N * out_width(t); i++)
        acc += (double)t->r[i] * output(t)[i];
    return acc;
}

/* Smallest |Z_l| over the hidden layers of the last forward pass, Z_l = A' U_l + b_l computed
 * here from the cached U_l. */
static double hidden_margin(const net *t)
{
    double margin = INFINITY;
    for (size_t l = 0; l + 1 < t->s.n_layers; l++) {
        size_t d = t->s.dims[l + 1];
        for (size_t i = 0; i < N; i++)
            for (size_t j = 0; j < d; j++) {
                double z = t->p.b[l] ? t->p.b[l][j] : 0.0;
                for (uint64_t k = t->adj.off[i]; k < t->adj.off[i + 1]; k++)
                    z += (double)t->adj.val[k] * t->c.u[l][t->adj.col[k] * d + j];
                margin = fmin(margin, fabs(z));
            }
    }
    return margin;
}

/* Which hidden outputs of the last forward pass are positive (relu: which units are on). */
static size_t hidden_pattern(const net *t, bool *on)
{
    size_t k = 0;
    for (size_t l = 1; l < t->s.n_layers; l++)
        for (size_t i = 0; i < N * t->s.dims[l]; i++)
            on[k++] = t->c.h[l][i] > 0.0f;
    return k;
}

/* For relu, redraw the parameters until every hidden pre-activation clears RELU_MARGIN. */
static void keep_off_the_kink(net *t)
{
    if (t->s.act != WEFT_GCN_ACT_RELU || t->s.n_layers == 1)
        return;
    for (uint64_t seed = 1; seed < 1000; seed++) {
        fill_params(t, seed);
        forward(t);
        if (hidden_margin(t) >= RELU_MARGIN)
            return;
    }
    cr_assert_fail("no parameter seed keeps the relu inputs %g from 0", RELU_MARGIN);
}

/* g = dLoss/dparameters by the backward pass at the current parameters. */
static void analytic(net *t)
{
    memset(t->g.slab, 0, t->g.n * sizeof *t->g.slab);
    forward(t);
    memcpy(t->dout, t->r, N * out_width(t) * sizeof *t->dout);
    weft_gcn_backward(&t->g, &t->c, t->dout, &t->s, &t->p, &t->in, 1);
}

typedef struct block {
    char name[24];
    float *p, *g;
    size_t n;
} block;

/* The parameter blocks by name: embedding, W0, b0, W1, ... */
static size_t blocks_of(const net *t, block *out)
{
    size_t k = 0;
    if (t->s.has_embedding)
        out[k++] = (block){ "embedding", t->p.embedding, t->g.embedding,
                            N * t->s.dims[0] };
    for (size_t l = 0; l < t->s.n_layers; l++) {
        out[k] = (block){ "", t->p.w[l], t->g.w[l], t->s.dims[l] * t->s.dims[l + 1] };
        snprintf(out[k++].name, sizeof out[0].name, "W%zu", l);
        if (t->s.has_bias) {
            out[k] = (block){ "", t->p.b[l], t->g.b[l], t->s.dims[l + 1] };
            snprintf(out[k++].name, sizeof out[0].name, "b%zu", l);
        }
    }
    return k;
}

static void check_gradient(net *t, const char *what)
{
    keep_off_the_kink(t);
    analytic(t);
    forward(t);
    bool base[2 * N * HIDDEN], moved[2 * N * HIDDEN];
    size_t n_hidden = hidden_pattern(t, base);
    block blocks[1 + 2 * WEFT_GCN_MAX_LAYERS];
    size_t n_blocks = blocks_of(t, blocks), n_checked = 0;
    for (size_t b = 0; b < n_blocks; b++)
        for (size_t i = 0; i < blocks[b].n; i++) {
            float keep = blocks[b].p[i];
            blocks[b].p[i] = keep + STEP;
            double up = loss(t);
            hidden_pattern(t, moved);
            bool same = !memcmp(base, moved, n_hidden * sizeof *base);
            blocks[b].p[i] = keep - STEP;
            double down = loss(t);
            hidden_pattern(t, moved);
            same = same && !memcmp(base, moved, n_hidden * sizeof *base);
            blocks[b].p[i] = keep;
            cr_assert(same || t->s.act != WEFT_GCN_ACT_RELU,
                      "%s %s[%zu]: a step crossed a relu kink; raise RELU_MARGIN", what,
                      blocks[b].name, i);
            double num = (up - down) / (2.0 * STEP), ana = blocks[b].g[i];
            cr_assert(fabs(num - ana) <= 1e-3 + 1e-2 * fabs(num),
                      "%s %s[%zu]: numeric %g, analytic %g", what, blocks[b].name, i, num, ana);
            n_checked++;
        }
    cr_assert_eq(n_checked, t->p.n, "%s: the blocks do not cover the parameters", what);
}

/* Every combination of normalisation, input and dropout for one depth and activation. */
static void check_all_inputs(size_t n_layers, weft_gcn_act act)
{
    static const weft_sparse_norm norms[] = { WEFT_SPARSE_NORM_SYM, WEFT_SPARSE_NORM_ROW };
    static const float dropouts[] = { 0.0f, 0.3f };
    for (size_t a = 0; a < 2; a++)
        for (int has_embedding = 0; has_embedding < 2; has_embedding++)
            for (size_t k = 0; k < 2; k++) {
                char what[128];
                snprintf(what, sizeof what, "%zu layers, %s, %s norm, %s input, dropout %.1f",
                         n_layers, weft_gcn_act_name(act), weft_sparse_norm_name(norms[a]),
                         has_embedding ? "embedding" : "feature", (double)dropouts[k]);
                net t;
                net_init(&t, n_layers, act, norms[a], has_embedding, true, dropouts[k]);
                check_gradient(&t, what);
                net_fini(&t);
            }
}

Test(gcn, backward_one_layer) { check_all_inputs(1, WEFT_GCN_ACT_RELU); }
Test(gcn, backward_two_layers_relu) { check_all_inputs(2, WEFT_GCN_ACT_RELU); }
Test(gcn, backward_two_layers_sigmoid) { check_all_inputs(2, WEFT_GCN_ACT_SIGMOID); }
Test(gcn, backward_two_layers_linear) { check_all_inputs(2, WEFT_GCN_ACT_LINEAR); }
Test(gcn, backward_three_layers_relu) { check_all_inputs(3, WEFT_GCN_ACT_RELU); }
Test(gcn, backward_three_layers_sigmoid) { check_all_inputs(3, WEFT_GCN_ACT_SIGMOID); }
Test(gcn, backward_three_layers_linear) { check_all_inputs(3, WEFT_GCN_ACT_LINEAR); }

Test(gcn, backward_without_bias)
{
    for (int has_embedding = 0; has_embedding < 2; has_embedding++) {
        net t;
        net_init(&t, 2, WEFT_GCN_ACT_SIGMOID, WEFT_SPARSE_NORM_ROW, has_embedding, false, 0.3f);
        cr_assert_null(t.p.b[0]);
        check_gradient(&t, has_embedding ? "no bias, embedding" : "no bias, features");
        net_fini(&t);
    }
}

Test(gcn, relu_check_leaves_some_units_off)
{
    /* The relu checks above mean something only when units are off as well as on. */
    net t;
    net_init(&t, 3, WEFT_GCN_ACT_RELU, WEFT_SPARSE_NORM_SYM, true, true, 0.0f);
    keep_off_the_kink(&t);
    forward(&t);
    bool on[2 * N * HIDDEN];
    size_t n = hidden_pattern(&t, on), n_on = 0;
    for (size_t i = 0; i < n; i++)
        n_on += on[i];
    cr_assert(n_on > 0 && n_on < n, "%zu of %zu relu units on", n_on, n);
    net_fini(&t);
}

Test(gcn, backward_adds_into_gradients)
{
    /* Two backward passes without zeroing in between give twice the gradient. */
    net t;
    net_init(&t, 2, WEFT_GCN_ACT_SIGMOID, WEFT_SPARSE_NORM_SYM, true, true, 0.3f);
    analytic(&t);
    float *once = malloc(t.g.n * sizeof *once);
    cr_assert_not_null(once);
    memcpy(once, t.g.slab, t.g.n * sizeof *once);
    forward(&t);
    memcpy(t.dout, t.r, N * out_width(&t) * sizeof *t.dout);
    weft_gcn_backward(&t.g, &t.c, t.dout, &t.s, &t.p, &t.in, 1);
    for (size_t i = 0; i < t.g.n; i++)
        cr_assert(fabsf(t.g.slab[i] - 2 * once[i]) <= 1e-5f * (1 + fabsf(once[i])),
                  "gradient[%zu]: %g after two passes, %g after one", i, (double)t.g.slab[i],
                  (double)once[i]);
    free(once);
    net_fini(&t);
}

/* ---- forward ---- */

/* The defining formula evaluated densely in double, without dropout:
 * H_0 = X or E;  Z_l = A' (H_l W_l) + b_l;  H_{l+1} = act(Z_l);  output Z_{L-1}. */
static void dense_forward(double *out, const net *t)
{
    const weft_gcn_shape *s = &t->s;
    size_t width = s->dims[0];
    double *h = calloc(N * 8, sizeof *h), *u = calloc(N * 8, sizeof *u);
    cr_assert(h && u && width <= 8);
    for (size_t i = 0; i < N; i++)
        if (s->has_embedding)
            for (size_t j = 0; j < width; j++)
                h[i * width + j] = t->p.embedding[i * width + j];
        else
            for (uint64_t k = t->x.off[i]; k < t->x.off[i + 1]; k++)
                h[i * width + t->x.col[k]] = t->x.val[k];
    for (size_t l = 0; l < s->n_layers; l++) {
        size_t d_in = s->dims[l], d_out = s->dims[l + 1];
        for (size_t i = 0; i < N; i++)
            for (size_t j = 0; j < d_out; j++) {
                double acc = 0;
                for (size_t f = 0; f < d_in; f++)
                    acc += h[i * d_in + f] * t->p.w[l][f * d_out + j];
                u[i * d_out + j] = acc;
            }
        for (size_t i = 0; i < N; i++)
            for (size_t j = 0; j < d_out; j++) {
                double z = s->has_bias ? t->p.b[l][j] : 0.0;
                for (uint64_t k = t->adj.off[i]; k < t->adj.off[i + 1]; k++)
                    z += t->adj.val[k] * u[t->adj.col[k] * d_out + j];
                if (l + 1 < s->n_layers && s->act == WEFT_GCN_ACT_RELU)
                    z = z > 0 ? z : 0;
                else if (l + 1 < s->n_layers && s->act == WEFT_GCN_ACT_SIGMOID)
                    z = 1 / (1 + exp(-z));
                h[i * d_out + j] = z;
            }
    }
    memcpy(out, h, N * s->dims[s->n_layers] * sizeof *out);
    free(h);
    free(u);
}

Test(gcn, forward_matches_dense_formula)
{
    static const weft_gcn_act acts[] = { WEFT_GCN_ACT_RELU, WEFT_GCN_ACT_SIGMOID,
                                         WEFT_GCN_ACT_LINEAR };
    for (size_t n_layers = 1; n_layers <= 3; n_layers++)
        for (size_t a = 0; a < 3; a++)
            for (int has_embedding = 0; has_embedding < 2; has_embedding++)
                for (int row = 0; row < 2; row++) {
                    net t;
                    net_init(&t, n_layers, acts[a],
                             row ? WEFT_SPARSE_NORM_ROW : WEFT_SPARSE_NORM_SYM, has_embedding,
                             true, 0.0f);
                    double want[N * N_CLASSES];
                    forward(&t);
                    dense_forward(want, &t);
                    for (size_t i = 0; i < N * N_CLASSES; i++)
                        cr_assert(fabs(output(&t)[i] - want[i]) <= 1e-5 * (1 + fabs(want[i])),
                                  "%zu layers, %s, %s input, %s: out[%zu] is %.8g, formula "
                                  "%.8g", n_layers, weft_gcn_act_name(acts[a]),
                                  has_embedding ? "embedding" : "feature", row ? "row" : "sym",
                                  i, (double)output(&t)[i], want[i]);
                    net_fini(&t);
                }
}

Test(gcn, forward_without_rng_is_deterministic_and_ignores_dropout)
{
    for (int has_embedding = 0; has_embedding < 2; has_embedding++) {
        net t;
        net_init(&t, 3, WEFT_GCN_ACT_RELU, WEFT_SPARSE_NORM_SYM, has_embedding, true, 0.0f);
        float first[N * N_CLASSES], again[N * N_CLASSES];
        weft_gcn_forward(&t.c, &t.s, &t.p, &t.in, 0.0f, NULL, 1);
        memcpy(first, output(&t), sizeof first);
        weft_gcn_forward(&t.c, &t.s, &t.p, &t.in, 0.0f, NULL, 1);
        cr_assert_eq(memcmp(first, output(&t), sizeof first), 0, "a second pass differs");
        /* A dropout rate without a generator is evaluation: no dropout. */
        weft_gcn_forward(&t.c, &t.s, &t.p, &t.in, 0.5f, NULL, 1);
        memcpy(again, output(&t), sizeof again);
        cr_assert_eq(memcmp(first, again, sizeof first), 0, "dropout applied without rng");
        net_fini(&t);
    }
}

Test(gcn, zero_dropout_with_rng_equals_evaluation)
{
    for (int has_embedding = 0; has_embedding < 2; has_embedding++) {
        net t;
        net_init(&t, 2, WEFT_GCN_ACT_SIGMOID, WEFT_SPARSE_NORM_ROW, has_embedding, true, 0.0f);
        float eval[N * N_CLASSES];
        weft_gcn_forward(&t.c, &t.s, &t.p, &t.in, 0.0f, NULL, 1);
        memcpy(eval, output(&t), sizeof eval);
        weft_rng rng;
        weft_rng_seed(&rng, 3);
        weft_gcn_forward(&t.c, &t.s, &t.p, &t.in, 0.0f, &rng, 1);
        for (size_t i = 0; i < N * N_CLASSES; i++)
            cr_assert_eq(output(&t)[i], eval[i], "out[%zu]: %g training with p = 0, %g in "
                         "evaluation", i, (double)output(&t)[i], (double)eval[i]);
        net_fini(&t);
    }
}

/* Counts the entries of drop(src) in @p in that were dropped (0) and kept (src / (1 - p)),
 * failing on any other value. */
static void count_drops(const float *in, const float *src, size_t n, float p, size_t *dropped,
                        size_t *kept, const char *what)
{
    for (size_t i = 0; i < n; i++) {
        if (src[i] == 0.0f)
            continue;   /* cannot tell */
        if (in[i] == 0.0f) {
            (*dropped)++;
            continue;
        }
        double want = src[i] / (1.0 - p);
        cr_assert(fabs(in[i] - want) <= 1e-6 * (1 + fabs(want)),
                  "%s[%zu]: %g is neither 0 nor %g / (1 - %g)", what, i, (double)in[i],
                  (double)src[i], (double)p);
        (*kept)++;
    }
}

Test(gcn, dropout_drops_entries_and_rescales_the_rest)
{
    /* With p = 0.5 over a few hundred entries, both outcomes occur (the chance that one does
     * not is about 2^-100 for a fair generator). */
    const float p = 0.5f;
    for (int has_embedding = 0; has_embedding < 2; has_embedding++) {
        net t;
        net_init(&t, 3, WEFT_GCN_ACT_SIGMOID, WEFT_SPARSE_NORM_SYM, has_embedding, true, p);
        forward(&t);
        size_t dropped = 0, kept = 0;
        if (has_embedding)
            count_drops(t.c.in[0], t.p.embedding, N * EMB_DIM, p, &dropped, &kept, "in0");
        else
            count_drops(t.c.x_val, t.x.val, weft_sparse_nnz(&t.x), p, &dropped, &kept,
                        "x_val");
        for (size_t l = 1; l < 3; l++)
            count_drops(t.c.in[l], t.c.h[l], N * t.s.dims[l], p, &dropped, &kept, "in");
        cr_assert(dropped > 0 && kept > 0, "%zu dropped, %zu kept", dropped, kept);
        /* Another seed draws other masks: the output changes. */
        float first[N * N_CLASSES];
        memcpy(first, output(&t), sizeof first);
        weft_rng rng;
        weft_rng_seed(&rng, DROP_SEED + 1);
        weft_gcn_forward(&t.c, &t.s, &t.p, &t.in, p, &rng, 1);
        cr_assert_neq(memcmp(first, output(&t), sizeof first), 0, "masks ignore the seed");
        net_fini(&t);
    }
}

/* ---- attribution ---- */

Test(gcn, attribution_sums_to_the_output_of_every_node)
{
    for (size_t n_layers = 1; n_layers <= 2; n_layers++)
        for (int has_bias = 0; has_bias < 2; has_bias++) {
            net t;
            net_init(&t, n_layers, WEFT_GCN_ACT_RELU, WEFT_SPARSE_NORM_SYM, true, has_bias,
                     0.0f);
            forward(&t);
            size_t last = n_layers - 1, d = N_CLASSES;
            const float *msg = t.c.u[last];
            for (uint32_t v = 0; v < N; v++) {
                float contrib[N * N_CLASSES], out[N_CLASSES];
                size_t rows = weft_gcn_attribute(contrib, out, t.adj.off, t.adj.col, t.adj.val,
                                                 msg, t.p.b[last], d, v);
                cr_assert_eq(rows, t.adj.off[v + 1] - t.adj.off[v], "node %u: rows", v);
                for (size_t j = 0; j < d; j++) {
                    /* out_v = sum_k val[k] msg[col[k]] + b, the last mixing step */
                    double sum = has_bias ? t.p.b[last][j] : 0.0;
                    for (size_t r = 0; r < rows; r++) {
                        uint64_t k = t.adj.off[v] + r;
                        double want = (double)t.adj.val[k] * msg[t.adj.col[k] * d + j];
                        cr_assert(fabs(contrib[r * d + j] - want) <= 1e-6,
                                  "node %u entry %zu: contribution %g, expected %g", v, r,
                                  (double)contrib[r * d + j], want);
                        sum += contrib[r * d + j];
                    }
                    cr_assert(fabs(out[j] - sum) <= 1e-5, "node %u: out %g, sum %g", v,
                              (double)out[j], sum);
                    double fwd = output(&t)[v * d + j];
                    cr_assert(fabs(out[j] - fwd) <= 1e-5 * (1 + fabs(fwd)),
                              "node %u class %zu: attribution gives %g, forward %g", v, j,
                              (double)out[j], fwd);
                }
            }
            net_fini(&t);
        }
}

/* ---- shapes and parameters ---- */

Test(gcn, params_views_tile_the_slab)
{
    /* Block sizes by the header's shapes: embedding 7x4 = 28; W0 4x4 = 16, b0 4;
     * W1 4x3 = 12, b1 3; W2 3x3 = 9, b2 3: 75 floats, laid end to end in the slab. */
    net t;
    net_init(&t, 3, WEFT_GCN_ACT_RELU, WEFT_SPARSE_NORM_SYM, true, true, 0.0f);
    cr_assert_eq(t.p.n, 75);
    block blocks[1 + 2 * WEFT_GCN_MAX_LAYERS];
    size_t n_blocks = blocks_of(&t, blocks), total = 0;
    bool *used = calloc(t.p.n, sizeof *used);
    cr_assert_not_null(used);
    for (size_t b = 0; b < n_blocks; b++) {
        cr_assert(blocks[b].p >= t.p.slab && blocks[b].p + blocks[b].n <= t.p.slab + t.p.n,
                  "%s outside the slab", blocks[b].name);
        for (size_t i = 0; i < blocks[b].n; i++) {
            size_t at = (size_t)(blocks[b].p + i - t.p.slab);
            cr_assert_not(used[at], "%s overlaps another block", blocks[b].name);
            used[at] = true;
        }
        total += blocks[b].n;
    }
    cr_assert_eq(total, t.p.n);
    free(used);
    net_fini(&t);
}

Test(gcn, params_glorot_bounds)
{
    /* Glorot & Bengio 2010: W_l uniform in +-sqrt(6 / (in + out)); biases zero; embedding in
     * +-sqrt(3 / dims[0]). */
    net t;
    net_init(&t, 2, WEFT_GCN_ACT_RELU, WEFT_SPARSE_NORM_SYM, true, true, 0.0f);
    weft_rng rng;
    weft_rng_seed(&rng, 5);
    weft_gcn_params_glorot(&t.p, &t.s, &rng);
    double e_bound = sqrt(3.0 / EMB_DIM), e_max = 0;
    for (size_t i = 0; i < N * EMB_DIM; i++)
        e_max = fmax(e_max, fabs(t.p.embedding[i]));
    cr_assert(e_max > 0 && e_max <= e_bound, "embedding max %g, bound %g", e_max, e_bound);
    for (size_t l = 0; l < 2; l++) {
        double bound = sqrt(6.0 / (double)(t.s.dims[l] + t.s.dims[l + 1])), w_max = 0;
        for (size_t i = 0; i < t.s.dims[l] * t.s.dims[l + 1]; i++)
            w_max = fmax(w_max, fabs(t.p.w[l][i]));
        cr_assert(w_max > 0 && w_max <= bound, "W%zu max %g, bound %g", l, w_max, bound);
        for (size_t j = 0; j < t.s.dims[l + 1]; j++)
            cr_assert_eq(t.p.b[l][j], 0.0f, "b%zu[%zu]", l, j);
    }
    net_fini(&t);
}

Test(gcn, shape_check_rejects_bad_shapes)
{
    weft_gcn_shape ok = { .n_nodes = 3, .n_layers = 2, .dims = { 4, 2, 3 },
                          .has_bias = true, .act = WEFT_GCN_ACT_RELU };
    cr_assert_eq(weft_gcn_shape_check(&ok, NULL), WEFT_OK);
    weft_gcn_shape s = ok;
    s.n_layers = 0;
    cr_assert_eq(weft_gcn_shape_check(&s, NULL), WEFT_ERR_INVALID, "no layer");
    s = ok;
    s.n_layers = WEFT_GCN_MAX_LAYERS + 1;
    cr_assert_eq(weft_gcn_shape_check(&s, NULL), WEFT_ERR_INVALID, "too many layers");
    s = ok;
    s.dims[1] = 0;
    cr_assert_eq(weft_gcn_shape_check(&s, NULL), WEFT_ERR_INVALID, "zero width");
    s = ok;
    s.act = (weft_gcn_act)0;
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_gcn_shape_check(&s, &err), WEFT_ERR_INVALID, "unknown activation");
    cr_assert_eq(err.code, WEFT_ERR_INVALID);
}

Test(gcn, activation_names_round_trip)
{
    static const weft_gcn_act all[] = { WEFT_GCN_ACT_RELU, WEFT_GCN_ACT_SIGMOID,
                                        WEFT_GCN_ACT_LINEAR };
    static const char *const names[] = { "relu", "sigmoid", "linear" };
    for (size_t i = 0; i < 3; i++) {
        weft_gcn_act v = 0;
        cr_assert_str_eq(weft_gcn_act_name(all[i]), names[i]);
        cr_assert(weft_gcn_act_parse(names[i], &v));
        cr_assert_eq(v, all[i]);
    }
    weft_gcn_act v = WEFT_GCN_ACT_RELU;
    cr_assert_not(weft_gcn_act_parse("tanh", &v));
}
