/* The snapshot store: LMDB environment, catalog, blobs, head (include/weft/store.h).
 * Invariants: a catalog entry and all its blobs are written in one transaction; head only
 * ever names versions present in the catalog; manifests are JSON objects. */
#include "internal.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <zlib.h>

#include "weft/alloc.h"

_Static_assert(sizeof(weft_blob_header) == WEFT_BLOB_HEADER_BYTES, "blob header size");

const char *weft_dtype_name(weft_dtype t)
{
    switch (t) {
    case WEFT_DTYPE_U8: return "u8";
    case WEFT_DTYPE_U32: return "u32";
    case WEFT_DTYPE_U64: return "u64";
    case WEFT_DTYPE_F32: return "f32";
    }
    return NULL;
}

size_t weft_dtype_size(weft_dtype t)
{
    switch (t) {
    case WEFT_DTYPE_U8: return 1;
    case WEFT_DTYPE_U32: return 4;
    case WEFT_DTYPE_U64: return 8;
    case WEFT_DTYPE_F32: return 4;
    }
    return 0;
}

weft_err weft_store_mdb_error(int rc, const char *what, weft_error *err)
{
    if (rc == MDB_NOTFOUND)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: not found", what);
    if (rc == MDB_MAP_FULL)
        return weft_error_set(err, WEFT_ERR_LIMIT,
                              "%s: the store's map is full (raise the map size)", what);
    if (rc == ENOSPC)
        return weft_error_set(err, WEFT_ERR_IO, "%s: no space left on device", what);
    return weft_error_set(err, WEFT_ERR_STORE, "%s: %s", what, mdb_strerror(rc));
}

void weft_store_version_key(uint64_t version, unsigned char out[8])
{
    for (int i = 7; i >= 0; i--) {
        out[i] = (unsigned char)(version & 0xff);
        version >>= 8;
    }
}

static uint64_t version_from_key(const MDB_val *k)
{
    uint64_t v = 0;
    const unsigned char *p = k->mv_data;
    for (size_t i = 0; i < 8 && i < k->mv_size; i++)
        v = (v << 8) | p[i];
    return v;
}

size_t weft_store_blob_key(uint64_t version, const char *name, unsigned char *out, size_t cap)
{
    size_t n = strlen(name);
    if (8 + n > cap)
        return 0;
    weft_store_version_key(version, out);
    memcpy(out + 8, name, n);
    return 8 + n;
}

static weft_err open_dbis(weft_store *s, weft_error *err)
{
    MDB_txn *txn = NULL;
    unsigned txn_flags = s->is_readonly ? MDB_RDONLY : 0;
    unsigned dbi_flags = s->is_readonly ? 0 : MDB_CREATE;
    int rc = mdb_txn_begin(s->env, NULL, txn_flags, &txn);
    if (rc)
        return weft_store_mdb_error(rc, "begin transaction", err);
    if ((rc = mdb_dbi_open(txn, "catalog", dbi_flags, &s->catalog)) ||
        (rc = mdb_dbi_open(txn, "blobs", dbi_flags, &s->blobs)) ||
        (rc = mdb_dbi_open(txn, "head", dbi_flags, &s->head))) {
        mdb_txn_abort(txn);
        if (rc == MDB_NOTFOUND)
            return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: not a weft store (no catalog)",
                                  s->dir);
        return weft_store_mdb_error(rc, "open databases", err);
    }
    /* Commit even when read-only: handles opened in an aborted transaction are closed. */
    rc = mdb_txn_commit(txn);
    if (rc)
        return weft_store_mdb_error(rc, "create databases", err);
    return WEFT_OK;
}

