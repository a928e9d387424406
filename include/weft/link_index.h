/* weft: the approximate index of a link model's entity rows (include/weft/index.h) as a
 * snapshot holds it: built and measured when the snapshot is written, stored as blobs named
 * "index.*" beside the model, described in the manifest's "link"."index", and read back for
 * serving.
 *
 * The measure is recall@10 against the exact scan on a fixed probe set: up to
 * WEFT_LINK_INDEX_PROBES anchors drawn with a fixed seed, each asked with a relation (in
 * turn) and a direction (alternating), as the service asks (weft_model_query). For the
 * clustered index, nprobe (lists scanned per query) is, unless given, the smallest power of
 * two whose recall reaches halfway from the floor to 1 (0.975 for the default floor 0.95). */
#ifndef WEFT_LINK_INDEX_H
#define WEFT_LINK_INDEX_H

#include <jansson.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/index.h"
#include "weft/model.h"
#include "weft/snapshot.h"
#include "weft/store.h"

/** Anchors in the probe set (fewer when the model has fewer entities). */
#define WEFT_LINK_INDEX_PROBES 200

/** Which index serves a snapshot's top-k queries. */
typedef enum weft_link_index_kind {
    WEFT_LINK_INDEX_EXACT = 0,   /**< none: every query scans every row */
    WEFT_LINK_INDEX_INT8 = 1,
    WEFT_LINK_INDEX_IVF = 2,     /**< k-means lists of int8 codes */
    WEFT_LINK_INDEX_IVF_PQ = 3   /**< k-means lists of 4-bit product codes */
} weft_link_index_kind;

/** "exact", "int8", "ivf", "ivf-pq"; NULL for an unknown kind. */
const char *weft_link_index_kind_name(weft_link_index_kind kind);

/** Parse a kind name. @return true and *@p out when known. */
bool weft_link_index_kind_parse(const char *name, weft_link_index_kind *out);

/** True for the clustered kinds (ivf, ivf-pq): lists, nprobe, weft_index_ivf_search. */
static inline bool weft_link_index_is_clustered(weft_link_index_kind kind)
{
    return kind == WEFT_LINK_INDEX_IVF || kind == WEFT_LINK_INDEX_IVF_PQ;
}

/** What to build. */
typedef struct weft_link_index_settings {
    weft_link_index_kind kind;
    size_t oversample;       /**< candidates re-scored per result (>= 1; default 4, ivf-pq 16) */
    size_t n_lists;          /**< ivf: lists (0: 4 sqrt(n); ivf-pq: sqrt(n) / 2) */
    size_t nprobe;           /**< ivf: lists scanned per query (0: tuned on the probe set) */
    size_t iters;            /**< ivf: k-means rounds (default 10) */
    double recall_floor;     /**< the gate refuses an index measured below it (default 0.95) */
    uint64_t seed;           /**< ivf: the k-means sample and starting centroids */
    size_t n_threads;
} weft_link_index_settings;

/** The defaults above, for @p kind. */
weft_link_index_settings weft_link_index_defaults(weft_link_index_kind kind);

/** A built index: owns its arrays. */
typedef struct weft_link_index {
    weft_link_index_kind kind;
    size_t n, d, oversample, nprobe;
    double recall;           /**< recall@10 on the probe set */
    size_t n_probes;         /**< queries it was measured on */
    double build_seconds;    /**< building and tuning, without the measuring */
    size_t bytes;            /**< what its blobs add to the snapshot */
    double recall_floor;
    uint8_t *code;           /**< int8: the rows' codes in row order (include/weft/index.h) */
    float *scale;
    weft_index_ivf_arrays ivf;
} weft_link_index;

/**
 * Build the index @p s asks for over the entity rows of @p m and measure it (kind EXACT
 * builds nothing and succeeds). Free with weft_link_index_fini.
 * @return WEFT_OK, WEFT_ERR_INVALID (settings), WEFT_ERR_NOMEM
 */
weft_err weft_link_index_build(const weft_link_model *m, const weft_link_index_settings *s,
                               weft_link_index *out, weft_error *err);

/** Free what weft_link_index_build allocated; a zeroed struct does nothing. */
void weft_link_index_fini(weft_link_index *ix);

/**
 * The manifest record of @p ix: {"kind", "code_layout", "oversample", ["lists", "nprobe",]
 * ["subspaces", "subspace_dims",] "recall_at_10", "recall_floor", "probe_queries",
 * "build_seconds", "bytes"}: lists and nprobe for the clustered kinds, subspaces for ivf-pq. A new reference, or NULL when
 * out of memory.
 */
json_t *weft_link_index_json(const weft_link_index *ix);

/**
 * Write @p ix's blobs into @p w and its record into @p manifest's "link" object as "index"
 * (call after weft_snapshot_put_link). Kind EXACT writes nothing.
 * @return WEFT_OK and the codes of weft_store_writer_put()
 */
weft_err weft_link_index_put(weft_store_writer *w, json_t *manifest, const weft_link_index *ix,
                             weft_error *err);

/** A snapshot's index as views into its map. */
typedef struct weft_link_index_view {
    weft_link_index_kind kind;   /**< EXACT when the snapshot holds none */
    size_t oversample, nprobe;
    double recall;
    weft_index_codes codes;      /**< int8 */
    weft_index_ivf ivf;          /**< ivf, ivf-pq */
} weft_link_index_view;

/**
 * Read @p snap's index for link model @p v (kind EXACT when it holds none), checking every
 * blob's shape against the model and the lists' offsets and ids against their bounds.
 * @return WEFT_OK or WEFT_ERR_CORRUPT
 */
weft_err weft_link_index_view_of(const weft_snapshot *snap, const weft_link_view *v,
                                 weft_link_index_view *out, weft_error *err);

#endif
