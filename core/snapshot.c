/* A stored snapshot opened for reading (include/weft/snapshot.h).
 * Invariant: every blob pointer points into the LMDB map through txn, which stays open until
 * the last reference is released; blobs were checked against the manifest and their CRC-32. */
#include "internal.h"

#include <math.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>
#include <zlib.h>

#include "weft/alloc.h"
#include "weft/labels.h"
#include "weft/snapshot.h"

struct named_blob {
    const char *name;   /* a key of the manifest's "blobs" object: lives with the manifest */
    weft_blob blob;
    void *copy;         /* aligned copy of a small value, else NULL (data is in the map) */
};

struct weft_snapshot {
    atomic_uint refs;
    MDB_txn *txn;
    uint64_t version;
    json_t *manifest;
    size_t n_blobs;
    struct named_blob *blobs;
};

static weft_err fail_blob(weft_error *err, uint64_t version, const char *name, const char *why)
{
    return weft_error_set(err, WEFT_ERR_CORRUPT, "version %llu, blob '%s': %s",
                          (unsigned long long)version, name, why);
}

static bool dtype_from_name(const char *s, weft_dtype *out)
{
    static const weft_dtype all[] = { WEFT_DTYPE_U8, WEFT_DTYPE_U32, WEFT_DTYPE_U64,
                                      WEFT_DTYPE_F32 };
    for (size_t i = 0; s && i < sizeof all / sizeof all[0]; i++)
        if (!strcmp(s, weft_dtype_name(all[i]))) {
            *out = all[i];
            return true;
        }
    return false;
}

/* Tell the kernel we will read the range soon; the CRC pass then faults the pages in. */
static void advise_willneed(const void *p, size_t n)
{
    long page = sysconf(_SC_PAGESIZE);
    if (page <= 0 || n == 0)
        return;
    uintptr_t a = (uintptr_t)p & ~((uintptr_t)page - 1);
    (void)posix_madvise((void *)a, n + ((uintptr_t)p - a), POSIX_MADV_WILLNEED);
}

/* Read blob @p name described by @p desc in the manifest, check header, shape and CRC. */
static weft_err load_blob(weft_snapshot *snap, const weft_store *s, const char *name,
                          const json_t *desc, weft_blob *out, void **copy, weft_error *err)
{
    weft_dtype dtype;
    const json_t *jshape = json_object_get(desc, "shape");
    json_int_t bytes = json_integer_value(json_object_get(desc, "bytes"));
    json_int_t crc = json_integer_value(json_object_get(desc, "crc32"));
    if (!dtype_from_name(json_string_value(json_object_get(desc, "dtype")), &dtype) ||
        !json_is_array(jshape) || json_array_size(jshape) == 0 ||
        json_array_size(jshape) > WEFT_BLOB_MAX_DIMS || bytes < 0)
        return fail_blob(err, snap->version, name, "manifest entry malformed");

    unsigned char key[8 + WEFT_BLOB_MAX_NAME];
    size_t klen = weft_store_blob_key(snap->version, name, key, sizeof key);
    if (klen == 0)
        return fail_blob(err, snap->version, name, "name too long");
    MDB_val k = { klen, key }, v;
    int rc = mdb_get(snap->txn, s->blobs, &k, &v);
    if (rc == MDB_NOTFOUND)
        return fail_blob(err, snap->version, name, "listed in the manifest but not stored");
    if (rc)
        return weft_store_mdb_error(rc, name, err);
    if (v.mv_size < WEFT_BLOB_HEADER_BYTES)
        return fail_blob(err, snap->version, name, "shorter than its header");
    weft_blob_header h;
    memcpy(&h, v.mv_data, sizeof h);   /* small values are not aligned */
    if (memcmp(h.magic, WEFT_BLOB_MAGIC, sizeof h.magic) != 0)
        return fail_blob(err, snap->version, name, "bad header magic");
    if (h.dtype != (uint32_t)dtype || h.ndim != json_array_size(jshape) ||
        h.nbytes != (uint64_t)bytes || h.nbytes != v.mv_size - WEFT_BLOB_HEADER_BYTES)
        return fail_blob(err, snap->version, name, "header disagrees with the manifest");
    memset(out, 0, sizeof *out);
    size_t count = 1;
    for (size_t i = 0; i < h.ndim; i++) {
        json_int_t dim = json_integer_value(json_array_get(jshape, i));
        if (dim < 0 || (uint64_t)dim != h.shape[i])
            return fail_blob(err, snap->version, name, "shape disagrees with the manifest");
        out->shape[i] = (size_t)h.shape[i];
        count *= out->shape[i];
    }
    if (count * weft_dtype_size(dtype) != h.nbytes)
        return fail_blob(err, snap->version, name, "size disagrees with its shape");
    out->data = (const char *)v.mv_data + WEFT_BLOB_HEADER_BYTES;
    if ((uintptr_t)out->data % 8 != 0) {
        /* Small values live inside a page at any byte offset; large ones (overflow pages)
         * are aligned by the header. Copy the small ones so typed reads stay aligned. */
        *copy = weft_alloc_array(h.nbytes ? h.nbytes : 1, 1);
        if (!*copy)
            return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory copying blob '%s'", name);
        memcpy(*copy, out->data, h.nbytes);
        out->data = *copy;
    }
    out->dtype = dtype;
    out->ndim = h.ndim;
    out->nbytes = (size_t)h.nbytes;
    advise_willneed(out->data, out->nbytes);
    uLong actual = crc32_z(crc32_z(0L, Z_NULL, 0), out->data, out->nbytes);
    if ((json_int_t)actual != crc)
        return fail_blob(err, snap->version, name, "CRC-32 mismatch: stored data is damaged");
    out->crc32 = (uint32_t)actual;
    return WEFT_OK;
}

