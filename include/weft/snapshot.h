/* weft: a stored snapshot opened for reading. Blobs are read in place from the LMDB map
 * (zero copy) through one read-only transaction that lives as long as the snapshot; only
 * values small enough to share a page (under about 2 KB, which LMDB stores unaligned) are
 * copied once at open, so that every typed read is aligned. */
#ifndef WEFT_SNAPSHOT_H
#define WEFT_SNAPSHOT_H

#include <jansson.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/names.h"
#include "weft/sparse.h"
#include "weft/train_gcn.h"
#include "weft/store.h"
#include "weft/types.h"

/** One blob as stored: data points into the map, read-only. */
typedef struct weft_blob {
    const void *data;
    weft_dtype dtype;
    size_t ndim;
    size_t shape[WEFT_BLOB_MAX_DIMS];
    size_t nbytes;
    uint32_t crc32;
} weft_blob;

/** A loaded snapshot. Opaque, reference-counted. */
typedef struct weft_snapshot weft_snapshot;

/**
 * Open @p version of @p s: begin a read transaction, read the manifest and every blob it
 * lists, check each blob's header against the manifest and its CRC-32, then pre-fault the
 * pages (a read pass) so that no later reader pays for page faults.
 * @param out  on success a snapshot holding one reference; weft_snapshot_release() it
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND, WEFT_ERR_CORRUPT (checksum, header or manifest
 *         mismatch: the message names the blob), WEFT_ERR_STORE, WEFT_ERR_NOMEM
 * Threads: call from one thread per store at a time (the loader). Cost: O(size) for the CRCs.
 */
weft_err weft_snapshot_open(weft_store *s, uint64_t version, weft_snapshot **out,
                            weft_error *err);

/** Take another reference to @p snap (atomic); returns @p snap. */
weft_snapshot *weft_snapshot_acquire(weft_snapshot *snap);

/**
 * Drop a reference; the last one ends the read transaction and frees the snapshot. Every
 * pointer obtained from it is invalid afterwards. NULL does nothing. Any thread.
 */
void weft_snapshot_release(weft_snapshot *snap);

/** Version of @p snap. */
uint64_t weft_snapshot_version(const weft_snapshot *snap);

/** Manifest of @p snap; borrowed, valid until the last release; never modify it. */
const json_t *weft_snapshot_manifest(const weft_snapshot *snap);

/** Find blob @p name. @return true and *@p out when present. Pure memory, any thread. */
bool weft_snapshot_blob(const weft_snapshot *snap, const char *name, weft_blob *out);

/**
 * The link model of a snapshot as typed read-only views into the map. Pointers are valid
 * until the snapshot's last release. The CSR pointer members are not const only because
 * weft_csr is shared with the builder: never write through them.
 */
typedef struct weft_link_view {
    weft_link_kind kind;
    size_t n_nodes, n_relations, dim;   /**< n_relations: as named (reciprocals not counted) */
    weft_names_view nodes;
    weft_names_view relations;
    const float *entity;    /**< (n_nodes, dim); the same as model.entity */
    weft_link_model model;  /**< the parameters, for weft_model_query / weft_eval_model_scores */
    weft_csr known_out;     /**< every known link by source */
    weft_csr known_in;      /**< every known link by target */
    bool has_self_loops;    /**< the known graph holds self-loops (else self is never a candidate) */
    bool is_probability;    /**< scores pass through the logistic function to a probability */
    const float *state;     /**< (n_nodes + relation rows): the optimiser state of each row
                                 when training ended (weft_link_params.state), for a warm
                                 start; NULL when the snapshot keeps none */
} weft_link_view;

/**
 * Fill @p out from @p snap's blobs, checking shapes against each other and the name tables
 * (weft_names_check) and the CSR offsets and ids against their bounds.
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND (no link model), WEFT_ERR_CORRUPT
 */
weft_err weft_snapshot_link_view(const weft_snapshot *snap, weft_link_view *out,
                                 weft_error *err);

/**
 * Write the blobs of a link model into snapshot writer @p w: the node and relation name
 * tables with their hash indexes, the entity embeddings of @p m, and every edge of final
 * graph @p g as the known links by source and by target. Sets @p manifest's "link" object
 * (kind, dim, self_loops, probability), which weft_snapshot_link_view() reads back.
 * @param is_probability  the training loss makes logistic(score) a probability
 * @return WEFT_OK, WEFT_ERR_INVALID (model and graph disagree), and the codes of
 *         weft_store_writer_put()
 */
weft_err weft_snapshot_put_link(weft_store_writer *w, json_t *manifest, const weft_graph *g,
                                const weft_link_model *m, bool is_probability, weft_error *err);

/**
 * Write the optimiser state of @p m's rows (weft_link_params.state: one float per node, then
 * per relation row) as blob "optimizer_state", which weft_snapshot_link_view() reads back as
 * weft_link_view.state for a later warm start.
 * @return WEFT_OK and the codes of weft_store_writer_put()
 */