weft_err weft_store_open(const char *dir, unsigned flags, size_t map_size, weft_store **out,
                         weft_error *err)
{
    bool is_readonly = flags & WEFT_STORE_READONLY;
    if ((flags & WEFT_STORE_CREATE) && !is_readonly && mkdir(dir, 0755) != 0 && errno != EEXIST)
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", dir, strerror(errno));
    struct stat st;
    if (stat(dir, &st) != 0)
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", dir, strerror(errno));
    if (!S_ISDIR(st.st_mode))
        return weft_error_set(err, WEFT_ERR_IO, "%s: not a directory", dir);

    weft_store *s = calloc(1, sizeof *s);
    if (!s || !(s->dir = strdup(dir))) {
        free(s);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory opening %s", dir);
    }
    s->is_readonly = is_readonly;
    weft_err rc = WEFT_OK;
    int mrc = mdb_env_create(&s->env);
    if (mrc) {
        rc = weft_store_mdb_error(mrc, "create environment", err);
        goto done;
    }
    unsigned env_flags = MDB_NOTLS | (is_readonly ? MDB_RDONLY : 0);
    if ((mrc = mdb_env_set_maxdbs(s->env, 4)) ||
        (mrc = mdb_env_set_maxreaders(s->env, 254)) ||
        (mrc = mdb_env_set_mapsize(s->env, map_size ? map_size : WEFT_STORE_DEFAULT_MAP_SIZE))) {
        rc = weft_store_mdb_error(mrc, "configure environment", err);
        goto done;
    }
    mrc = mdb_env_open(s->env, dir, env_flags, 0644);
    if (mrc == ENOENT && is_readonly) {
        rc = weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: no store here yet", dir);
        goto done;
    }
    if (mrc) {
        rc = weft_error_set(err, mrc == EACCES ? WEFT_ERR_IO : WEFT_ERR_STORE,
                            "%s: cannot open store: %s", dir, mdb_strerror(mrc));
        goto done;
    }
    int dead = 0;
    mdb_reader_check(s->env, &dead);   /* free slots of crashed readers; failure is harmless */
    rc = open_dbis(s, err);
done:
    if (rc != WEFT_OK) {
        weft_store_close(s);
        return rc;
    }
    *out = s;
    return WEFT_OK;
}

void weft_store_close(weft_store *s)
{
    if (!s)
        return;
    if (s->env)
        mdb_env_close(s->env);
    free(s->dir);
    free(s);
}

const char *weft_store_dir(const weft_store *s)
{
    return s->dir;
}

static weft_err get_head(MDB_txn *txn, MDB_dbi dbi, const char *key, uint64_t *out,
                         weft_error *err)
{
    MDB_val k = { strlen(key), (void *)key }, v;
    int rc = mdb_get(txn, dbi, &k, &v);
    if (rc == MDB_NOTFOUND) {
        *out = 0;
        return WEFT_OK;
    }
    if (rc)
        return weft_store_mdb_error(rc, "read head", err);
    if (v.mv_size != 8)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "head %s: value of %zu bytes, not 8", key,
                              v.mv_size);
    *out = version_from_key(&v);
    return WEFT_OK;
}

static weft_err put_head(MDB_txn *txn, MDB_dbi dbi, const char *key, uint64_t version,
                         weft_error *err)
{
    unsigned char buf[8];
    weft_store_version_key(version, buf);
    MDB_val k = { strlen(key), (void *)key }, v = { 8, buf };
    int rc = mdb_put(txn, dbi, &k, &v, 0);
    return rc ? weft_store_mdb_error(rc, "write head", err) : WEFT_OK;
}

weft_err weft_store_head(weft_store *s, uint64_t *live, uint64_t *previous, weft_error *err)
{
    MDB_txn *txn = NULL;
    int rc = mdb_txn_begin(s->env, NULL, MDB_RDONLY, &txn);
    if (rc)
        return weft_store_mdb_error(rc, "begin read", err);
    uint64_t l = 0, p = 0;
    weft_err e = get_head(txn, s->head, "live", &l, err);
    if (e == WEFT_OK)
        e = get_head(txn, s->head, "previous", &p, err);
    mdb_txn_abort(txn);
    if (e != WEFT_OK)
        return e;
    if (live)
        *live = l;
    if (previous)
        *previous = p;
    return WEFT_OK;
}