weft_err weft_snapshot_open(weft_store *s, uint64_t version, weft_snapshot **out,
                            weft_error *err)
{
    weft_snapshot *snap = calloc(1, sizeof *snap);
    if (!snap)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory opening a snapshot");
    atomic_init(&snap->refs, 1);
    snap->version = version;
    /* Through the store, which adopts a map another process grew while none is held. */
    weft_err e = weft_store_txn_begin(s, MDB_RDONLY, &snap->txn, err);
    int rc;
    if (e != WEFT_OK)
        goto done;
    unsigned char key[8];
    weft_store_version_key(version, key);
    MDB_val k = { 8, key }, v;
    rc = mdb_get(snap->txn, s->catalog, &k, &v);
    if (rc) {
        e = rc == MDB_NOTFOUND
                ? weft_error_set(err, WEFT_ERR_NOT_FOUND, "no snapshot version %llu",
                                 (unsigned long long)version)
                : weft_store_mdb_error(rc, "read catalog", err);
        goto done;
    }
    json_error_t jerr;
    snap->manifest = json_loadb(v.mv_data, v.mv_size, JSON_REJECT_DUPLICATES, &jerr);
    const json_t *blobs = json_object_get(snap->manifest, "blobs");
    if (!json_is_object(blobs)) {
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "manifest of version %llu is malformed",
                           (unsigned long long)version);
        goto done;
    }
    snap->blobs = weft_calloc_array(json_object_size(blobs), sizeof *snap->blobs);
    if (!snap->blobs) {
        e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory opening a snapshot");
        goto done;
    }
    const char *name;
    const json_t *desc;
    json_object_foreach((json_t *)blobs, name, desc) {
        struct named_blob *nb = &snap->blobs[snap->n_blobs];
        nb->name = name;
        snap->n_blobs++;   /* counted first, so that a failed load frees its copy */
        if ((e = load_blob(snap, s, name, desc, &nb->blob, &nb->copy, err)) != WEFT_OK)
            goto done;
    }
done:
    if (e != WEFT_OK) {
        weft_snapshot_release(snap);
        return e;
    }
    *out = snap;
    return WEFT_OK;
}

weft_snapshot *weft_snapshot_acquire(weft_snapshot *snap)
{
    atomic_fetch_add_explicit(&snap->refs, 1, memory_order_relaxed);
    return snap;
}

void weft_snapshot_release(weft_snapshot *snap)
{
    if (!snap || atomic_fetch_sub_explicit(&snap->refs, 1, memory_order_acq_rel) != 1)
        return;
    if (snap->txn)
        mdb_txn_abort(snap->txn);   /* env opened MDB_NOTLS: any thread may end it */
    for (size_t i = 0; i < snap->n_blobs; i++)
        free(snap->blobs[i].copy);
    json_decref(snap->manifest);
    free(snap->blobs);
    free(snap);
}

uint64_t weft_snapshot_version(const weft_snapshot *snap)
{
    return snap->version;
}

