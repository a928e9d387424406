/* weft: graph convolutional network layers (Kipf & Welling 2017): forward and backward
 * passes over a normalised adjacency, with dropout, and the exact attribution of a node's
 * output to its neighbours in the last mixing step. */
#ifndef WEFT_MODEL_GCN_H
#define WEFT_MODEL_GCN_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/rng.h"
#include "weft/sparse.h"

/** Most layers a GCN may have. */
#define WEFT_GCN_MAX_LAYERS 8

/** Activation between layers (the last layer is always linear). */
typedef enum weft_gcn_act {
    WEFT_GCN_ACT_RELU = 1,
    WEFT_GCN_ACT_SIGMOID = 2,
    WEFT_GCN_ACT_LINEAR = 3
} weft_gcn_act;

/** "relu", "sigmoid", "linear"; parse returns false when unknown. */
const char *weft_gcn_act_name(weft_gcn_act v);
bool weft_gcn_act_parse(const char *s, weft_gcn_act *out);

/**
 * The shape of a GCN. With input H_0 (the given sparse features X, or a learned dense
 * embedding matrix E), layer l = 0 .. n_layers-1 computes
 *     U_l = drop(H_l) W_l,   Z_l = A' U_l + b_l,   H_{l+1} = act(Z_l)
 * and the output is Z_{n_layers-1} (no activation): class logits, or link embeddings.
 * W_l is (dims[l], dims[l+1]); drop() is inverted dropout (kept entries scaled by 1/(1-p)),
 * on the non-zero entries only for sparse features, and the identity outside training.
 */
typedef struct weft_gcn_shape {
    size_t n_nodes;
    size_t n_layers;                          /**< 1 .. WEFT_GCN_MAX_LAYERS */
    size_t dims[WEFT_GCN_MAX_LAYERS + 1];     /**< dims[0]: input width; dims[n_layers]: output */
    bool has_embedding;                       /**< input is a learned (n_nodes, dims[0]) matrix */
    bool has_bias;
    weft_gcn_act act;
} weft_gcn_shape;

/** Check @p s: layer count, widths >= 1, activation. @return WEFT_OK, WEFT_ERR_INVALID */
weft_err weft_gcn_shape_check(const weft_gcn_shape *s, weft_error *err);

/**
 * Parameters (or their gradients, or optimiser moments: the same layout). One slab; the
 * pointers are views into it.
 */
typedef struct weft_gcn_params {
    float *slab;
    size_t n;                             /**< floats in the slab */
    float *embedding;                     /**< (n_nodes, dims[0]); NULL with given features */
    float *w[WEFT_GCN_MAX_LAYERS];        /**< (dims[l], dims[l+1]) */
    float *b[WEFT_GCN_MAX_LAYERS];        /**< (dims[l+1]); NULL without bias */
} weft_gcn_params;

/** Allocate zeroed parameters of shape @p s. @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID */
weft_err weft_gcn_params_init(weft_gcn_params *p, const weft_gcn_shape *s, weft_error *err);
/** Release @p p and zero it; NULL does nothing. */
void weft_gcn_params_fini(weft_gcn_params *p);
/**
 * Glorot & Bengio 2010 uniform initialisation of every W (bounds +-sqrt(6 / (in + out))),
 * zero biases, and an embedding uniform in +-sqrt(3 / dims[0]) (variance 1 / dims[0]).
 */
void weft_gcn_params_glorot(weft_gcn_params *p, const weft_gcn_shape *s, weft_rng *rng);

/**
 * Everything one forward pass keeps for its backward pass, plus the backward workspace.
 * Allocated once per shape and input; nothing allocates in the training loop.
 */
typedef struct weft_gcn_cache {
    float *slab;
    float *in[WEFT_GCN_MAX_LAYERS];      /**< drop(H_l), (n, dims[l]); in[0] NULL for features */
    float *keep[WEFT_GCN_MAX_LAYERS];    /**< dropout scale per entry of in[l] (0 or 1/(1-p)) */
    float *u[WEFT_GCN_MAX_LAYERS];       /**< U_l, (n, dims[l+1]) */
    float *h[WEFT_GCN_MAX_LAYERS + 1];   /**< h[l+1] = H_{l+1} (after act); h[n_layers]: output */
    float *x_val;                        /**< features: values after dropout, (nnz) */
    float *x_val_t;                      /**< the same read through the transpose, (nnz) */
    float *work_a, *work_b;              /**< (n, max width) each */
} weft_gcn_cache;

/**
 * Allocate the cache for shape @p s and, with given features, @p x (NULL with an embedding).
 * @return WEFT_OK, WEFT_ERR_NOMEM
 */
weft_err weft_gcn_cache_init(weft_gcn_cache *c, const weft_gcn_shape *s, const weft_sparse *x,
                             weft_error *err);
/** Release @p c and zero it; NULL does nothing. */
void weft_gcn_cache_fini(weft_gcn_cache *c);

/**
 * The graph a GCN mixes over: A' and its transpose (the same entries for the symmetric
 * normalisation), and for given features X and the transpose of X with the entry map.
 * Borrowed by forward and backward for the call.
 */
typedef struct weft_gcn_input {
    const weft_sparse *adj;       /**< A', (n, n) */
    const weft_sparse *adj_t;     /**< A'^T */
    const weft_sparse *x;         /**< features (n, dims[0]); NULL with an embedding */
    const weft_sparse *x_t;       /**< X^T */
    const uint64_t *x_t_from;     /**< entry k of x_t is entry x_t_from[k] of x */
} weft_gcn_input;

/**
 * Forward pass: fills @p c (c->h[s->n_layers] is the output, (n, dims[n_layers])).
 * @param dropout  probability of dropping an entry of each layer's input, in [0, 1); used
 *                 only when @p rng is not NULL (training); NULL: evaluation, no dropout
 */
void weft_gcn_forward(weft_gcn_cache *c, const weft_gcn_shape *s, const weft_gcn_params *p,
                      const weft_gcn_input *in, float dropout, weft_rng *rng, size_t n_threads);

/**
 * Backward pass of the last forward pass through @p c: adds (+=) dLoss/dparameters into
 * @p g given @p dout = dLoss/d output, (n, dims[n_layers]). The caller zeroes @p g once per
 * step. @p dout is clobbered (used as workspace).
 */
void weft_gcn_backward(weft_gcn_params *g, weft_gcn_cache *c, float *dout,
                       const weft_gcn_shape *s, const weft_gcn_params *p,
                       const weft_gcn_input *in, size_t n_threads);

/**
 * Exact attribution of node @p v's output in the last mixing step: out_v = sum over the
 * entries k of row v of A' of val[k] * msg[col[k]] + bias, where msg = U_{n_layers-1}
 * (the last hidden layer times the last weights). Writes @p contrib (row length of v, @p d)
 * with val[k] * msg[col[k]] for each entry k of the row, in row order, and @p out (d) with
 * their sum plus @p bias (may be NULL).
 * @return the number of entries of row v (rows of @p contrib written)
 */
size_t weft_gcn_attribute(float *contrib, float *out, const uint64_t *off, const uint32_t *col,
                          const float *val, const float *msg, const float *bias, size_t d,
                          uint32_t v);

#endif