static weft_err parse_manifest(const MDB_val *v, uint64_t version, json_t **out, weft_error *err)
{
    json_error_t jerr;
    json_t *m = json_loadb(v->mv_data, v->mv_size, JSON_REJECT_DUPLICATES, &jerr);
    if (!m || !json_is_object(m)) {
        json_decref(m);
        return weft_error_set(err, WEFT_ERR_CORRUPT, "manifest of version %llu is not a JSON object",
                              (unsigned long long)version);
    }
    *out = m;
    return WEFT_OK;
}

static weft_err get_manifest(MDB_txn *txn, const weft_store *s, uint64_t version, json_t **out,
                             weft_error *err)
{
    unsigned char key[8];
    weft_store_version_key(version, key);
    MDB_val k = { 8, key }, v;
    int rc = mdb_get(txn, s->catalog, &k, &v);
    if (rc == MDB_NOTFOUND)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "no snapshot version %llu",
                              (unsigned long long)version);
    if (rc)
        return weft_store_mdb_error(rc, "read catalog", err);
    return parse_manifest(&v, version, out, err);
}

static weft_err put_manifest(MDB_txn *txn, const weft_store *s, uint64_t version,
                             const json_t *m, weft_error *err)
{
    char *text = json_dumps(m, JSON_COMPACT | JSON_REAL_PRECISION(9));
    if (!text)
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot serialise manifest");
    unsigned char key[8];
    weft_store_version_key(version, key);
    MDB_val k = { 8, key }, v = { strlen(text), text };
    int rc = mdb_put(txn, s->catalog, &k, &v, 0);
    free(text);
    return rc ? weft_store_mdb_error(rc, "write catalog", err) : WEFT_OK;
}

weft_err weft_store_manifest(weft_store *s, uint64_t version, json_t **out, weft_error *err)
{
    MDB_txn *txn = NULL;
    int rc = mdb_txn_begin(s->env, NULL, MDB_RDONLY, &txn);
    if (rc)
        return weft_store_mdb_error(rc, "begin read", err);
    weft_err e = get_manifest(txn, s, version, out, err);
    mdb_txn_abort(txn);
    return e;
}

weft_err weft_store_list(weft_store *s, json_t **out, weft_error *err)
{
    MDB_txn *txn = NULL;
    MDB_cursor *cur = NULL;
    json_t *list = json_array();
    weft_err e = WEFT_OK;
    if (!list)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory listing snapshots");
    int rc = mdb_txn_begin(s->env, NULL, MDB_RDONLY, &txn);
    if (!rc)
        rc = mdb_cursor_open(txn, s->catalog, &cur);
    if (rc) {
        e = weft_store_mdb_error(rc, "list catalog", err);
        goto done;
    }
    MDB_val k, v;
    for (rc = mdb_cursor_get(cur, &k, &v, MDB_FIRST); rc == 0;
         rc = mdb_cursor_get(cur, &k, &v, MDB_NEXT)) {
        json_t *m = NULL;
        if ((e = parse_manifest(&v, version_from_key(&k), &m, err)) != WEFT_OK)
            goto done;
        json_array_append_new(list, m);
    }
    if (rc != MDB_NOTFOUND)
        e = weft_store_mdb_error(rc, "list catalog", err);
done:
    mdb_cursor_close(cur);
    if (txn)
        mdb_txn_abort(txn);
    if (e != WEFT_OK) {
        json_decref(list);
        return e;
    }
    *out = list;
    return WEFT_OK;
}

static void now_iso8601(char out[32])
{
    time_t t = time(NULL);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(out, 32, "%Y-%m-%dT%H:%M:%SZ", &tm);
}

static weft_err set_state(MDB_txn *txn, const weft_store *s, uint64_t version, const char *state,
                          weft_error *err)
{
    json_t *m = NULL;
    weft_err e = get_manifest(txn, s, version, &m, err);
    if (e != WEFT_OK)
        return e;
    json_object_set_new(m, "state", json_string(state));
    e = put_manifest(txn, s, version, m, err);
    json_decref(m);
    return e;
}