const json_t *weft_snapshot_manifest(const weft_snapshot *snap)
{
    return snap->manifest;
}

bool weft_snapshot_blob(const weft_snapshot *snap, const char *name, weft_blob *out)
{
    for (size_t i = 0; i < snap->n_blobs; i++)
        if (!strcmp(snap->blobs[i].name, name)) {
            *out = snap->blobs[i].blob;
            return true;
        }
    return false;
}

/* Fetch blob @p name of @p dtype with @p ndim dims, or report it missing or mistyped. */
static weft_err need_blob(const weft_snapshot *snap, const char *name, weft_dtype dtype,
                          size_t ndim, weft_blob *out, weft_error *err)
{
    if (!weft_snapshot_blob(snap, name, out))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "version %llu: blob '%s' missing",
                              (unsigned long long)snap->version, name);
    if (out->dtype != dtype || out->ndim != ndim)
        return fail_blob(err, snap->version, name, "unexpected dtype or dimensions");
    return WEFT_OK;
}

/* need_blob() for the blob named "<prefix>.<part>". */
static weft_err need_part(const weft_snapshot *snap, const char *prefix, const char *part,
                          weft_dtype dtype, weft_blob *out, weft_error *err)
{
    char name[WEFT_BLOB_MAX_NAME + 1];
    snprintf(name, sizeof name, "%s.%s", prefix, part);
    return need_blob(snap, name, dtype, 1, out, err);
}

static weft_err names_view(const weft_snapshot *snap, const char *prefix, weft_names_view *out,
                           weft_error *err)
{
    weft_blob off, bytes, slots;
    weft_err e;
    if ((e = need_part(snap, prefix, "off", WEFT_DTYPE_U64, &off, err)) ||
        (e = need_part(snap, prefix, "bytes", WEFT_DTYPE_U8, &bytes, err)) ||
        (e = need_part(snap, prefix, "slots", WEFT_DTYPE_U32, &slots, err)))
        return e;
    if (off.shape[0] == 0)
        return fail_blob(err, snap->version, prefix, "empty name table offsets");
    weft_names_view v = { .n = off.shape[0] - 1, .cap = slots.shape[0], .off = off.data,
                          .bytes = bytes.data, .slots = slots.data, .n_bytes = bytes.shape[0] };
    if ((e = weft_names_check(&v, err)) != WEFT_OK)
        return e;
    *out = v;
    return WEFT_OK;
}

static weft_err csr_view(const weft_snapshot *snap, const char *prefix, size_t n_rows,
                         size_t n_cols, size_t n_rel, weft_csr *out, weft_error *err)
{
    weft_blob off, rel, nbr;
    weft_err e;
    if ((e = need_part(snap, prefix, "off", WEFT_DTYPE_U64, &off, err)) ||
        (e = need_part(snap, prefix, "rel", WEFT_DTYPE_U32, &rel, err)) ||
        (e = need_part(snap, prefix, "nbr", WEFT_DTYPE_U32, &nbr, err)))
        return e;
    const uint64_t *o = off.data;
    const uint32_t *r = rel.data, *u = nbr.data;
    if (off.shape[0] != n_rows + 1 || rel.shape[0] != nbr.shape[0] || o[0] != 0 ||
        o[n_rows] != nbr.shape[0])
        return fail_blob(err, snap->version, prefix, "offsets disagree with the node table");
    for (size_t i = 0; i < n_rows; i++)
        if (o[i] > o[i + 1])
            return fail_blob(err, snap->version, prefix, "offsets not rising");
    for (size_t j = 0; j < nbr.shape[0]; j++)
        if (r[j] >= n_rel || u[j] >= n_cols)
            return fail_blob(err, snap->version, prefix, "id out of range");
    /* The CSR struct is shared with the builder, whose arrays are writable; these point into
     * the read-only map and are never written through (snapshot.h says so). */
    out->n_rows = n_rows;
    out->off = (uint64_t *)(uintptr_t)o;
    out->rel = (uint32_t *)(uintptr_t)r;
    out->nbr = (uint32_t *)(uintptr_t)u;
    return WEFT_OK;
}

