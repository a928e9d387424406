/* weft: approximate top-k indexes over an embedding matrix, each followed by an exact
 * re-scoring, so that every score returned is the exact one (weft_kernel_dot, as in
 * include/weft/topk.h) and only the choice of candidates is approximate.
 *
 * Two indexes:
 *   int8  every row as d signed 8-bit codes and one float scale (row = scale x codes), a
 *         quarter of the float32 bytes; a query scans all codes, keeps the best
 *         k x oversample rows by approximate score and re-scores those exactly.
 *   ivf   the rows in partitions ("lists") found by k-means; a query scores the partitions'
 *         centroids, scans the int8 codes of the best nprobe lists only, and re-scores the
 *         best k x oversample exactly. For maximum inner product search, k-means runs on the
 *         rows augmented with one coordinate sqrt(M^2 - |x|^2) (M the largest row norm), so
 *         that the nearest centroid in that space is the one of the largest inner product
 *         (Bachrach et al. 2014, "Speeding up the Xbox recommender system using a Euclidean
 *         transformation for inner-product spaces").
 *   ivf with product-quantised lists: the same lists, each row coded as its residual from
 *         its list's centroid in 4 bits per subspace of 2 values (16 codewords a subspace,
 *         k-means on the residuals: Jegou, Douze and Schmid 2011, "Product quantization for
 *         nearest neighbor search"), an eighth of the int8 codes' bytes at d <= 1024; a query
 *         looks its 16 products per subspace up in byte tables, 64 rows at once with a byte
 *         shuffle (the "fast scan" of Andre, Kermarrec and Le Scouarnec 2015, "Cache locality
 *         is not enough: high-performance nearest neighbor search with product quantization
 *         fast scan"), and re-scores the best k x oversample exactly. For rows without
 *         cluster structure, where nprobe must come near every list, this is what makes the
 *         clustered index fast.
 * A query vector is anything scored by inner product with the rows: for DistMult and ComplEx
 * it already folds in the relation and direction (weft_model_query), so one index serves
 * them all. */
#ifndef WEFT_INDEX_H
#define WEFT_INDEX_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/topk.h"

/** Candidates a query keeps: neither excluded nor, with @p type_of, of another type. */
typedef struct weft_index_filter {
    const weft_topk_exclude *ex;    /**< may be NULL */
    const uint32_t *type_of;        /**< (n) node types, or NULL: every type */
    uint32_t type;                  /**< the type kept when type_of is set */
} weft_index_filter;

/** The codes' layout: rows in blocks of WEFT_INDEX_BLOCK_ROWS, each block as groups of
 *  WEFT_INDEX_GROUP consecutive values, a group holding those values of every row of the
 *  block side by side (64 bytes), so that one AVX-512 VNNI product adds four values of 16
 *  rows at once and a block's 16 sums need no reduction across lanes. Value j of row i is
 *  at weft_index_code_at(d, i, j); the padding (rows past n in the last block, values past
 *  d in the last group) holds 128, the code of zero. */
#define WEFT_INDEX_BLOCK_ROWS 16
#define WEFT_INDEX_GROUP 4

/** Name of this layout in a snapshot's manifest ("link"."index"."code_layout"). */
#define WEFT_INDEX_CODE_LAYOUT "blocks16x4"

/** Groups of a row of @p d values. */
static inline size_t weft_index_groups(size_t d)
{
    return (d + WEFT_INDEX_GROUP - 1) / WEFT_INDEX_GROUP;
}

/** Blocks of @p n rows. */
static inline size_t weft_index_blocks(size_t n)
{
    return (n + WEFT_INDEX_BLOCK_ROWS - 1) / WEFT_INDEX_BLOCK_ROWS;
}

/** Bytes of one block of rows of @p d values. */
static inline size_t weft_index_block_bytes(size_t d)
{
    return weft_index_groups(d) * WEFT_INDEX_GROUP * WEFT_INDEX_BLOCK_ROWS;
}

/** Bytes of the codes of @p n rows of @p d values, padding included. */
static inline size_t weft_index_code_bytes(size_t n, size_t d)
{
    return weft_index_blocks(n) * weft_index_block_bytes(d);
}

/** Where value @p j of row @p i lies in the codes of rows of @p d values. */
static inline size_t weft_index_code_at(size_t d, size_t i, size_t j)
{
    return (i / WEFT_INDEX_BLOCK_ROWS) * weft_index_block_bytes(d)
           + (j / WEFT_INDEX_GROUP) * (WEFT_INDEX_GROUP * WEFT_INDEX_BLOCK_ROWS)
           + (i % WEFT_INDEX_BLOCK_ROWS) * WEFT_INDEX_GROUP + j % WEFT_INDEX_GROUP;
}

/** Codes of the rows: code + 128 stored as a byte (offset binary), so that the byte times a
 *  signed query byte is what AVX-512 VNNI multiplies. */