/* Inside @p txn: make @p version live, the old live previous and retired. */
static weft_err promote_in(MDB_txn *txn, const weft_store *s, uint64_t version, weft_error *err)
{
    uint64_t live = 0;
    weft_err e = get_head(txn, s->head, "live", &live, err);
    if (e != WEFT_OK || live == version)
        return e;
    if (live && (e = set_state(txn, s, live, "retired", err)) != WEFT_OK)
        return e;
    if ((e = set_state(txn, s, version, "live", err)) != WEFT_OK)
        return e;
    if (live && (e = put_head(txn, s->head, "previous", live, err)) != WEFT_OK)
        return e;
    return put_head(txn, s->head, "live", version, err);
}

weft_err weft_store_promote(weft_store *s, uint64_t version, weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    MDB_txn *txn = NULL;
    int rc = mdb_txn_begin(s->env, NULL, 0, &txn);
    if (rc)
        return weft_store_mdb_error(rc, "begin write", err);
    json_t *m = NULL;
    weft_err e = get_manifest(txn, s, version, &m, err);
    if (e == WEFT_OK) {
        const char *state = json_string_value(json_object_get(m, "state"));
        const char *reason = json_string_value(json_object_get(m, "reason"));
        if (state && !strcmp(state, "rejected"))
            e = weft_error_set(err, WEFT_ERR_INVALID, "version %llu was rejected: %s",
                               (unsigned long long)version, reason ? reason : "no reason");
        json_decref(m);
    }
    if (e == WEFT_OK)
        e = promote_in(txn, s, version, err);
    if (e != WEFT_OK) {
        mdb_txn_abort(txn);
        return e;
    }
    rc = mdb_txn_commit(txn);
    return rc ? weft_store_mdb_error(rc, "commit promotion", err) : WEFT_OK;
}

struct weft_store_writer {
    weft_store *store;
    MDB_txn *txn;
    uint64_t version;
    json_t *blobs;   /* name -> {dtype, shape, bytes, crc32} */
};

weft_err weft_store_writer_open(weft_store *s, weft_store_writer **out, uint64_t *version,
                                weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    int dead = 0;
    mdb_reader_check(s->env, &dead);
    weft_store_writer *w = calloc(1, sizeof *w);
    if (!w || !(w->blobs = json_object())) {
        free(w);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory starting a snapshot");
    }
    w->store = s;
    MDB_cursor *cur = NULL;
    int rc = mdb_txn_begin(s->env, NULL, 0, &w->txn);
    if (!rc)
        rc = mdb_cursor_open(w->txn, s->catalog, &cur);
    MDB_val k, v;
    if (!rc) {
        rc = mdb_cursor_get(cur, &k, &v, MDB_LAST);
        w->version = rc == 0 ? version_from_key(&k) + 1 : 1;
        rc = rc == MDB_NOTFOUND ? 0 : rc;
        mdb_cursor_close(cur);
    }
    if (rc) {
        weft_err e = weft_store_mdb_error(rc, "begin snapshot", err);
        weft_store_writer_abort(w);
        return e;
    }
    *out = w;
    if (version)
        *version = w->version;
    return WEFT_OK;
}