weft_err weft_snapshot_link_view(const weft_snapshot *snap, weft_link_view *out,
                                 weft_error *err)
{
    const json_t *link = json_object_get(snap->manifest, "link");
    if (!json_is_object(link))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "version %llu holds no link model",
                              (unsigned long long)snap->version);
    weft_link_view v;
    memset(&v, 0, sizeof v);
    const char *kind = json_string_value(json_object_get(link, "kind"));
    if (!kind || !weft_model_kind_parse(kind, &v.kind))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "version %llu: unknown link model '%s'",
                              (unsigned long long)snap->version, kind ? kind : "");
    v.has_self_loops = json_is_true(json_object_get(link, "self_loops"));
    v.is_probability = json_is_true(json_object_get(link, "probability"));
    bool has_reciprocal = json_is_true(json_object_get(link, "reciprocal"));
    weft_err e;
    if ((e = names_view(snap, "nodes", &v.nodes, err)) ||
        (e = names_view(snap, "relations", &v.relations, err)))
        return e;
    v.n_nodes = v.nodes.n;
    v.n_relations = v.relations.n;
    weft_blob ent, rel = { 0 };
    if ((e = need_blob(snap, "entity", WEFT_DTYPE_F32, 2, &ent, err)))
        return e;
    if (ent.shape[0] != v.n_nodes || ent.shape[1] == 0 ||
        (v.kind == WEFT_LINK_COMPLEX && ent.shape[1] % 2))
        return fail_blob(err, snap->version, "entity", "shape disagrees with the node table");
    v.dim = ent.shape[1];
    v.entity = ent.data;
    if (v.kind != WEFT_LINK_DOT) {
        size_t rows = v.n_relations * (has_reciprocal ? 2 : 1);
        if ((e = need_blob(snap, "relation", WEFT_DTYPE_F32, 2, &rel, err)))
            return e;
        if (rel.shape[0] != rows || rel.shape[1] != v.dim)
            return fail_blob(err, snap->version, "relation", "shape disagrees with the model");
    }
    v.model = (weft_link_model){ .kind = v.kind, .n_entities = v.n_nodes,
                                 .n_relations = v.n_relations, .dim = v.dim,
                                 .has_reciprocal = has_reciprocal, .entity = ent.data,
                                 .relation = rel.data };
    if ((e = csr_view(snap, "known_out", v.n_nodes, v.n_nodes, v.n_relations, &v.known_out,
                      err)) ||
        (e = csr_view(snap, "known_in", v.n_nodes, v.n_nodes, v.n_relations, &v.known_in, err)))
        return e;
    weft_blob st;   /* optional: snapshots of a GCN decoder, or of an earlier weft, keep none */
    if (weft_snapshot_blob(snap, "optimizer_state", &st)) {
        size_t rows = v.n_nodes + (rel.data ? rel.shape[0] : 0);
        if (st.dtype != WEFT_DTYPE_F32 || st.ndim != 1 || st.shape[0] != rows)
            return fail_blob(err, snap->version, "optimizer_state",
                             "shape disagrees with the model");
        v.state = st.data;
    }
    *out = v;
    return WEFT_OK;
}

/* weft_store_writer_put() of a 1-dimensional blob named "<prefix>.<part>". */
static weft_err put_part(weft_store_writer *w, const char *prefix, const char *part,
                         weft_dtype dtype, size_t n, const void *data, weft_error *err)
{
    char name[WEFT_BLOB_MAX_NAME + 1];
    snprintf(name, sizeof name, "%s.%s", prefix, part);
    return weft_store_writer_put(w, name, dtype, 1, &n, data, err);
}

static weft_err put_names(weft_store_writer *w, const char *prefix, const weft_names *t,
                          weft_error *err)
{
    weft_names_view v = weft_names_as_view(t);
    weft_err e;
    if ((e = put_part(w, prefix, "off", WEFT_DTYPE_U64, v.n + 1, v.off, err)) ||
        (e = put_part(w, prefix, "bytes", WEFT_DTYPE_U8, v.n_bytes, v.bytes, err)))
        return e;
    return put_part(w, prefix, "slots", WEFT_DTYPE_U32, v.cap, v.slots, err);
}

static weft_err put_csr(weft_store_writer *w, const char *prefix, const weft_csr *c,
                        weft_error *err)
{
    size_t nnz = (size_t)c->off[c->n_rows];
    weft_err e;
    if ((e = put_part(w, prefix, "off", WEFT_DTYPE_U64, c->n_rows + 1, c->off, err)) ||
        (e = put_part(w, prefix, "rel", WEFT_DTYPE_U32, nnz, c->rel, err)))
        return e;
    return put_part(w, prefix, "nbr", WEFT_DTYPE_U32, nnz, c->nbr, err);
}

