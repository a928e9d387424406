/* weft: sparse float matrices in compressed sparse rows, and the products GCN training and
 * label propagation spend their time in. */
#ifndef WEFT_SPARSE_H
#define WEFT_SPARSE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"

/**
 * An n_rows x n_cols matrix: row i holds entries off[i] .. off[i+1]-1 of col[] and val[],
 * columns ascending and unique. Owned arrays; release with weft_sparse_fini().
 */
typedef struct weft_sparse {
    size_t n_rows, n_cols;
    uint64_t *off;   /**< n_rows + 1 */
    uint32_t *col;   /**< off[n_rows] */
    float *val;      /**< off[n_rows] */
} weft_sparse;

/** Release @p a's arrays and zero it; NULL does nothing. */
void weft_sparse_fini(weft_sparse *a);

/** Number of stored entries. */
static inline size_t weft_sparse_nnz(const weft_sparse *a) { return (size_t)a->off[a->n_rows]; }

/**
 * The transpose of @p a. When @p from is not NULL it receives (caller frees) for each entry k
 * of the transpose the index of the entry of @p a it came from, so that values computed per
 * entry of @p a (a dropout mask) can be read through the transpose.
 * @return WEFT_OK, WEFT_ERR_NOMEM. Cost: O(nnz + n_cols).
 */
weft_err weft_sparse_transpose(const weft_sparse *a, weft_sparse *out, uint64_t **from,
                               weft_error *err);

/**
 * y = A x: @p y (n_rows, d) = @p a (n_rows, n_cols) times @p x (n_cols, d), row-major,
 * overwriting y. @p val replaces a->val when not NULL (same length). Rows are split over
 * @p n_threads threads by their entry counts when the product is large enough to pay for
 * them; each row is summed in entry order, so the result does not depend on the thread count.
 */
void weft_sparse_mm(float *y, const weft_sparse *a, const float *val, const float *x, size_t d,
                    size_t n_threads);

/** How weft_sparse_adjacency() normalises A + I. */
typedef enum weft_sparse_norm {
    WEFT_SPARSE_NORM_SYM = 1,   /**< D^-1/2 (A + I) D^-1/2 (Kipf & Welling 2017) */
    WEFT_SPARSE_NORM_ROW = 2,   /**< D^-1 (A + I): each row a mean over self and neighbours */
    WEFT_SPARSE_NORM_NONE = 3   /**< the 0/1 matrix A + I itself */
} weft_sparse_norm;

/** "sym", "row", "none"; parse returns false when unknown. */
const char *weft_sparse_norm_name(weft_sparse_norm v);
bool weft_sparse_norm_parse(const char *s, weft_sparse_norm *out);

/**
 * The normalised adjacency A' of the nodes 0 .. @p n-1 joined by @p e[0..m): relations are
 * ignored, every edge counts in both directions (A is symmetrised), repeats count once, and
 * when @p has_self_loops each node gets its self-loop (A + I; the input's own self-loops are
 * then the same entry). D is the row sum of A (+ I).
 * @param n_one_way  out, may be NULL: node pairs linked in one direction only by @p e (a
 *                   directed graph was symmetrised when this is not 0)
 * @return WEFT_OK, WEFT_ERR_INVALID (an id >= n), WEFT_ERR_NOMEM. Cost: O(m log m + n).
 */
weft_err weft_sparse_adjacency(const weft_triple *e, size_t m, size_t n, weft_sparse_norm norm,
                               bool has_self_loops, weft_sparse *out, size_t *n_one_way,
                               weft_error *err);

#endif