typedef struct weft_index_codes {
    size_t n, d;
    const uint8_t *code;            /**< weft_index_code_bytes(n, d), in the layout above:
                                         round(x / scale) + 128, in [1, 255] */
    const float *scale;             /**< (n): max |x_j| / 127, or 0 for a zero row */
} weft_index_codes;

/**
 * Codes of @p e (n x d) into @p code (weft_index_code_bytes(n, d) bytes, in the blocked
 * layout, padding included) and @p scale (n floats). A row with a non-finite value gets
 * scale NaN and is never a candidate of the index paths (a broken model; /v1/health reports
 * such rows).
 */
void weft_index_encode(const float *e, size_t n, size_t d, uint8_t *code, float *scale);

/**
 * The best @p k rows of @p e for query @p q through the int8 codes @p c of the same rows:
 * the best k x @p oversample rows by approximate score that pass @p f, re-scored exactly.
 * @param e   the float rows (n x d) for the exact scores
 * @param f   may be NULL (every row)
 * @param id, score  k entries each, best first, scores as weft_kernel_dot gives them
 * @param n_out  entries written
 * @return WEFT_OK or WEFT_ERR_NOMEM (candidate buffers of k x oversample entries)
 * Threads: reentrant. Cost: one pass over the codes (n x d bytes and the padding); with
 * AVX-512 VNNI 64 products per instruction.
 */
weft_err weft_index_int8_search(const weft_index_codes *c, const float *e, const float *q,
                                size_t k, size_t oversample, const weft_index_filter *f,
                                uint32_t *id, float *score, size_t *n_out, weft_error *err);

/** One query of weft_index_int8_search_many: its inputs, and its answer once it returns. */
typedef struct weft_index_query {
    const float *q;                 /**< (d) */
    size_t k;
    const weft_index_filter *f;     /**< may be NULL */
    uint32_t *id;                   /**< (k) out, best first */
    float *score;                   /**< (k) out */
    size_t n_out;                   /**< out: entries written */
} weft_index_query;

/**
 * weft_index_int8_search for @p m queries in one pass over the codes: each chunk of rows
 * (about 256 KiB of codes) is scanned for every query while it is in cache, so that m
 * queries read the codes from memory once. Each query gets the list a search of its own
 * gives (its candidates are offered in the same order).
 * @return WEFT_OK or WEFT_ERR_NOMEM (then no answer is to be used)
 * Threads: reentrant.
 */
weft_err weft_index_int8_search_many(const weft_index_codes *c, const float *e,
                                     size_t oversample, weft_index_query *qs, size_t m,
                                     weft_error *err);

/**
 * Lloyd's k-means: @p iters rounds of "assign every row of @p x (n x d) to its nearest
 * centroid (squared Euclidean distance, ties to the lower index), then move each centroid
 * to the mean of its rows; a centroid without rows stays where it was" (the rounds of
 * scipy.cluster.vq.kmeans2 with minit='matrix', missing='warn').
 * @param centroids  (k x d) the starting centroids in, the final ones out
 * @param assign     (n) the last assignment out, or NULL
 * @return WEFT_OK or WEFT_ERR_NOMEM
 */
weft_err weft_index_kmeans(const float *x, size_t n, size_t d, size_t k, size_t iters,
                           float *centroids, uint32_t *assign, weft_error *err);

/** How a clustered index codes the rows of its lists. */
typedef enum weft_index_list_codes {
    WEFT_INDEX_LISTS_INT8 = 0,      /**< weft_index_codes above, d bytes a row */
    WEFT_INDEX_LISTS_PQ4 = 1        /**< weft_index_pq below, n_sub / 2 bytes a row */
} weft_index_list_codes;

/** The product-quantised lists' layout: each list starts a block of
 *  WEFT_INDEX_PQ_BLOCK_ROWS rows (rows past its end are padding, code 0); a block is
 *  n_sub / 4 groups of 64 bytes, and byte h x 32 + r of group g holds row r's codes of
 *  subspaces 4g + 2h (low 4 bits) and 4g + 2h + 1 (high 4 bits), so that one 64-byte
 *  shuffle looks up one subspace of 32 rows in each half. */
#define WEFT_INDEX_PQ_BLOCK_ROWS 32
#define WEFT_INDEX_PQ_CODEWORDS 16

/** Name of this layout in a snapshot's manifest ("link"."index"."code_layout"). */
#define WEFT_INDEX_PQ_CODE_LAYOUT "pq4-blocks32x4"

/** Values per subspace of rows of @p d values: 2, or more above d = 1024 so that there are
 *  at most 512 subspaces (a row's table sum, at most 127 per subspace, fits 16 bits). */
static inline size_t weft_index_pq_sub_dims(size_t d)
{
    return d <= 1024 ? 2 : (d + 511) / 512;
}

/** Subspaces of rows of @p d values: ceil(d / sub_dims), rounded up to a multiple of 4 (the
 *  ones past the row's values have one codeword, zero). */
static inline size_t weft_index_pq_subspaces(size_t d)
{
    size_t s = weft_index_pq_sub_dims(d), m = (d + s - 1) / s;
    return (m + 3) & ~(size_t)3;
}