weft_err weft_snapshot_put_optimizer_state(weft_store_writer *w, const weft_link_model *m,
                                           const float *state, weft_error *err)
{
    size_t rel_rows = m->relation ? m->n_relations * (m->has_reciprocal ? 2 : 1) : 0;
    size_t shape[1] = { m->n_entities + rel_rows };
    return weft_store_writer_put(w, "optimizer_state", WEFT_DTYPE_F32, 1, shape, state, err);
}

weft_err weft_snapshot_put_link(weft_store_writer *w, json_t *manifest, const weft_graph *g,
                                const weft_link_model *m, bool is_probability, weft_error *err)
{
    if (!g->is_final || m->n_entities != g->nodes.n || m->n_relations != g->relations.n)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "model of %zu nodes does not match the graph's %zu", m->n_entities,
                              g->nodes.n);
    size_t shape[2] = { m->n_entities, m->dim };
    size_t rel_shape[2] = { m->n_relations * (m->has_reciprocal ? 2 : 1), m->dim };
    weft_err e;
    if ((e = put_names(w, "nodes", &g->nodes, err)) ||
        (e = put_names(w, "relations", &g->relations, err)) ||
        (e = weft_store_writer_put(w, "entity", WEFT_DTYPE_F32, 2, shape, m->entity, err)) ||
        (m->relation &&
         (e = weft_store_writer_put(w, "relation", WEFT_DTYPE_F32, 2, rel_shape, m->relation,
                                    err))) ||
        (e = put_csr(w, "known_out", &g->out, err)) || (e = put_csr(w, "known_in", &g->in, err)))
        return e;
    json_t *link = json_pack("{s:s, s:I, s:b, s:b, s:b}", "kind", weft_model_kind_name(m->kind),
                             "dim", (json_int_t)m->dim, "self_loops", g->n_self_loops > 0,
                             "probability", is_probability, "reciprocal", m->has_reciprocal);
    if (!link || json_object_set_new(manifest, "link", link))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the manifest");
    return WEFT_OK;
}

/* ---- the label model ---- */

/* Every value of @p x[0..n) finite (and, with @p is_prob, in [0, 1]). */
static bool all_finite(const float *x, size_t n, bool is_prob)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(x[i]) || (is_prob && (x[i] < 0.0f || x[i] > 1.0f)))
            return false;
    return true;
}

/* A 2-dimensional f32 blob of (rows, cols) with finite values. */
static weft_err need_matrix(const weft_snapshot *snap, const char *name, size_t rows, size_t cols,
                            bool is_prob, const float **out, weft_error *err)
{
    weft_blob b;
    weft_err e = need_blob(snap, name, WEFT_DTYPE_F32, 2, &b, err);
    if (e)
        return e;
    if (b.shape[0] != rows || b.shape[1] != cols)
        return fail_blob(err, snap->version, name, "shape disagrees with the node or class table");
    if (!all_finite(b.data, rows * cols, is_prob))
        return fail_blob(err, snap->version, name,
                         is_prob ? "a value is not a probability" : "a value is not finite");
    *out = b.data;
    return WEFT_OK;
}

/* A 1-dimensional blob of @p n values of @p dtype. */
static weft_err need_vector(const weft_snapshot *snap, const char *name, weft_dtype dtype,
                            size_t n, const void **out, weft_error *err)
{
    weft_blob b;
    weft_err e = need_blob(snap, name, dtype, 1, &b, err);
    if (e)
        return e;
    if (b.shape[0] != n)
        return fail_blob(err, snap->version, name, "length disagrees with the node or class table");
    *out = b.data;
    return WEFT_OK;
}

/* The normalised adjacency A' (n x n) as rows label.adj.{off,col,val}. */
static weft_err adjacency_view(const weft_snapshot *snap, size_t n, weft_label_view *v,
                               weft_error *err)
{
    weft_blob off, col, val;
    weft_err e;
    if ((e = need_part(snap, "label.adj", "off", WEFT_DTYPE_U64, &off, err)) ||
        (e = need_part(snap, "label.adj", "col", WEFT_DTYPE_U32, &col, err)) ||
        (e = need_part(snap, "label.adj", "val", WEFT_DTYPE_F32, &val, err)))
        return e;
    const uint64_t *o = off.data;
    const uint32_t *c = col.data;
    if (off.shape[0] != n + 1 || col.shape[0] != val.shape[0] || o[0] != 0 ||
        o[n] != col.shape[0])
        return fail_blob(err, snap->version, "label.adj", "offsets disagree with the node table");
    for (size_t i = 0; i < n; i++)
        if (o[i] > o[i + 1])
            return fail_blob(err, snap->version, "label.adj", "offsets not rising");
    for (size_t k = 0; k < col.shape[0]; k++)
        if (c[k] >= n)
            return fail_blob(err, snap->version, "label.adj", "column out of range");
    if (!all_finite(val.data, val.shape[0], false))
        return fail_blob(err, snap->version, "label.adj.val", "a value is not finite");
    v->adj_off = o;
    v->adj_col = c;
    v->adj_val = val.data;
    return WEFT_OK;
}