weft_err weft_store_writer_put(weft_store_writer *w, const char *name, weft_dtype dtype,
                               size_t ndim, const size_t *shape, const void *data,
                               weft_error *err)
{
    size_t name_len = strlen(name);
    if (name_len == 0 || name_len > WEFT_BLOB_MAX_NAME)
        return weft_error_set(err, WEFT_ERR_INVALID, "blob name '%s': 1 to %d bytes", name,
                              WEFT_BLOB_MAX_NAME);
    if (json_object_get(w->blobs, name))
        return weft_error_set(err, WEFT_ERR_INVALID, "blob '%s' written twice", name);
    size_t esize = weft_dtype_size(dtype);
    if (!esize || ndim == 0 || ndim > WEFT_BLOB_MAX_DIMS)
        return weft_error_set(err, WEFT_ERR_INVALID, "blob '%s': bad dtype or dimensions", name);
    size_t count = 1;
    for (size_t i = 0; i < ndim; i++) {
        if (shape[i] && count > SIZE_MAX / shape[i])
            return weft_error_set(err, WEFT_ERR_INVALID, "blob '%s': shape overflows", name);
        count *= shape[i];
    }
    if (count > (SIZE_MAX - WEFT_BLOB_HEADER_BYTES) / esize)
        return weft_error_set(err, WEFT_ERR_INVALID, "blob '%s': too large", name);
    size_t nbytes = count * esize;

    unsigned char key[8 + WEFT_BLOB_MAX_NAME];
    MDB_val k = { weft_store_blob_key(w->version, name, key, sizeof key), key };
    MDB_val v = { WEFT_BLOB_HEADER_BYTES + nbytes, NULL };
    int rc = mdb_put(w->txn, w->store->blobs, &k, &v, MDB_RESERVE);
    if (rc)
        return weft_store_mdb_error(rc, name, err);
    weft_blob_header h;
    memset(&h, 0, sizeof h);
    memcpy(h.magic, WEFT_BLOB_MAGIC, sizeof h.magic);
    h.dtype = dtype;
    h.ndim = (uint32_t)ndim;
    for (size_t i = 0; i < ndim; i++)
        h.shape[i] = shape[i];
    h.nbytes = nbytes;
    memcpy(v.mv_data, &h, sizeof h);
    if (nbytes)
        memcpy((char *)v.mv_data + WEFT_BLOB_HEADER_BYTES, data, nbytes);
    uLong crc = crc32_z(0L, Z_NULL, 0);
    crc = crc32_z(crc, data, nbytes);

    json_t *jshape = json_array();
    for (size_t i = 0; i < ndim; i++)
        json_array_append_new(jshape, json_integer((json_int_t)shape[i]));
    json_t *desc = json_pack("{s:s, s:o, s:I, s:I}", "dtype", weft_dtype_name(dtype), "shape",
                             jshape, "bytes", (json_int_t)nbytes, "crc32", (json_int_t)crc);
    if (!desc || json_object_set_new(w->blobs, name, desc))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory describing blob '%s'", name);
    return WEFT_OK;
}

weft_err weft_store_writer_commit(weft_store_writer *w, json_t *manifest, bool promote,
                                  const char *state, weft_error *err)
{
    weft_store *s = w->store;
    json_t *m = json_deep_copy(manifest);
    weft_err e = WEFT_OK;
    uint64_t live = 0;
    char created[32];
    if (!m) {
        e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing manifest");
        goto done;
    }
    if ((e = get_head(w->txn, s->head, "live", &live, err)) != WEFT_OK)
        goto done;
    now_iso8601(created);
    json_object_set_new(m, "version", json_integer((json_int_t)w->version));
    json_object_set_new(m, "state", json_string(promote ? "staged" : (state ? state : "staged")));
    json_object_set_new(m, "created", json_string(created));
    json_object_set_new(m, "parent", live ? json_integer((json_int_t)live) : json_null());
    json_object_set(m, "blobs", w->blobs);
    if ((e = put_manifest(w->txn, s, w->version, m, err)) != WEFT_OK)
        goto done;
    if (promote && (e = promote_in(w->txn, s, w->version, err)) != WEFT_OK)
        goto done;
    int rc = mdb_txn_commit(w->txn);
    w->txn = NULL;
    if (rc)
        e = weft_store_mdb_error(rc, "commit snapshot", err);
done:
    json_decref(m);
    weft_store_writer_abort(w);
    return e;
}

void weft_store_writer_abort(weft_store_writer *w)
{
    if (!w)
        return;
    if (w->txn)
        mdb_txn_abort(w->txn);
    json_decref(w->blobs);
    free(w);
}