weft_err weft_snapshot_put_optimizer_state(weft_store_writer *w, const weft_link_model *m,
                                           const float *state, weft_error *err);

/**
 * The label model of a snapshot (a GCN over the node table) as read-only views into the map,
 * valid until the snapshot's last release: what serving predictions and explanations needs.
 */
typedef struct weft_label_view {
    size_t n_nodes, n_classes;
    weft_names_view nodes;
    weft_names_view classes;
    const float *prob;        /**< (n_nodes, n_classes): class probabilities of every node */
    const float *message;     /**< (n_nodes, n_classes): U of the last layer (weft_gcn_attribute) */
    const float *bias;        /**< (n_classes), or NULL without bias */
    const uint32_t *observed; /**< (n_nodes): the label given in training input, or
                                   WEFT_LABEL_VIEW_NONE */
    const uint8_t *part;      /**< (n_nodes): weft_label_part of that label in training */
    const uint64_t *adj_off;  /**< (n_nodes + 1): rows of the normalised adjacency A' */
    const uint32_t *adj_col;  /**< (adj_off[n_nodes]) */
    const float *adj_val;     /**< (adj_off[n_nodes]) */
} weft_label_view;

/** observed[] value of an unlabelled node. */
#define WEFT_LABEL_VIEW_NONE UINT32_MAX

/**
 * Fill @p out from @p snap's label blobs, checking every shape against the others and the
 * name tables, and the adjacency offsets and columns against their bounds.
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND (no label model), WEFT_ERR_CORRUPT
 */
weft_err weft_snapshot_label_view(const weft_snapshot *snap, weft_label_view *out,
                                  weft_error *err);

/**
 * Write a label model into snapshot writer @p w: the node table of final graph @p g (unless a
 * link model was already put into this writer, which wrote it), the class names @p classes,
 * the probabilities and messages of @p t, its last bias, the normalised adjacency @p adj, and
 * the observed labels @p y (-1: none) with their training part @p part. Sets @p manifest's
 * "labels" object: kind "gcn", classes, layers, widths, activation, normalisation, bias.
 * @return WEFT_OK, WEFT_ERR_INVALID (shapes do not match), the writer's errors
 */
weft_err weft_snapshot_put_labels(weft_store_writer *w, json_t *manifest, const weft_graph *g,
                                  const weft_names *classes, const weft_gcn_trained *t,
                                  weft_sparse_norm norm, const weft_sparse *adj,
                                  const int32_t *y, const uint8_t *part, weft_error *err);

/**
 * Node types of a snapshot, read-only views into the map valid until the last release.
 * Stored as blobs "types.{off,bytes,slots}" (a name table, weft_names_view layout) and
 * "node.type" (u32 per node of the node table, WEFT_TYPES_NONE for none), with the
 * manifest's "types" object {"count", "typed"}. They belong to the node table: neither model
 * part owns them, and weft_snapshot_copy_part() does not carry them over.
 */
typedef struct weft_types_view {
    size_t n_nodes, n_types;
    weft_names_view names;    /**< the type names */
    const uint32_t *of_node;  /**< (n_nodes): type id, or WEFT_TYPES_NONE */
} weft_types_view;

/**
 * Fill @p out from @p snap's type blobs, checking them against the node table and each id
 * against the type table.
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND (no types stored), WEFT_ERR_CORRUPT
 */
weft_err weft_snapshot_types_view(const weft_snapshot *snap, weft_types_view *out,
                                  weft_error *err);

/**
 * Write node types @p t (over the node table a model part of this writer writes) into @p w,
 * and set @p manifest's "types" object.
 * @return WEFT_OK, WEFT_ERR_INVALID (an id out of range), the writer's errors
 */
weft_err weft_snapshot_put_types(weft_store_writer *w, json_t *manifest, const weft_types *t,
                                 weft_error *err);

/**
 * True when @p snap's node table holds exactly the names of @p nodes, in the same order (so
 * that every node id means the same node in both). False when it differs or is missing.
 */
bool weft_snapshot_same_nodes(const weft_snapshot *snap, const weft_names *nodes);

/** The two model parts a snapshot may hold. */
typedef enum weft_snapshot_part {
    WEFT_SNAPSHOT_LINK = 1,     /**< blobs relations.*, entity, relation, known_out.*, known_in.* */
    WEFT_SNAPSHOT_LABELS = 2    /**< blobs classes.*, label.* */
} weft_snapshot_part;

/** True when @p snap holds @p part (its manifest has the "link" or "labels" object). */
bool weft_snapshot_has_part(const weft_snapshot *snap, weft_snapshot_part part);

/**
 * Copy model part @p part of @p from into writer @p w: its blobs byte for byte and its
 * manifest object ("link" or "labels") into @p manifest. The node table is not copied: the
 * caller checks weft_snapshot_same_nodes() and writes the nodes with the other part.
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND (@p from lacks the part), the writer's errors
 */
weft_err weft_snapshot_copy_part(weft_store_writer *w, const weft_snapshot *from,
                                 weft_snapshot_part part, json_t *manifest, weft_error *err);

#endif