weft_err weft_snapshot_label_view(const weft_snapshot *snap, weft_label_view *out,
                                  weft_error *err)
{
    const json_t *labels = json_object_get(snap->manifest, "labels");
    if (!json_is_object(labels))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "version %llu holds no label model",
                              (unsigned long long)snap->version);
    const char *kind = json_string_value(json_object_get(labels, "kind"));
    if (!kind || strcmp(kind, "gcn") != 0)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "version %llu: unknown label model '%s'",
                              (unsigned long long)snap->version, kind ? kind : "");
    weft_label_view v;
    memset(&v, 0, sizeof v);
    weft_err e;
    if ((e = names_view(snap, "nodes", &v.nodes, err)) ||
        (e = names_view(snap, "classes", &v.classes, err)))
        return e;
    v.n_nodes = v.nodes.n;
    v.n_classes = v.classes.n;
    const json_t *jclasses = json_object_get(labels, "classes");
    if (v.n_classes == 0 || !json_is_integer(jclasses) ||
        json_integer_value(jclasses) != (json_int_t)v.n_classes)
        return fail_blob(err, snap->version, "classes", "class count disagrees with the manifest");
    const json_t *dims = json_object_get(labels, "dims");
    size_t n_dims = json_array_size(dims);
    if (n_dims < 2 || n_dims > WEFT_GCN_MAX_LAYERS + 1 ||
        json_integer_value(json_object_get(labels, "layers")) != (json_int_t)(n_dims - 1) ||
        json_integer_value(json_array_get(dims, n_dims - 1)) != (json_int_t)v.n_classes)
        return weft_error_set(err, WEFT_ERR_CORRUPT,
                              "version %llu: the label model's layers disagree with its classes",
                              (unsigned long long)snap->version);
    const void *p;
    if ((e = need_matrix(snap, "label.prob", v.n_nodes, v.n_classes, true, &v.prob, err)) ||
        (e = need_matrix(snap, "label.message", v.n_nodes, v.n_classes, false, &v.message, err)))
        return e;
    bool has_bias = json_is_true(json_object_get(labels, "bias"));
    weft_blob unused;
    if (has_bias) {
        if ((e = need_vector(snap, "label.bias", WEFT_DTYPE_F32, v.n_classes, &p, err)))
            return e;
        v.bias = p;
        if (!all_finite(v.bias, v.n_classes, false))
            return fail_blob(err, snap->version, "label.bias", "a value is not finite");
    } else if (weft_snapshot_blob(snap, "label.bias", &unused)) {
        return fail_blob(err, snap->version, "label.bias", "stored but the manifest says no bias");
    }
    if ((e = need_vector(snap, "label.observed", WEFT_DTYPE_U32, v.n_nodes, &p, err)))
        return e;
    v.observed = p;
    if ((e = need_vector(snap, "label.part", WEFT_DTYPE_U8, v.n_nodes, &p, err)))
        return e;
    v.part = p;
    for (size_t i = 0; i < v.n_nodes; i++) {
        if (v.observed[i] >= v.n_classes && v.observed[i] != WEFT_LABEL_VIEW_NONE)
            return fail_blob(err, snap->version, "label.observed", "class out of range");
        if (v.part[i] > WEFT_LABEL_TEST)
            return fail_blob(err, snap->version, "label.part", "part out of range");
    }
    if ((e = adjacency_view(snap, v.n_nodes, &v, err)))
        return e;
    *out = v;
    return WEFT_OK;
}