/** Bytes of one block of product-quantised rows with @p n_sub subspaces. */
static inline size_t weft_index_pq_block_bytes(size_t n_sub)
{
    return n_sub / 2 * WEFT_INDEX_PQ_BLOCK_ROWS;
}

/** Product-quantised lists (the layout above); views. */
typedef struct weft_index_pq {
    size_t n_sub, sub_dims;
    const float *codebook;          /**< (n_sub, 16, sub_dims): codeword j of subspace m at
                                         (m x 16 + j) x sub_dims */
    const uint64_t *list_block;     /**< (n_lists + 1): list l is blocks list_block[l] ..
                                         [l + 1], ceil(its rows / 32) of them */
    const uint8_t *code;            /**< list_block[n_lists] blocks */
} weft_index_pq;

/** A clustered index: views into its arrays (a snapshot's blobs, or weft_index_ivf_build's). */
typedef struct weft_index_ivf {
    size_t n, d, n_lists;
    weft_index_list_codes list_codes;
    /** (n_lists, d + 1): each centroid's first d coordinates, then -|augmented centroid|^2
     *  / 2M (M the largest row norm), so that its inner product with (q, |q|) ranks the
     *  lists for query q: the nearest centroids to the query scaled to norm M, in the
     *  augmented space where every row has norm M (the order does not change with |q|, as
     *  the order of the rows does not) */
    const float *centroid;
    const uint64_t *list_off;       /**< (n_lists + 1): list l is rows list_off[l] .. [l + 1] */
    const uint32_t *row_id;         /**< (n): the row of e at each position of the lists */
    weft_index_codes codes;         /**< int8 lists: the codes in list order (row p of the
                                         codes is row row_id[p] of e); a block may span two
                                         lists */
    weft_index_pq pq;               /**< product-quantised lists: their codes, in list order */
} weft_index_ivf;

/** What weft_index_ivf_build allocates; free with weft_index_ivf_fini. */
typedef struct weft_index_ivf_arrays {
    weft_index_ivf ivf;             /**< views into the arrays below */
    float *centroid, *scale;
    uint64_t *list_off;
    uint32_t *row_id;
    uint8_t *code;
    float *codebook;
    uint64_t *list_block;
    uint8_t *pq_code;
} weft_index_ivf_arrays;

/**
 * Build a clustered index of @p e (n x d) with @p n_lists lists (0: 4 sqrt(n) for int8
 * lists, sqrt(n) / 2 for product-quantised ones; at least 1, at most n): k-means (@p iters
 * rounds) on a sample of at most 64 rows per list drawn with @p seed, starting from distinct
 * sample rows, on the augmented rows (see the top of this file); then every row goes to its
 * nearest centroid and is coded as @p codes says. Product-quantised lists: the codewords of
 * each subspace by k-means (20 rounds) on the residuals of at most 32,768 rows drawn with
 * @p seed, starting from 16 of them; a row with a non-finite value is coded as its centroid
 * (its exact score, NaN, keeps it out of every answer).
 * @return WEFT_OK, WEFT_ERR_INVALID (n == 0 or n >= 2^32), WEFT_ERR_NOMEM
 */
weft_err weft_index_ivf_build(const float *e, size_t n, size_t d, size_t n_lists, size_t iters,
                              uint64_t seed, size_t n_threads, weft_index_list_codes codes,
                              weft_index_ivf_arrays *out, weft_error *err);

/** Free what weft_index_ivf_build allocated; a zeroed struct does nothing. */
void weft_index_ivf_fini(weft_index_ivf_arrays *a);

/**
 * The best @p k rows of @p e for @p q through @p ix: the @p nprobe lists whose centroids
 * score best with (q, |q|) (an exact scan, weft_topk_scan), their codes scanned, the best
 * k x @p oversample that pass @p f re-scored exactly. Same outputs and contract as
 * weft_index_int8_search. Product-quantised lists: row x of list l scores
 * q.c_l + sum_m T_m[code_m(x)], T_m the query's products with subspace m's codewords, each
 * table rounded to 7 bits on one step for all (the largest table range / 127).
 */
weft_err weft_index_ivf_search(const weft_index_ivf *ix, const float *e, const float *q,
                               size_t k, size_t nprobe, size_t oversample,
                               const weft_index_filter *f, uint32_t *id, float *score,
                               size_t *n_out, weft_error *err);

/** True when the int8 scans use AVX-512 VNNI on this CPU (false: portable loops). */
bool weft_index_is_native(void);

/** True when the product-quantised scans use AVX-512BW byte shuffles on this CPU. */
bool weft_index_pq_is_native(void);

/** Allow (true, the default) or forbid the VNNI and AVX-512BW kernels, process-wide; each
 *  gives the same integer sums as its portable loop, so the same answers. For tests and
 *  side-by-side measurements. Thread-safe. */
void weft_index_allow_native(bool allow);

#endif