static json_t *labels_json(const weft_gcn_shape *s, size_t n_classes, weft_sparse_norm norm,
                           bool has_bias)
{
    json_t *dims = json_array();
    for (size_t l = 0; dims && l <= s->n_layers; l++)
        if (json_array_append_new(dims, json_integer((json_int_t)s->dims[l]))) {
            json_decref(dims);
            dims = NULL;
        }
    return json_pack("{s:s, s:I, s:I, s:o, s:s, s:s, s:b, s:s}", "kind", "gcn", "classes",
                     (json_int_t)n_classes, "layers", (json_int_t)s->n_layers, "dims", dims,
                     "activation", weft_gcn_act_name(s->act), "normalisation",
                     weft_sparse_norm_name(norm), "bias", has_bias, "input",
                     s->has_embedding ? "embedding" : "features");
}

weft_err weft_snapshot_put_labels(weft_store_writer *w, json_t *manifest, const weft_graph *g,
                                  const weft_names *classes, const weft_gcn_trained *t,
                                  weft_sparse_norm norm, const weft_sparse *adj,
                                  const int32_t *y, const uint8_t *part, weft_error *err)
{
    const weft_gcn_shape *s = &t->shape;
    size_t n = g->nodes.n, n_classes = classes->n;
    if (!g->is_final || s->n_nodes != n || s->n_layers == 0 ||
        s->n_layers > WEFT_GCN_MAX_LAYERS || s->dims[s->n_layers] != n_classes ||
        n_classes == 0 || !t->output || !t->message || adj->n_rows != n || adj->n_cols != n ||
        !weft_gcn_act_name(s->act) || !weft_sparse_norm_name(norm))
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "label model of %zu nodes and %zu classes does not match the "
                              "graph's %zu nodes and %zu classes",
                              s->n_nodes, s->n_layers ? s->dims[s->n_layers] : 0, n, n_classes);
    for (size_t v = 0; v < n; v++)
        if (y[v] < -1 || y[v] >= (int32_t)n_classes || part[v] > WEFT_LABEL_TEST)
            return weft_error_set(err, WEFT_ERR_INVALID,
                                  "node %zu: label %d or part %u out of range", v, (int)y[v],
                                  (unsigned)part[v]);
    uint32_t *observed = weft_alloc_array(n ? n : 1, sizeof *observed);
    if (!observed)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the labels");
    for (size_t v = 0; v < n; v++)
        observed[v] = y[v] < 0 ? WEFT_LABEL_VIEW_NONE : (uint32_t)y[v];
    const float *bias = s->has_bias ? t->params.b[s->n_layers - 1] : NULL;
    size_t shape[2] = { n, n_classes }, nnz = weft_sparse_nnz(adj);
    bool has_link = json_is_object(json_object_get(manifest, "link"));
    weft_err e;
    if ((!has_link && (e = put_names(w, "nodes", &g->nodes, err))) ||
        (e = put_names(w, "classes", classes, err)) ||
        (e = weft_store_writer_put(w, "label.prob", WEFT_DTYPE_F32, 2, shape, t->output, err)) ||
        (e = weft_store_writer_put(w, "label.message", WEFT_DTYPE_F32, 2, shape, t->message,
                                   err)) ||
        (bias && (e = weft_store_writer_put(w, "label.bias", WEFT_DTYPE_F32, 1, &n_classes, bias,
                                            err))) ||
        (e = weft_store_writer_put(w, "label.observed", WEFT_DTYPE_U32, 1, &n, observed, err)) ||
        (e = weft_store_writer_put(w, "label.part", WEFT_DTYPE_U8, 1, &n, part, err)) ||
        (e = put_part(w, "label.adj", "off", WEFT_DTYPE_U64, n + 1, adj->off, err)) ||
        (e = put_part(w, "label.adj", "col", WEFT_DTYPE_U32, nnz, adj->col, err)) ||
        (e = put_part(w, "label.adj", "val", WEFT_DTYPE_F32, nnz, adj->val, err))) {
        free(observed);
        return e;
    }
    free(observed);
    json_t *labels = labels_json(s, n_classes, norm, bias != NULL);
    if (!labels || json_object_set_new(manifest, "labels", labels))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the manifest");
    return WEFT_OK;
}

/* ---- node types ---- */

weft_err weft_snapshot_types_view(const weft_snapshot *snap, weft_types_view *out,
                                  weft_error *err)
{
    const json_t *types = json_object_get(snap->manifest, "types");
    if (!json_is_object(types))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "version %llu holds no node types",
                              (unsigned long long)snap->version);
    weft_types_view v;
    memset(&v, 0, sizeof v);
    weft_names_view nodes;
    const void *p;
    weft_err e;
    if ((e = names_view(snap, "nodes", &nodes, err)) ||
        (e = names_view(snap, "types", &v.names, err)) ||
        (e = need_vector(snap, "node.type", WEFT_DTYPE_U32, nodes.n, &p, err)))
        return e;
    v.n_nodes = nodes.n;
    v.n_types = v.names.n;
    v.of_node = p;
    if (json_integer_value(json_object_get(types, "count")) != (json_int_t)v.n_types)
        return fail_blob(err, snap->version, "types", "type count disagrees with the manifest");
    for (size_t i = 0; i < v.n_nodes; i++)
        if (v.of_node[i] >= v.n_types && v.of_node[i] != WEFT_TYPES_NONE)
            return fail_blob(err, snap->version, "node.type", "type out of range");
    *out = v;
    return WEFT_OK;
}

weft_err weft_snapshot_put_types(weft_store_writer *w, json_t *manifest, const weft_types *t,
                                 weft_error *err)
{
    for (size_t i = 0; i < t->n_nodes; i++)
        if (t->of_node[i] >= t->names.n && t->of_node[i] != WEFT_TYPES_NONE)
            return weft_error_set(err, WEFT_ERR_INVALID, "node %zu: type %u out of range", i,
                                  (unsigned)t->of_node[i]);
    size_t n = t->n_nodes;
    weft_err e;
    if ((e = put_names(w, "types", &t->names, err)) ||
        (e = weft_store_writer_put(w, "node.type", WEFT_DTYPE_U32, 1, &n, t->of_node, err)))
        return e;
    json_t *j = json_pack("{s:I, s:I}", "count", (json_int_t)t->names.n, "typed",
                          (json_int_t)t->n_typed);
    if (!j || json_object_set_new(manifest, "types", j))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the manifest");
    return WEFT_OK;
}

/* ---- carrying a model part over from another snapshot ---- */

bool weft_snapshot_same_nodes(const weft_snapshot *snap, const weft_names *nodes)
{
    weft_names_view v, mine = weft_names_as_view(nodes);
    if (names_view(snap, "nodes", &v, NULL) != WEFT_OK || v.n != mine.n)
        return false;
    size_t n_bytes = (size_t)mine.off[mine.n];
    return v.off[v.n] == mine.off[mine.n] &&
           !memcmp(v.off, mine.off, (mine.n + 1) * sizeof *v.off) &&
           !memcmp(v.bytes, mine.bytes, n_bytes);
}

static const char *part_key(weft_snapshot_part part)
{
    return part == WEFT_SNAPSHOT_LINK ? "link" : "labels";
}

bool weft_snapshot_has_part(const weft_snapshot *snap, weft_snapshot_part part)
{
    return json_is_object(json_object_get(snap->manifest, part_key(part)));
}

/* Whether blob @p name belongs to model part @p part (the node table belongs to neither). */
static bool blob_of_part(const char *name, weft_snapshot_part part)
{
    static const char *const link[] = { "relations.", "known_out.", "known_in.", "index." };
    if (part == WEFT_SNAPSHOT_LABELS)
        return !strncmp(name, "classes.", 8) || !strncmp(name, "label.", 6);
    if (!strcmp(name, "entity") || !strcmp(name, "relation") || !strcmp(name, "optimizer_state"))
        return true;
    for (size_t i = 0; i < sizeof link / sizeof link[0]; i++)
        if (!strncmp(name, link[i], strlen(link[i])))
            return true;
    return false;
}

weft_err weft_snapshot_copy_part(weft_store_writer *w, const weft_snapshot *from,
                                 weft_snapshot_part part, json_t *manifest, weft_error *err)
{
    json_t *obj = json_object_get(from->manifest, part_key(part));
    if (!json_is_object(obj))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "version %llu has no %s model",
                              (unsigned long long)from->version, part_key(part));
    for (size_t i = 0; i < from->n_blobs; i++) {
        const struct named_blob *nb = &from->blobs[i];
        if (!blob_of_part(nb->name, part))
            continue;
        weft_err rc = weft_store_writer_put(w, nb->name, nb->blob.dtype, nb->blob.ndim,
                                            nb->blob.shape, nb->blob.data, err);
        if (rc != WEFT_OK)
            return rc;
    }
    if (json_object_set(manifest, part_key(part), obj))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory copying the manifest");
    return WEFT_OK;
}
