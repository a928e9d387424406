/* The snapshot store: LMDB environment, catalog, blobs, head (include/weft/store.h).
 * Invariants: a catalog entry and all its blobs are written in one transaction; head only
 * ever names versions present in the catalog; manifests are JSON objects; a version's blobs
 * never change once committed, so a snapshot verified in a read transaction is still the
 * same when a later write transaction promotes it. */
#include "internal.h"

#include <errno.h>
#include <limits.h>
#include <nettle/sha2.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <time.h>
#include <unistd.h>
#include <zlib.h>

#include "weft/alloc.h"

_Static_assert(sizeof(weft_blob_header) == WEFT_BLOB_HEADER_BYTES, "blob header size");

/* Largest map the store grows to: 64 TiB, inside x86-64's 128 TiB of user address space. */
#define MAX_MAP_SIZE ((size_t)1 << 46)
/* Times one write runs again after the map grew (each time doubling it). */
#define MAX_GROWTHS 16
/* Longest reason kept in a history entry, bytes. */
#define MAX_REASON 1024

/* The manifest fields that belong to one store: set by it, left out of exported files. */
static const char *const store_local_fields[] = { "version", "state", "parent", "history",
                                                  "reason", "forced", "forced_at", "origin" };

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

const char *weft_store_state_name(weft_store_state state)
{
    switch (state) {
    case WEFT_STORE_STATE_STAGED: return "staged";
    case WEFT_STORE_STATE_LIVE: return "live";
    case WEFT_STORE_STATE_RETIRED: return "retired";
    case WEFT_STORE_STATE_REJECTED: return "rejected";
    }
    return NULL;
}

const char *weft_store_format_bytes(double n, char out[16])
{
    static const char *const units[] = { "B", "KiB", "MiB", "GiB", "TiB" };
    size_t u = 0;
    while (n >= 1024 && u + 1 < sizeof units / sizeof units[0]) {
        n /= 1024;
        u++;
    }
    snprintf(out, 16, u ? "%.1f %s" : "%.0f %s", n, units[u]);
    return out;
}

weft_err weft_store_mdb_error(int rc, const char *what, weft_error *err)
{
    switch (rc) {
    case MDB_NOTFOUND:
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: not found", what);
    case MDB_MAP_FULL:
        return weft_error_set(err, WEFT_ERR_LIMIT,
                              "%s: the store's map is full (it grows before the next write)",
                              what);
    case MDB_MAP_RESIZED:
        return weft_error_set(err, WEFT_ERR_LIMIT,
                              "%s: another process grew the store's map: release this "
                              "process's snapshots, then remap (weft_store_remap)", what);
    case ENOSPC:
        return weft_error_set(err, WEFT_ERR_IO, "%s: no space left on device", what);
    case EDQUOT:
        return weft_error_set(err, WEFT_ERR_IO, "%s: disk quota exceeded", what);
    case EFBIG:
        return weft_error_set(err, WEFT_ERR_IO, "%s: file too large", what);
    case MDB_PANIC:
        return weft_error_set(err, WEFT_ERR_STORE, "%s: %s (reopen the store)", what,
                              mdb_strerror(rc));
    }
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

/* ---- the map: size, growth, other processes' growth ---- */

static size_t map_size_of(const weft_store *s)
{
    MDB_envinfo info;
    return mdb_env_info(s->env, &info) == 0 ? info.me_mapsize : 0;
}

struct own_readers {
    long pid;
    size_t n;
};

/* mdb_reader_list() calls this once per line: a title, then "pid thread txnid" per slot in
 * use, txnid "-" when the slot is idle. */
static int count_own_reader(const char *msg, void *ctx)
{
    struct own_readers *o = ctx;
    long pid = 0;
    char txnid[32];
    if (sscanf(msg, "%ld %*s %31s", &pid, txnid) == 2 && pid == o->pid && strcmp(txnid, "-"))
        o->n++;
    return 0;
}

/* Read transactions of this process open on the store (snapshots included). */
static size_t own_readers(const weft_store *s)
{
    struct own_readers o = { (long)getpid(), 0 };
    mdb_reader_list(s->env, count_own_reader, &o);
    return o.n;
}

/* Map @p size bytes (0: the size the file records). LMDB unmaps and maps the file again,
 * which moves every pointer into the map; it checks only for a write transaction, so read
 * transactions of this process (snapshots) are checked here. The caller holds no write
 * transaction, and no other thread of this process begins one meanwhile. */
static weft_err set_map_size(weft_store *s, size_t size, weft_error *err)
{
    char text[16];
    size_t n = own_readers(s);
    if (n)
        return weft_error_set(err, WEFT_ERR_LIMIT,
                              "%s: the store's map must %s, but this process holds %zu "
                              "snapshot(s) or read(s) of it open: release them first",
                              s->dir, size ? "grow" : "follow another process's growth", n);
    int rc = mdb_env_set_mapsize(s->env, size);
    if (rc)
        return weft_error_set(err, WEFT_ERR_LIMIT, "%s: cannot map %s: %s", s->dir,
                              weft_store_format_bytes((double)size, text), mdb_strerror(rc));
    return WEFT_OK;
}

/* A write found the map full: double it before the next write transaction. */
static void note_map_full(weft_store *s)
{
    size_t now = map_size_of(s);
    size_t want = now <= MAX_MAP_SIZE / 2 ? now * 2 : MAX_MAP_SIZE;
    if (want > now && want > s->grow_to)
        s->grow_to = want;
}

/* Apply a growth noted by an earlier write; called with no transaction open. */
static weft_err apply_growth(weft_store *s, weft_error *err)
{
    if (!s->grow_to)
        return WEFT_OK;
    if (s->grow_to > map_size_of(s)) {
        weft_err e = set_map_size(s, s->grow_to, err);
        if (e != WEFT_OK)
            return e;
    }
    s->grow_to = 0;
    return WEFT_OK;
}

/* Why writing the data file failed, with what the file system and process limits say.
 * LMDB reports a short write as EIO (it does not write again to learn ENOSPC or EFBIG):
 * with no free block left on the file system it was a full disk, with the data file grown
 * to the file size limit it was that limit. */
static weft_err disk_error(const weft_store *s, int rc, const char *what, weft_error *err)
{
    char room[64] = "", limit[64] = "", text[16];
    struct statvfs vfs;
    bool is_full = false, is_at_limit = false;
    if (statvfs(s->dir, &vfs) == 0) {
        snprintf(room, sizeof room, "; %s free there",
                 weft_store_format_bytes((double)vfs.f_bavail * (double)vfs.f_frsize, text));
        is_full = vfs.f_bavail == 0;
    }
    struct rlimit rl;
    if (getrlimit(RLIMIT_FSIZE, &rl) == 0 && rl.rlim_cur != RLIM_INFINITY) {
        snprintf(limit, sizeof limit, "; file size limit (ulimit -f) %s",
                 weft_store_format_bytes((double)rl.rlim_cur, text));
        char path[PATH_MAX];
        struct stat st;
        is_at_limit = (size_t)snprintf(path, sizeof path, "%s/data.mdb", s->dir) < sizeof path
                      && stat(path, &st) == 0 && (rlim_t)st.st_size >= rl.rlim_cur;
    }
    const char *why = rc == ENOSPC   ? "no space left on device"
                      : rc == EDQUOT ? "disk quota exceeded"
                      : rc == EFBIG  ? "file too large"
                      : is_full      ? "no space left on device (a short write)"
                      : is_at_limit  ? "file too large (a short write up to the file size limit)"
                                     : "input/output error (a short write: disk full?)";
    return weft_error_set(err, WEFT_ERR_IO,
                          "%s: writing %s/data.mdb failed: %s%s%s; nothing was stored, the "
                          "store is as it was", what, s->dir, why, room, limit);
}

/* weft_store_mdb_error() for a write of @p s: notes a full map, explains a full disk. */
static weft_err store_error(weft_store *s, int rc, const char *what, weft_error *err)
{
    char now[16], next[16];
    if (rc == MDB_MAP_FULL) {
        note_map_full(s);
        if (!s->grow_to)
            return weft_error_set(err, WEFT_ERR_LIMIT, "%s: the store's map (%s) is full and "
                                  "cannot grow further", what,
                                  weft_store_format_bytes((double)map_size_of(s), now));
        return weft_error_set(err, WEFT_ERR_LIMIT, "%s: the store's map (%s) is full; it "
                              "grows to %s before the next write: write again", what,
                              weft_store_format_bytes((double)map_size_of(s), now),
                              weft_store_format_bytes((double)s->grow_to, next));
    }
    if (rc == ENOSPC || rc == EDQUOT || rc == EFBIG || rc == EIO)
        return disk_error(s, rc, what, err);
    return weft_store_mdb_error(rc, what, err);
}

weft_err weft_store_txn_begin(weft_store *s, unsigned flags, MDB_txn **txn, weft_error *err)
{
    int rc = mdb_txn_begin(s->env, NULL, flags, txn);
    if (rc == MDB_MAP_RESIZED) {
        /* Another process grew the map and wrote past ours: adopt the recorded size. */
        weft_err e = set_map_size(s, 0, err);
        if (e != WEFT_OK)
            return e;
        rc = mdb_txn_begin(s->env, NULL, flags, txn);
    }
    if (rc)
        return weft_store_mdb_error(rc, flags & MDB_RDONLY ? "begin read" : "begin write", err);
    return WEFT_OK;
}

weft_err weft_store_usage(weft_store *s, size_t *used, size_t *map_size, weft_error *err)
{
    MDB_envinfo info;
    MDB_stat st;
    int rc = mdb_env_info(s->env, &info);
    if (!rc)
        rc = mdb_env_stat(s->env, &st);
    if (rc)
        return weft_store_mdb_error(rc, "store usage", err);
    if (used)
        *used = (info.me_last_pgno + 1) * (size_t)st.ms_psize;
    if (map_size)
        *map_size = info.me_mapsize;
    return WEFT_OK;
}

weft_err weft_store_reserve(weft_store *s, size_t bytes, weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    size_t used = 0, map = 0;
    weft_err e = weft_store_usage(s, &used, &map, err);
    if (e != WEFT_OK)
        return e;
    char text[16];
    if (bytes > MAX_MAP_SIZE - used)
        return weft_error_set(err, WEFT_ERR_LIMIT, "%s: %s more do not fit in the largest map",
                              s->dir, weft_store_format_bytes((double)bytes, text));
    size_t want = map ? map : 1;
    while (want < used + bytes)
        want = want <= MAX_MAP_SIZE / 2 ? want * 2 : MAX_MAP_SIZE;
    return want > map ? set_map_size(s, want, err) : WEFT_OK;
}

weft_err weft_store_remap(weft_store *s, weft_error *err)
{
    size_t mine = map_size_of(s);
    weft_err e = set_map_size(s, 0, err);
    if (e == WEFT_OK && map_size_of(s) < mine)
        e = set_map_size(s, mine, err);
    return e;
}

/* ---- open, close ---- */

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

/* Map the larger of the asked size and the one the file records (the largest any writer
 * used), so that a process opening a grown store does not start below it. LMDB would take
 * the asked size even when smaller. No transaction is open yet. */
static int adopt_recorded_map(MDB_env *env)
{
    MDB_envinfo info;
    int rc = mdb_env_info(env, &info);
    size_t asked = info.me_mapsize;
    if (!rc)
        rc = mdb_env_set_mapsize(env, 0);
    if (!rc)
        rc = mdb_env_info(env, &info);
    if (!rc && info.me_mapsize < asked)
        rc = mdb_env_set_mapsize(env, asked);
    return rc;
}

/* Bytes the blobs of manifest text @p v take (headers included); 0 when it is not JSON. */
static uint64_t stored_bytes(const MDB_val *v)
{
    json_error_t jerr;
    json_t *m = json_loadb(v->mv_data, v->mv_size, 0, &jerr);
    const char *name;
    json_t *desc;
    uint64_t sum = 0;
    json_object_foreach(json_object_get(m, "blobs"), name, desc) {
        json_int_t n = json_integer_value(json_object_get(desc, "bytes"));
        sum += (n > 0 ? (uint64_t)n : 0) + WEFT_BLOB_HEADER_BYTES;
    }
    json_decref(m);
    return sum;
}

/* The largest snapshot stored, in bytes (0 for an empty store or on a read failure). */
static uint64_t largest_snapshot(weft_store *s)
{
    MDB_txn *txn = NULL;
    MDB_cursor *cur = NULL;
    MDB_val k, v;
    uint64_t largest = 0;
    if (mdb_txn_begin(s->env, NULL, MDB_RDONLY, &txn))
        return 0;
    int rc = mdb_cursor_open(txn, s->catalog, &cur);
    for (rc = rc ? rc : mdb_cursor_get(cur, &k, &v, MDB_FIRST); rc == 0;
         rc = mdb_cursor_get(cur, &k, &v, MDB_NEXT)) {
        uint64_t n = stored_bytes(&v);
        largest = n > largest ? n : largest;
    }
    mdb_cursor_close(cur);
    mdb_txn_abort(txn);
    return largest;
}

/* A writable store keeps room in its map for two more snapshots as large as the largest one
 * stored. A process cannot grow the map while it holds a snapshot (as weft train does while
 * it carries a model over from the live one), and a grown size is recorded only by a commit:
 * this way the next such write usually fits without growing, and a process that ran out of
 * map leaves the next one enough room once its data is stored. No transaction is open. */
static weft_err keep_headroom(weft_store *s, weft_error *err)
{
    size_t used = 0, map = 0;
    weft_err e = weft_store_usage(s, &used, &map, err);
    uint64_t want = used + 2 * largest_snapshot(s);
    if (e != WEFT_OK || want <= map)
        return e;
    int rc = mdb_env_set_mapsize(s->env, want < MAX_MAP_SIZE ? (size_t)want : MAX_MAP_SIZE);
    return rc ? weft_store_mdb_error(rc, "grow the map", err) : WEFT_OK;
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
    if ((mrc = adopt_recorded_map(s->env))) {
        rc = weft_store_mdb_error(mrc, "map the store", err);
        goto done;
    }
    int dead = 0;
    if (mdb_reader_check(s->env, &dead) == 0 && dead > 0)   /* failure is harmless */
        s->n_stale_readers += (size_t)dead;
    rc = open_dbis(s, err);
    if (rc == WEFT_OK && !is_readonly)
        rc = keep_headroom(s, err);
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

size_t weft_store_stale_readers(const weft_store *s)
{
    return s->n_stale_readers;
}

/* A short write transaction: @p fn fills it; on a full map it runs again after growing. */
typedef weft_err (*write_fn)(MDB_txn *txn, weft_store *s, void *ctx, weft_error *err);

static weft_err run_write(weft_store *s, write_fn fn, void *ctx, const char *what,
                          weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    for (size_t attempt = 0;; attempt++) {
        MDB_txn *txn = NULL;
        weft_err e = apply_growth(s, err);
        if (e == WEFT_OK)
            e = weft_store_txn_begin(s, 0, &txn, err);
        if (e != WEFT_OK)
            return e;   /* the map could not grow (or follow): running again would not help */
        e = fn(txn, s, ctx, err);
        if (e == WEFT_OK) {
            int rc = mdb_txn_commit(txn);
            txn = NULL;
            if (rc)
                e = store_error(s, rc, what, err);
        }
        if (txn)
            mdb_txn_abort(txn);
        if (e != WEFT_ERR_LIMIT || !s->grow_to || attempt == MAX_GROWTHS)
            return e;
    }
}

/* ---- head, catalog ---- */

static weft_err get_head(MDB_txn *txn, const weft_store *s, const char *key, uint64_t *out,
                         weft_error *err)
{
    MDB_val k = { strlen(key), (void *)key }, v;
    int rc = mdb_get(txn, s->head, &k, &v);
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

/* head[@p key] = @p version; version 0 removes the key. */
static weft_err put_head(MDB_txn *txn, weft_store *s, const char *key, uint64_t version,
                         weft_error *err)
{
    unsigned char buf[8];
    weft_store_version_key(version, buf);
    MDB_val k = { strlen(key), (void *)key }, v = { 8, buf };
    int rc = version ? mdb_put(txn, s->head, &k, &v, 0) : mdb_del(txn, s->head, &k, NULL);
    if (rc == MDB_NOTFOUND && !version)
        rc = 0;
    return rc ? store_error(s, rc, "write head", err) : WEFT_OK;
}

static weft_err get_heads(MDB_txn *txn, const weft_store *s, uint64_t *live, uint64_t *previous,
                          weft_error *err)
{
    weft_err e = get_head(txn, s, "live", live, err);
    return e == WEFT_OK ? get_head(txn, s, "previous", previous, err) : e;
}

weft_err weft_store_head(weft_store *s, uint64_t *live, uint64_t *previous, weft_error *err)
{
    MDB_txn *txn = NULL;
    weft_err e = weft_store_txn_begin(s, MDB_RDONLY, &txn, err);
    if (e != WEFT_OK)
        return e;
    uint64_t l = 0, p = 0;
    e = get_heads(txn, s, &l, &p, err);
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

/* The stored manifest text of @p version, pointing into the map. */
static weft_err get_manifest_text(MDB_txn *txn, const weft_store *s, uint64_t version,
                                  MDB_val *out, weft_error *err)
{
    unsigned char key[8];
    weft_store_version_key(version, key);
    MDB_val k = { 8, key };
    int rc = mdb_get(txn, s->catalog, &k, out);
    if (rc == MDB_NOTFOUND)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "no snapshot version %llu",
                              (unsigned long long)version);
    return rc ? weft_store_mdb_error(rc, "read catalog", err) : WEFT_OK;
}

static weft_err get_manifest(MDB_txn *txn, const weft_store *s, uint64_t version, json_t **out,
                             weft_error *err)
{
    MDB_val v;
    weft_err e = get_manifest_text(txn, s, version, &v, err);
    return e == WEFT_OK ? parse_manifest(&v, version, out, err) : e;
}

/* The stored text of a manifest: compact, floats to 9 digits (float32 round-trips). Loading
 * and dumping it again gives the same bytes, which export relies on. */
static char *manifest_text(const json_t *m)
{
    return json_dumps(m, JSON_COMPACT | JSON_REAL_PRECISION(9));
}

static weft_err put_manifest(MDB_txn *txn, weft_store *s, uint64_t version, const json_t *m,
                             weft_error *err)
{
    char *text = manifest_text(m);
    if (!text)
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot serialise manifest");
    unsigned char key[8];
    weft_store_version_key(version, key);
    MDB_val k = { 8, key }, v = { strlen(text), text };
    int rc = mdb_put(txn, s->catalog, &k, &v, 0);
    free(text);
    return rc ? store_error(s, rc, "write catalog", err) : WEFT_OK;
}

weft_err weft_store_manifest(weft_store *s, uint64_t version, json_t **out, weft_error *err)
{
    MDB_txn *txn = NULL;
    weft_err e = weft_store_txn_begin(s, MDB_RDONLY, &txn, err);
    if (e != WEFT_OK)
        return e;
    e = get_manifest(txn, s, version, out, err);
    mdb_txn_abort(txn);
    return e;
}

weft_err weft_store_list(weft_store *s, json_t **out, weft_error *err)
{
    MDB_txn *txn = NULL;
    MDB_cursor *cur = NULL;
    json_t *list = json_array();
    if (!list)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory listing snapshots");
    weft_err e = weft_store_txn_begin(s, MDB_RDONLY, &txn, err);
    if (e != WEFT_OK)
        goto done;
    int rc = mdb_cursor_open(txn, s->catalog, &cur);
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
        if (json_array_append_new(list, m)) {
            e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory listing snapshots");
            goto done;
        }
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

/* ---- states and their history ---- */

static void now_iso8601(char out[32])
{
    time_t t = time(NULL);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(out, 32, "%Y-%m-%dT%H:%M:%SZ", &tm);
}

/* A reason must fit a history entry: UTF-8 (jansson refuses anything else), bounded. */
static weft_err check_change(const weft_store_change *how, weft_error *err)
{
    if (!how || !how->reason)
        return WEFT_OK;
    if (strlen(how->reason) > MAX_REASON)
        return weft_error_set(err, WEFT_ERR_INVALID, "reason: longer than %d bytes", MAX_REASON);
    json_t *t = json_string(how->reason);
    json_decref(t);
    return t ? WEFT_OK : weft_error_set(err, WEFT_ERR_INVALID, "reason: not valid UTF-8");
}

/* Append {"state", "at", "reason"?, "forced"?, "previous"?} to @p m's "history". */
static weft_err add_history(json_t *m, const char *state, const char *at, const char *reason,
                            bool is_forced, uint64_t previous, weft_error *err)
{
    json_t *h = json_object_get(m, "history");
    if (!json_is_array(h) && json_object_set_new(m, "history", h = json_array()))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory recording history");
    json_t *e = json_pack("{s:s, s:s}", "state", state, "at", at);
    bool is_bad = !e;
    if (!is_bad && reason && reason[0])
        is_bad = json_object_set_new(e, "reason", json_string(reason)) != 0;
    if (!is_bad && is_forced)
        is_bad = json_object_set_new(e, "forced", json_true()) != 0;
    if (!is_bad && previous)
        is_bad = json_object_set_new(e, "previous", json_integer((json_int_t)previous)) != 0;
    if (is_bad) {
        json_decref(e);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory recording history");
    }
    return json_array_append_new(h, e)
               ? weft_error_set(err, WEFT_ERR_NOMEM, "out of memory recording history")
               : WEFT_OK;
}

static bool has_state(const json_t *m, const char *state)
{
    const char *st = json_string_value(json_object_get(m, "state"));
    return st && !strcmp(st, state);
}

/* Inside @p txn: version @p version (live until now) becomes "retired" for @p reason. */
static weft_err retire_in(MDB_txn *txn, weft_store *s, uint64_t version, const char *reason,
                          const char *at, weft_error *err)
{
    json_t *m = NULL;
    weft_err e = get_manifest(txn, s, version, &m, err);
    if (e == WEFT_OK && json_object_set_new(m, "state", json_string("retired")))
        e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory updating a manifest");
    if (e == WEFT_OK)
        e = add_history(m, "retired", at, reason, false, 0, err);
    if (e == WEFT_OK)
        e = put_manifest(txn, s, version, m, err);
    json_decref(m);
    return e;
}

/* Inside @p txn: manifest @p m of @p version becomes "live" with head.previous = @p previous
 * (0: none); the head itself is the caller's. */
static weft_err make_live_in(MDB_txn *txn, weft_store *s, uint64_t version, json_t *m,
                             const char *reason, bool is_forced, uint64_t previous,
                             const char *at, weft_error *err)
{
    bool is_bad = json_object_set_new(m, "state", json_string("live")) != 0;
    if (!is_bad && is_forced)
        is_bad = json_object_set_new(m, "forced", json_true()) ||
                 json_object_set_new(m, "forced_at", json_string(at));
    if (is_bad)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory updating a manifest");
    weft_err e = add_history(m, "live", at, reason, is_forced, previous, err);
    return e == WEFT_OK ? put_manifest(txn, s, version, m, err) : e;
}

/* "<what>: <reason>" when a reason was given, else @p what. */
static void with_reason(char *out, size_t cap, const char *what, const weft_store_change *how)
{
    if (how && how->reason && how->reason[0])
        snprintf(out, cap, "%s: %s", what, how->reason);
    else
        snprintf(out, cap, "%s", what);
}

/* Verify @p version before it goes live: WEFT_ERR_CORRUPT naming the first problem. */
static weft_err refuse_if_damaged(weft_store *s, uint64_t version, const char *action,
                                  weft_error *err)
{
    json_t *report = NULL;
    size_t n = 0;
    weft_err e = weft_store_verify(s, version, &report, &n, err);
    if (e != WEFT_OK)
        return e;
    if (n) {
        const json_t *p = json_array_get(json_object_get(report, "problems"), 0);
        const char *blob = json_string_value(json_object_get(p, "blob"));
        e = weft_error_set(err, WEFT_ERR_CORRUPT,
                           "version %llu fails verification, not %s (%zu problem%s; %s%s%s%s)",
                           (unsigned long long)version, action, n, n == 1 ? "" : "s",
                           blob ? "blob '" : "", blob ? blob : "", blob ? "': " : "",
                           json_string_value(json_object_get(p, "problem")));
    }
    json_decref(report);
    return e;
}

struct promote_ctx {
    uint64_t version;
    const weft_store_change *how;
};

static weft_err promote_txn(MDB_txn *txn, weft_store *s, void *ctx, weft_error *err)
{
    const struct promote_ctx *p = ctx;
    json_t *m = NULL;
    uint64_t live = 0;
    char at[32], why[MAX_REASON + 64];
    weft_err e = get_manifest(txn, s, p->version, &m, err);
    if (e == WEFT_OK)
        e = get_head(txn, s, "live", &live, err);
    if (e != WEFT_OK || live == p->version)
        goto done;
    bool is_rejected = has_state(m, "rejected");
    if (is_rejected && !(p->how && p->how->is_forced)) {
        const char *reason = json_string_value(json_object_get(m, "reason"));
        e = weft_error_set(err, WEFT_ERR_INVALID,
                           "version %llu was rejected (%s): promote it with force to override",
                           (unsigned long long)p->version, reason ? reason : "no reason given");
        goto done;
    }
    now_iso8601(at);
    snprintf(why, sizeof why, "replaced by version %llu", (unsigned long long)p->version);
    if (live && (e = retire_in(txn, s, live, why, at, err)) != WEFT_OK)
        goto done;
    with_reason(why, sizeof why, is_rejected ? "promoted past its rejection" : "promoted",
                p->how);
    if ((e = make_live_in(txn, s, p->version, m, why, is_rejected, live, at, err)) != WEFT_OK)
        goto done;
    if (live && (e = put_head(txn, s, "previous", live, err)) != WEFT_OK)
        goto done;
    e = put_head(txn, s, "live", p->version, err);
done:
    json_decref(m);
    return e;
}

weft_err weft_store_promote_with(weft_store *s, uint64_t version, const weft_store_change *how,
                                 weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    weft_err e = check_change(how, err);
    if (e == WEFT_OK)
        e = refuse_if_damaged(s, version, "promoted", err);
    struct promote_ctx ctx = { version, how };
    return e == WEFT_OK ? run_write(s, promote_txn, &ctx, "commit promotion", err) : e;
}

weft_err weft_store_promote(weft_store *s, uint64_t version, weft_error *err)
{
    return weft_store_promote_with(s, version, NULL, err);
}

/* What head.previous was when @p m's version was last made live: the "previous" of the
 * last "live" entry of its history; 0 when not recorded. */
static uint64_t recorded_previous(const json_t *m)
{
    const json_t *h = json_object_get(m, "history");
    for (size_t i = json_array_size(h); i-- > 0;) {
        const json_t *entry = json_array_get(h, i);
        if (!has_state(entry, "live"))
            continue;
        json_int_t p = json_integer_value(json_object_get(entry, "previous"));
        return p > 0 ? (uint64_t)p : 0;
    }
    return 0;
}

struct rollback_ctx {
    uint64_t live, previous;   /* the head that was verified */
    const weft_store_change *how;
};

/* The version head.previous should name once @p restored is live again, or 0. */
static uint64_t previous_after_rollback(MDB_txn *txn, const weft_store *s, const json_t *restored,
                                        uint64_t retired)
{
    uint64_t before = recorded_previous(restored);
    json_t *m = NULL;
    if (!before || before == retired || get_manifest(txn, s, before, &m, NULL) != WEFT_OK)
        return 0;
    bool is_usable = !has_state(m, "rejected");
    json_decref(m);
    return is_usable ? before : 0;
}

static weft_err rollback_txn(MDB_txn *txn, weft_store *s, void *ctx, weft_error *err)
{
    const struct rollback_ctx *r = ctx;
    uint64_t live = 0, prev = 0;
    json_t *m = NULL;
    char at[32], what[96], why[MAX_REASON + 96];
    weft_err e = get_heads(txn, s, &live, &prev, err);
    if (e == WEFT_OK && (live != r->live || prev != r->previous))
        e = weft_error_set(err, WEFT_ERR_STORE, "%s: the head changed while rolling back "
                           "(another process promoted): run the rollback again", s->dir);
    if (e == WEFT_OK)
        e = get_manifest(txn, s, prev, &m, err);
    if (e != WEFT_OK)
        goto done;
    uint64_t before = previous_after_rollback(txn, s, m, live);
    now_iso8601(at);
    snprintf(what, sizeof what, "rolled back to version %llu", (unsigned long long)prev);
    with_reason(why, sizeof why, what, r->how);
    if (live && (e = retire_in(txn, s, live, why, at, err)) != WEFT_OK)
        goto done;
    snprintf(what, sizeof what, "rollback from version %llu", (unsigned long long)live);
    with_reason(why, sizeof why, what, r->how);
    if ((e = make_live_in(txn, s, prev, m, why, false, before, at, err)) != WEFT_OK ||
        (e = put_head(txn, s, "live", prev, err)) != WEFT_OK)
        goto done;
    e = put_head(txn, s, "previous", before, err);
done:
    json_decref(m);
    return e;
}

weft_err weft_store_rollback(weft_store *s, const weft_store_change *how, uint64_t *live,
                             weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    struct rollback_ctx ctx = { 0, 0, how };
    weft_err e = check_change(how, err);
    if (e == WEFT_OK)
        e = weft_store_head(s, &ctx.live, &ctx.previous, err);
    if (e != WEFT_OK)
        return e;
    if (!ctx.previous)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: no previous version to roll back to",
                              s->dir);
    if ((e = refuse_if_damaged(s, ctx.previous, "restored", err)) != WEFT_OK ||
        (e = run_write(s, rollback_txn, &ctx, "commit rollback", err)) != WEFT_OK)
        return e;
    if (live)
        *live = ctx.previous;
    return WEFT_OK;
}

/* ---- verification ---- */

/* A blob as its manifest entry describes it. */
struct blob_desc {
    weft_dtype dtype;
    size_t ndim;
    uint64_t shape[WEFT_BLOB_MAX_DIMS];
    uint64_t bytes;
    uint32_t crc;
};

static bool dtype_from_name(const char *name, weft_dtype *out)
{
    static const weft_dtype all[] = { WEFT_DTYPE_U8, WEFT_DTYPE_U32, WEFT_DTYPE_U64,
                                      WEFT_DTYPE_F32 };
    for (size_t i = 0; name && i < sizeof all / sizeof all[0]; i++)
        if (!strcmp(name, weft_dtype_name(all[i]))) {
            *out = all[i];
            return true;
        }
    return false;
}

/* Read manifest entry @p desc; false with the fault in @p why when it is malformed. */
static bool parse_desc(const json_t *desc, struct blob_desc *d, char *why, size_t cap)
{
    const json_t *shape = json_object_get(desc, "shape");
    const json_t *bytes = json_object_get(desc, "bytes"), *crc = json_object_get(desc, "crc32");
    memset(d, 0, sizeof *d);
    if (!dtype_from_name(json_string_value(json_object_get(desc, "dtype")), &d->dtype) ||
        !json_is_array(shape) || json_array_size(shape) == 0 ||
        json_array_size(shape) > WEFT_BLOB_MAX_DIMS || !json_is_integer(bytes) ||
        json_integer_value(bytes) < 0 || !json_is_integer(crc) || json_integer_value(crc) < 0 ||
        json_integer_value(crc) > 0xffffffffll) {
        snprintf(why, cap, "manifest entry malformed (dtype, shape, bytes, crc32)");
        return false;
    }
    d->ndim = json_array_size(shape);
    d->bytes = (uint64_t)json_integer_value(bytes);
    d->crc = (uint32_t)json_integer_value(crc);
    uint64_t count = 1;
    for (size_t i = 0; i < d->ndim; i++) {
        json_int_t n = json_integer_value(json_array_get(shape, i));
        if (!json_is_integer(json_array_get(shape, i)) || n < 0) {
            snprintf(why, cap, "manifest shape malformed");
            return false;
        }
        d->shape[i] = (uint64_t)n;
        count = (d->shape[i] && count > UINT64_MAX / d->shape[i]) ? UINT64_MAX
                                                                   : count * d->shape[i];
    }
    size_t esize = weft_dtype_size(d->dtype);
    if (count > UINT64_MAX / esize || count * esize != d->bytes) {
        snprintf(why, cap, "manifest shape and bytes disagree");
        return false;
    }
    return true;
}

/* Check the first WEFT_BLOB_HEADER_BYTES of a stored value of @p value_len bytes: every
 * one of its 48 bytes is either compared with the manifest or required to be zero. */
static bool check_header(const struct blob_desc *d, const void *value, size_t value_len,
                         char *why, size_t cap)
{
    if (value_len < WEFT_BLOB_HEADER_BYTES) {
        snprintf(why, cap, "stored value of %zu bytes is shorter than its %d-byte header",
                 value_len, WEFT_BLOB_HEADER_BYTES);
        return false;
    }
    weft_blob_header h;
    memcpy(&h, value, sizeof h);   /* small values are not aligned */
    if (memcmp(h.magic, WEFT_BLOB_MAGIC, sizeof h.magic)) {
        snprintf(why, cap, "header magic damaged");
        return false;
    }
    if (h.dtype != (uint32_t)d->dtype || h.ndim != d->ndim) {
        snprintf(why, cap, "header says dtype %u with %u dimensions, the manifest %s with %zu",
                 h.dtype, h.ndim, weft_dtype_name(d->dtype), d->ndim);
        return false;
    }
    for (size_t i = 0; i < WEFT_BLOB_MAX_DIMS; i++) {
        uint64_t want = i < d->ndim ? d->shape[i] : 0;
        if (h.shape[i] != want) {
            snprintf(why, cap, "header shape[%zu] is %llu, expected %llu", i,
                     (unsigned long long)h.shape[i], (unsigned long long)want);
            return false;
        }
    }
    if (h.nbytes != d->bytes || value_len - WEFT_BLOB_HEADER_BYTES != d->bytes) {
        snprintf(why, cap, "header says %llu data bytes, %zu are stored, the manifest lists %llu",
                 (unsigned long long)h.nbytes, value_len - WEFT_BLOB_HEADER_BYTES,
                 (unsigned long long)d->bytes);
        return false;
    }
    return true;
}

static uint32_t crc_of(const void *data, size_t n)
{
    return (uint32_t)crc32_z(crc32_z(0L, Z_NULL, 0), data, n);
}

/* Check stored value @p v against @p desc: header, then the CRC-32 of the data. */
static bool check_value(const json_t *desc, const MDB_val *v, char *why, size_t cap)
{
    struct blob_desc d;
    if (!parse_desc(desc, &d, why, cap) || !check_header(&d, v->mv_data, v->mv_size, why, cap))
        return false;
    uint32_t crc = crc_of((const char *)v->mv_data + WEFT_BLOB_HEADER_BYTES, d.bytes);
    if (crc != d.crc) {
        snprintf(why, cap, "CRC-32 of the data is %08x, the manifest says %08x: the data is "
                 "damaged", crc, d.crc);
        return false;
    }
    return true;
}

struct verify_run {
    json_t *versions, *problems;
};

static weft_err add_problem(struct verify_run *run, uint64_t version, const char *blob,
                            const char *fmt, ...) __attribute__((format(printf, 4, 5)));

static weft_err add_problem(struct verify_run *run, uint64_t version, const char *blob,
                            const char *fmt, ...)
{
    char text[384];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(text, sizeof text, fmt, ap);
    va_end(ap);
    json_t *p = json_pack("{s:I, s:o, s:s}", "version", (json_int_t)version, "blob",
                          blob ? json_stringn(blob, strnlen(blob, 1024)) : json_null(),
                          "problem", text);
    return p && !json_array_append_new(run->problems, p) ? WEFT_OK : WEFT_ERR_NOMEM;
}

/* Blob names stored under @p version that @p blobs (its manifest's object) does not list. */
static weft_err find_unlisted(MDB_txn *txn, const weft_store *s, uint64_t version,
                              const json_t *blobs, struct verify_run *run, weft_error *err)
{
    MDB_cursor *cur = NULL;
    unsigned char prefix[8];
    weft_store_version_key(version, prefix);
    int rc = mdb_cursor_open(txn, s->blobs, &cur);
    MDB_val k = { 8, prefix }, v;
    weft_err e = WEFT_OK;
    for (rc = rc ? rc : mdb_cursor_get(cur, &k, &v, MDB_SET_RANGE);
         rc == 0 && e == WEFT_OK && k.mv_size >= 8 && !memcmp(k.mv_data, prefix, 8);
         rc = mdb_cursor_get(cur, &k, &v, MDB_NEXT)) {
        char name[WEFT_BLOB_MAX_NAME + 1];
        size_t n = k.mv_size - 8 < WEFT_BLOB_MAX_NAME ? k.mv_size - 8 : WEFT_BLOB_MAX_NAME;
        memcpy(name, (const char *)k.mv_data + 8, n);
        name[n] = '\0';
        if (!json_object_get(blobs, name))
            e = add_problem(run, version, name, "stored but not listed in the manifest");
    }
    mdb_cursor_close(cur);
    if (e != WEFT_OK)
        return weft_error_set(err, e, "out of memory verifying");
    if (rc && rc != MDB_NOTFOUND)
        return weft_store_mdb_error(rc, "scan blobs", err);
    return WEFT_OK;
}

/* Verify @p version, whose stored manifest text is @p text, into @p run. */
static weft_err verify_version(MDB_txn *txn, const weft_store *s, uint64_t version,
                               const MDB_val *text, struct verify_run *run, weft_error *err)
{
    json_t *m = NULL;
    size_t n_blobs = 0, n_bad = 0;
    uint64_t bytes = 0;
    weft_err e = WEFT_OK;
    const json_t *blobs = NULL;
    if (parse_manifest(text, version, &m, NULL) != WEFT_OK ||
        !json_is_object(blobs = json_object_get(m, "blobs"))) {
        n_bad++;
        e = add_problem(run, version, NULL, "manifest is not a JSON object with \"blobs\"");
    }
    const char *name;
    const json_t *desc;
    json_object_foreach((json_t *)blobs, name, desc) {
        unsigned char key[8 + WEFT_BLOB_MAX_NAME];
        size_t klen = weft_store_blob_key(version, name, key, sizeof key);
        MDB_val k = { klen, key }, v;
        char why[256];
        int rc = klen ? mdb_get(txn, s->blobs, &k, &v) : MDB_NOTFOUND;
        n_blobs++;
        if (rc && rc != MDB_NOTFOUND) {
            json_decref(m);
            return weft_store_mdb_error(rc, name, err);
        }
        if (rc)
            snprintf(why, sizeof why, "listed in the manifest but not stored");
        else
            bytes += v.mv_size;
        if (e == WEFT_OK && (rc || !check_value(desc, &v, why, sizeof why))) {
            n_bad++;
            e = add_problem(run, version, name, "%s", why);
        }
    }
    size_t before = json_array_size(run->problems);
    if (e == WEFT_OK && blobs && (e = find_unlisted(txn, s, version, blobs, run, err)) != WEFT_OK) {
        json_decref(m);
        return e;
    }
    n_bad += json_array_size(run->problems) - before;
    json_decref(m);
    json_t *row = json_pack("{s:I, s:I, s:I, s:b}", "version", (json_int_t)version, "blobs",
                            (json_int_t)n_blobs, "bytes", (json_int_t)bytes, "ok", n_bad == 0);
    if (e != WEFT_OK || !row || json_array_append_new(run->versions, row))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory verifying");
    return WEFT_OK;
}

/* Blobs stored under a version the catalog lacks (one problem per such version). */
static weft_err find_orphans(MDB_txn *txn, const weft_store *s, struct verify_run *run,
                             weft_error *err)
{
    MDB_cursor *cur = NULL;
    int rc = mdb_cursor_open(txn, s->blobs, &cur);
    MDB_val k, v;
    uint64_t last = 0;
    bool is_first = true;
    weft_err e = WEFT_OK;
    for (rc = rc ? rc : mdb_cursor_get(cur, &k, &v, MDB_FIRST); rc == 0 && e == WEFT_OK;
         rc = mdb_cursor_get(cur, &k, &v, MDB_NEXT)) {
        uint64_t version = version_from_key(&k);
        if (!is_first && version == last)
            continue;
        is_first = false;
        last = version;
        unsigned char key[8];
        weft_store_version_key(version, key);
        MDB_val ck = { 8, key }, cv;
        int grc = mdb_get(txn, s->catalog, &ck, &cv);
        if (grc == MDB_NOTFOUND)
            e = add_problem(run, version, NULL, "blobs stored under a version the catalog lacks");
        else if (grc) {
            rc = grc;
            break;
        }
    }
    mdb_cursor_close(cur);
    if (e != WEFT_OK)
        return weft_error_set(err, e, "out of memory verifying");
    if (rc && rc != MDB_NOTFOUND)
        return weft_store_mdb_error(rc, "scan blobs", err);
    return WEFT_OK;
}

/* Every version of the catalog, the orphan blobs, and the head. */
static weft_err verify_all(MDB_txn *txn, const weft_store *s, uint64_t live, uint64_t prev,
                           struct verify_run *run, weft_error *err)
{
    MDB_cursor *cur = NULL;
    int rc = mdb_cursor_open(txn, s->catalog, &cur);
    MDB_val k, v;
    weft_err e = WEFT_OK;
    bool has_live = !live, has_prev = !prev;
    for (rc = rc ? rc : mdb_cursor_get(cur, &k, &v, MDB_FIRST); rc == 0 && e == WEFT_OK;
         rc = mdb_cursor_get(cur, &k, &v, MDB_NEXT)) {
        uint64_t version = version_from_key(&k);
        has_live |= version == live;
        has_prev |= version == prev;
        e = verify_version(txn, s, version, &v, run, err);
    }
    mdb_cursor_close(cur);
    if (e != WEFT_OK)
        return e;
    if (rc != MDB_NOTFOUND)
        return weft_store_mdb_error(rc, "scan catalog", err);
    if ((!has_live && add_problem(run, live, NULL, "head 'live' names a version the catalog "
                                  "lacks")) ||
        (!has_prev && add_problem(run, prev, NULL, "head 'previous' names a version the "
                                  "catalog lacks")))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory verifying");
    return find_orphans(txn, s, run, err);
}

weft_err weft_store_verify(weft_store *s, uint64_t version, json_t **report, size_t *n_problems,
                           weft_error *err)
{
    MDB_txn *txn = NULL;
    struct verify_run run = { json_array(), json_array() };
    uint64_t live = 0, prev = 0;
    json_t *out = NULL;
    int dead = 0;
    if (mdb_reader_check(s->env, &dead) == 0 && dead > 0)
        s->n_stale_readers += (size_t)dead;
    weft_err e = run.versions && run.problems
                     ? weft_store_txn_begin(s, MDB_RDONLY, &txn, err)
                     : weft_error_set(err, WEFT_ERR_NOMEM, "out of memory verifying");
    if (e == WEFT_OK)
        e = get_heads(txn, s, &live, &prev, err);
    if (e == WEFT_OK && version) {
        MDB_val text;
        if ((e = get_manifest_text(txn, s, version, &text, err)) == WEFT_OK)
            e = verify_version(txn, s, version, &text, &run, err);
    } else if (e == WEFT_OK) {
        e = verify_all(txn, s, live, prev, &run, err);
    }
    if (txn)
        mdb_txn_abort(txn);
    size_t n = json_array_size(run.problems);
    if (e == WEFT_OK &&
        !(out = json_pack("{s:O, s:O, s:I, s:I, s:I}", "versions", run.versions, "problems",
                          run.problems, "live", (json_int_t)live, "previous", (json_int_t)prev,
                          "stale_readers_cleared", (json_int_t)s->n_stale_readers)))
        e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory verifying");
    json_decref(run.versions);
    json_decref(run.problems);
    if (e != WEFT_OK)
        return e;
    *report = out;
    if (n_problems)
        *n_problems = n;
    return WEFT_OK;
}

/* ---- pruning ---- */

/* Delete every blob stored under @p version; adds the bytes freed to @p bytes. */
static weft_err delete_blobs(MDB_txn *txn, weft_store *s, uint64_t version, uint64_t *bytes,
                             weft_error *err)
{
    unsigned char prefix[8];
    weft_store_version_key(version, prefix);
    for (;;) {
        /* Position afresh each time: simpler than relying on a cursor after a delete. */
        MDB_cursor *cur = NULL;
        MDB_val k = { 8, prefix }, v;
        int rc = mdb_cursor_open(txn, s->blobs, &cur);
        if (!rc)
            rc = mdb_cursor_get(cur, &k, &v, MDB_SET_RANGE);
        bool is_mine = rc == 0 && k.mv_size >= 8 && !memcmp(k.mv_data, prefix, 8);
        if (is_mine) {
            *bytes += v.mv_size;
            rc = mdb_cursor_del(cur, 0);
        }
        mdb_cursor_close(cur);
        if (rc == MDB_NOTFOUND || (rc == 0 && !is_mine))
            return WEFT_OK;
        if (rc)
            return store_error(s, rc, "delete blobs", err);
    }
}

struct prune_ctx {
    size_t keep;
    json_t *deleted;
};

/* Catalog versions other than @p live and @p prev, oldest first, into @p out (caller frees). */
static weft_err prunable(MDB_txn *txn, const weft_store *s, uint64_t live, uint64_t prev,
                         uint64_t **out, size_t *n, weft_error *err)
{
    MDB_cursor *cur = NULL;
    MDB_stat st;
    int rc = mdb_stat(txn, s->catalog, &st);
    if (!rc)
        rc = mdb_cursor_open(txn, s->catalog, &cur);
    if (rc)
        return weft_store_mdb_error(rc, "scan catalog", err);
    uint64_t *v = weft_alloc_array(st.ms_entries + 1, sizeof *v);
    if (!v) {
        mdb_cursor_close(cur);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory pruning");
    }
    MDB_val k, d;
    *n = 0;
    for (rc = mdb_cursor_get(cur, &k, &d, MDB_FIRST); rc == 0 && *n < st.ms_entries;
         rc = mdb_cursor_get(cur, &k, &d, MDB_NEXT)) {
        uint64_t version = version_from_key(&k);
        if (version != live && version != prev)
            v[(*n)++] = version;
    }
    mdb_cursor_close(cur);
    if (rc && rc != MDB_NOTFOUND) {
        free(v);
        return weft_store_mdb_error(rc, "scan catalog", err);
    }
    *out = v;
    return WEFT_OK;
}

static weft_err prune_txn(MDB_txn *txn, weft_store *s, void *ctx, weft_error *err)
{
    struct prune_ctx *p = ctx;
    uint64_t live = 0, prev = 0, *versions = NULL;
    size_t n = 0;
    json_array_clear(p->deleted);   /* a retry after the map grew starts over */
    weft_err e = get_heads(txn, s, &live, &prev, err);
    if (e == WEFT_OK)
        e = prunable(txn, s, live, prev, &versions, &n, err);
    for (size_t i = 0; e == WEFT_OK && n > p->keep && i < n - p->keep; i++) {
        json_t *m = NULL;
        uint64_t bytes = 0;
        unsigned char key[8];
        weft_store_version_key(versions[i], key);
        MDB_val k = { 8, key };
        if ((e = get_manifest(txn, s, versions[i], &m, err)) != WEFT_OK ||
            (e = delete_blobs(txn, s, versions[i], &bytes, err)) != WEFT_OK) {
            json_decref(m);
            break;
        }
        int rc = mdb_del(txn, s->catalog, &k, NULL);
        json_t *row = json_pack("{s:I, s:O, s:I}", "version", (json_int_t)versions[i], "state",
                                json_object_get(m, "state") ? json_object_get(m, "state")
                                                            : json_null(),
                                "bytes", (json_int_t)bytes);
        json_decref(m);
        if (rc) {
            json_decref(row);
            e = store_error(s, rc, "delete catalog entry", err);
        } else if (!row || json_array_append_new(p->deleted, row)) {
            e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory pruning");
        }
    }
    free(versions);
    return e;
}

weft_err weft_store_prune(weft_store *s, size_t keep, json_t **deleted, weft_error *err)
{
    struct prune_ctx ctx = { keep, json_array() };
    if (!ctx.deleted)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory pruning");
    weft_err e = run_write(s, prune_txn, &ctx, "commit pruning", err);
    if (e != WEFT_OK) {
        json_decref(ctx.deleted);
        return e;
    }
    *deleted = ctx.deleted;
    return WEFT_OK;
}

/* ---- writing a snapshot ---- */

struct weft_store_writer {
    weft_store *store;
    MDB_txn *txn;
    uint64_t version;
    json_t *blobs;        /* name -> {dtype, shape, bytes, crc32} */
    weft_error failure;   /* the first LMDB failure: the transaction is dead after it */
};

/* The next version: one past the highest ever given (head "last"; pruning the newest
 * version must not hand its number out again) and past the last in the catalog (stores
 * written before "last" existed). */
static weft_err next_version(MDB_txn *txn, const weft_store *s, uint64_t *out, weft_error *err)
{
    MDB_cursor *cur = NULL;
    MDB_val k, v;
    uint64_t last = 0;
    weft_err e = get_head(txn, s, "last", &last, err);
    if (e != WEFT_OK)
        return e;
    int rc = mdb_cursor_open(txn, s->catalog, &cur);
    if (!rc)
        rc = mdb_cursor_get(cur, &k, &v, MDB_LAST);
    mdb_cursor_close(cur);
    if (rc && rc != MDB_NOTFOUND)
        return weft_store_mdb_error(rc, "begin snapshot", err);
    if (rc == 0 && version_from_key(&k) > last)
        last = version_from_key(&k);
    *out = last + 1;
    return WEFT_OK;
}

uint64_t weft_store_writer_version(const weft_store_writer *w)
{
    return w->version;
}

weft_err weft_store_writer_open(weft_store *s, weft_store_writer **out, uint64_t *version,
                                weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    int dead = 0;
    if (mdb_reader_check(s->env, &dead) == 0 && dead > 0)
        s->n_stale_readers += (size_t)dead;
    weft_store_writer *w = calloc(1, sizeof *w);
    if (!w || !(w->blobs = json_object())) {
        free(w);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory starting a snapshot");
    }
    w->store = s;
    weft_error_clear(&w->failure);
    weft_err e = apply_growth(s, err);
    if (e == WEFT_OK)
        e = weft_store_txn_begin(s, 0, &w->txn, err);
    if (e == WEFT_OK)
        e = next_version(w->txn, s, &w->version, err);
    if (e != WEFT_OK) {
        weft_store_writer_abort(w);
        return e;
    }
    *out = w;
    if (version)
        *version = w->version;
    return WEFT_OK;
}

/* Record an LMDB failure of @p w's transaction (dead from now on) and report it. */
static weft_err writer_failed(weft_store_writer *w, int rc, const char *what, weft_error *err)
{
    weft_err e = store_error(w->store, rc, what, &w->failure);
    if (err)
        *err = w->failure;
    return e;
}

/* A dead writer repeats its failure. */
static weft_err writer_dead(const weft_store_writer *w, weft_error *err)
{
    if (err)
        *err = w->failure;
    return w->failure.code;
}

weft_err weft_store_writer_put(weft_store_writer *w, const char *name, weft_dtype dtype,
                               size_t ndim, const size_t *shape, const void *data,
                               weft_error *err)
{
    if (w->failure.code != WEFT_OK)
        return writer_dead(w, err);
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
        return writer_failed(w, rc, name, err);
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
    uint32_t crc = crc_of(data, nbytes);

    json_t *jshape = json_array();
    for (size_t i = 0; jshape && i < ndim; i++)
        if (json_array_append_new(jshape, json_integer((json_int_t)shape[i]))) {
            json_decref(jshape);
            jshape = NULL;
        }
    json_t *desc = jshape ? json_pack("{s:s, s:o, s:I, s:I}", "dtype", weft_dtype_name(dtype),
                                      "shape", jshape, "bytes", (json_int_t)nbytes, "crc32",
                                      (json_int_t)crc)
                          : NULL;
    if (!desc || json_object_set_new(w->blobs, name, desc))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory describing blob '%s'", name);
    return WEFT_OK;
}

/* A copy of @p manifest without the fields the store owns (NULL when out of memory). */
static json_t *without_store_fields(const json_t *manifest)
{
    json_t *m = json_deep_copy(manifest);
    for (size_t i = 0; m && i < sizeof store_local_fields / sizeof store_local_fields[0]; i++)
        json_object_del(m, store_local_fields[i]);
    return m;
}

/* Fill @p m's store fields for a new snapshot entering as @p state. */
static weft_err enter_fields(json_t *m, uint64_t version, weft_store_state state,
                             const weft_store_change *how, uint64_t live, const json_t *blobs,
                             const char *created, weft_error *err)
{
    const char *reason = how ? how->reason : NULL;
    bool is_live = state == WEFT_STORE_STATE_LIVE;
    bool is_forced = is_live && how && how->is_forced;
    bool is_bad =
        json_object_set_new(m, "version", json_integer((json_int_t)version)) ||
        json_object_set_new(m, "state", json_string(weft_store_state_name(state))) ||
        json_object_set_new(m, "created", json_string(created)) ||
        json_object_set_new(m, "parent", live ? json_integer((json_int_t)live) : json_null()) ||
        json_object_set(m, "blobs", (json_t *)blobs);
    if (!is_bad && state == WEFT_STORE_STATE_REJECTED && reason && reason[0])
        is_bad = json_object_set_new(m, "reason", json_string(reason)) != 0;
    if (!is_bad && is_forced)
        is_bad = json_object_set_new(m, "forced", json_true()) ||
                 json_object_set_new(m, "forced_at", json_string(created));
    if (is_bad)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing manifest");
    return add_history(m, weft_store_state_name(state), created, reason, is_forced,
                       is_live ? live : 0, err);
}

weft_err weft_store_writer_commit_as(weft_store_writer *w, json_t *manifest,
                                     weft_store_state state, const weft_store_change *how,
                                     weft_error *err)
{
    weft_store *s = w->store;
    json_t *m = NULL;
    uint64_t live = 0;
    char created[32], why[64];
    weft_err e = check_change(how, err);
    if (e == WEFT_OK && w->failure.code != WEFT_OK)
        e = writer_dead(w, err);
    if (e == WEFT_OK && (state == WEFT_STORE_STATE_RETIRED || !weft_store_state_name(state)))
        e = weft_error_set(err, WEFT_ERR_INVALID, "a new snapshot enters as staged, live or "
                           "rejected");
    if (e == WEFT_OK && !json_is_object(manifest))
        e = weft_error_set(err, WEFT_ERR_INVALID, "the manifest must be a JSON object");
    if (e == WEFT_OK && !(m = without_store_fields(manifest)))
        e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing manifest");
    if (e == WEFT_OK)
        e = get_head(w->txn, s, "live", &live, err);
    if (e != WEFT_OK)
        goto done;
    now_iso8601(created);
    if ((e = enter_fields(m, w->version, state, how, live, w->blobs, created, err)) ||
        (e = put_manifest(w->txn, s, w->version, m, err)) ||
        (e = put_head(w->txn, s, "last", w->version, err)))
        goto done;
    if (state == WEFT_STORE_STATE_LIVE) {
        snprintf(why, sizeof why, "replaced by version %llu", (unsigned long long)w->version);
        if ((live && (e = retire_in(w->txn, s, live, why, created, err))) ||
            (live && (e = put_head(w->txn, s, "previous", live, err))) ||
            (e = put_head(w->txn, s, "live", w->version, err)))
            goto done;
    }
    int rc = mdb_txn_commit(w->txn);
    w->txn = NULL;
    if (rc)
        e = store_error(s, rc, "commit snapshot", err);
done:
    json_decref(m);
    weft_store_writer_abort(w);
    return e;
}

weft_err weft_store_writer_commit(weft_store_writer *w, json_t *manifest, bool promote,
                                  const char *state, weft_error *err)
{
    weft_store_state st = WEFT_STORE_STATE_STAGED;
    if (promote)
        st = WEFT_STORE_STATE_LIVE;
    else if (state && !strcmp(state, "rejected"))
        st = WEFT_STORE_STATE_REJECTED;
    else if (state && strcmp(state, "staged")) {
        weft_store_writer_abort(w);
        return weft_error_set(err, WEFT_ERR_INVALID, "state '%s': a new snapshot is staged or "
                              "rejected", state);
    }
    return weft_store_writer_commit_as(w, manifest, st, NULL, err);
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

weft_err weft_store_write(weft_store *s, weft_store_put_fn put, void *ctx, json_t *manifest,
                          weft_store_state state, const weft_store_change *how,
                          uint64_t *version, weft_error *err)
{
    for (size_t attempt = 0;; attempt++) {
        weft_store_writer *w = NULL;
        uint64_t v = 0;
        weft_err e = weft_store_writer_open(s, &w, &v, err);
        if (e != WEFT_OK)
            return e;   /* includes a map that could not grow: running again would not help */
        if (put)
            e = put(ctx, w, manifest, err);
        if (e == WEFT_OK) {
            e = weft_store_writer_commit_as(w, manifest, state, how, err);
            w = NULL;   /* freed whatever the outcome */
        }
        weft_store_writer_abort(w);
        if (e == WEFT_OK && version)
            *version = v;
        /* A full map noted a growth: the next writer_open applies it. */
        if (e != WEFT_ERR_LIMIT || !s->grow_to || attempt == MAX_GROWTHS)
            return e;
    }
}

/* ---- snapshot files: export and import ----
 * Layout (DEVELOPERS.md, "Snapshot files"), integers little-endian:
 *   "WEFTSNAP" | u32 format (1) | u32 blob count B | u64 manifest length M | M bytes manifest
 *   then B records in the manifest's "blobs" order: u32 name length L | L bytes name |
 *   u64 value length V | V bytes value as stored (48-byte header, data)
 *   then 32 bytes: SHA-256 of every byte before them. */

#define SNAPFILE_MAGIC "WEFTSNAP"
#define SNAPFILE_FORMAT 1u
#define SNAPFILE_FIXED 24            /* magic, format, blob count, manifest length */
#define SNAPFILE_MAX_MANIFEST (256u << 20)
#define SNAPFILE_MAX_BLOBS 65536u
#define SNAPFILE_CHUNK (1u << 20)    /* bytes read at a time when checking a file */

static void put_le(unsigned char *p, uint64_t v, size_t n)
{
    for (size_t i = 0; i < n; i++, v >>= 8)
        p[i] = (unsigned char)(v & 0xff);
}

static uint64_t get_le(const unsigned char *p, size_t n)
{
    uint64_t v = 0;
    for (size_t i = n; i-- > 0;)
        v = (v << 8) | p[i];
    return v;
}

static void hex_of(const unsigned char digest[SHA256_DIGEST_SIZE], char out[65])
{
    static const char digits[] = "0123456789abcdef";
    for (size_t i = 0; i < SHA256_DIGEST_SIZE; i++) {
        out[2 * i] = digits[digest[i] >> 4];
        out[2 * i + 1] = digits[digest[i] & 15];
    }
    out[64] = '\0';
}

/* A snapshot file being written: every byte goes through the SHA-256. */
struct out_file {
    FILE *f;
    struct sha256_ctx sha;
    int error;   /* errno of the first failed write, else 0 */
};

static void out_write(struct out_file *o, const void *p, size_t n)
{
    if (o->error || n == 0)
        return;
    sha256_update(&o->sha, n, p);
    if (fwrite(p, 1, n, o->f) != n)
        o->error = errno ? errno : EIO;
}

/* Write the records of every blob of @p m (version @p version), checking each on the way. */
static weft_err export_blobs(MDB_txn *txn, const weft_store *s, uint64_t version,
                             const json_t *blobs, struct out_file *o, weft_error *err)
{
    const char *name;
    const json_t *desc;
    json_object_foreach((json_t *)blobs, name, desc) {
        unsigned char key[8 + WEFT_BLOB_MAX_NAME], len[8];
        size_t klen = weft_store_blob_key(version, name, key, sizeof key);
        MDB_val k = { klen, key }, v;
        char why[256];
        int rc = klen ? mdb_get(txn, s->blobs, &k, &v) : MDB_NOTFOUND;
        if (rc && rc != MDB_NOTFOUND)
            return weft_store_mdb_error(rc, name, err);
        if (rc)
            snprintf(why, sizeof why, "listed in the manifest but not stored");
        if (rc || !check_value(desc, &v, why, sizeof why))
            return weft_error_set(err, WEFT_ERR_CORRUPT, "version %llu, blob '%s': %s; not "
                                  "exported", (unsigned long long)version, name, why);
        put_le(len, klen - 8, 4);
        out_write(o, len, 4);
        out_write(o, name, klen - 8);
        put_le(len, v.mv_size, 8);
        out_write(o, len, 8);
        out_write(o, v.mv_data, v.mv_size);   /* straight from the map */
    }
    return WEFT_OK;
}

/* Write version @p version's file into @p o (open). */
static weft_err export_into(MDB_txn *txn, const weft_store *s, uint64_t version,
                            struct out_file *o, unsigned char digest[SHA256_DIGEST_SIZE],
                            weft_error *err)
{
    json_t *m = NULL, *portable = NULL;
    char *text = NULL;
    weft_err e = get_manifest(txn, s, version, &m, err);
    if (e != WEFT_OK)
        return e;
    const json_t *blobs = json_object_get(m, "blobs");
    if (!json_is_object(blobs) || json_object_size(blobs) > SNAPFILE_MAX_BLOBS) {
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "manifest of version %llu has no usable "
                           "\"blobs\"", (unsigned long long)version);
        goto done;
    }
    if (!(portable = without_store_fields(m)) || !(text = manifest_text(portable))) {
        e = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory exporting");
        goto done;
    }
    unsigned char fixed[SNAPFILE_FIXED];
    memcpy(fixed, SNAPFILE_MAGIC, 8);
    put_le(fixed + 8, SNAPFILE_FORMAT, 4);
    put_le(fixed + 12, json_object_size(blobs), 4);
    put_le(fixed + 16, strlen(text), 8);
    out_write(o, fixed, sizeof fixed);
    out_write(o, text, strlen(text));
    if ((e = export_blobs(txn, s, version, blobs, o, err)) != WEFT_OK)
        goto done;
    sha256_digest(&o->sha, SHA256_DIGEST_SIZE, digest);
    if (!o->error && fwrite(digest, 1, SHA256_DIGEST_SIZE, o->f) != SHA256_DIGEST_SIZE)
        o->error = errno ? errno : EIO;
done:
    free(text);
    json_decref(portable);
    json_decref(m);
    return e;
}

/* Flush @p f to the disk and close it; false with errno set on failure. */
static bool close_durably(FILE *f)
{
    bool is_ok = fflush(f) == 0 && fsync(fileno(f)) == 0;
    int saved = errno;
    is_ok &= fclose(f) == 0;
    if (!is_ok && saved)
        errno = saved;
    return is_ok;
}

weft_err weft_store_export(weft_store *s, uint64_t version, const char *path, char sha256[65],
                           weft_error *err)
{
    size_t n = strlen(path);
    char *tmp = malloc(n + 5);
    if (!tmp)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory exporting");
    memcpy(tmp, path, n);
    memcpy(tmp + n, ".tmp", 5);
    MDB_txn *txn = NULL;
    struct out_file o;
    unsigned char digest[SHA256_DIGEST_SIZE];
    o.f = NULL;
    o.error = 0;
    sha256_init(&o.sha);
    weft_err e = weft_store_txn_begin(s, MDB_RDONLY, &txn, err);
    if (e == WEFT_OK && !(o.f = fopen(tmp, "wb")))
        e = weft_error_set(err, WEFT_ERR_IO, "%s: %s", tmp, strerror(errno));
    bool is_created = o.f != NULL;
    if (e == WEFT_OK)
        e = export_into(txn, s, version, &o, digest, err);
    if (txn)
        mdb_txn_abort(txn);
    if (e == WEFT_OK && o.error)
        e = weft_error_set(err, WEFT_ERR_IO, "%s: %s", tmp, strerror(o.error));
    if (o.f) {
        errno = 0;
        if (!close_durably(o.f) && e == WEFT_OK)
            e = weft_error_set(err, WEFT_ERR_IO, "%s: %s", tmp, strerror(errno ? errno : EIO));
    }
    if (e == WEFT_OK && rename(tmp, path) != 0)
        e = weft_error_set(err, WEFT_ERR_IO, "%s: %s", path, strerror(errno));
    if (e != WEFT_OK && is_created)
        unlink(tmp);
    free(tmp);
    if (e == WEFT_OK && sha256)
        hex_of(digest, sha256);
    return e;
}

/* A snapshot file being read: every byte up to the trailer goes through the SHA-256. */
struct in_file {
    FILE *f;
    const char *path;
    struct sha256_ctx sha;
    uint64_t offset;
};

static weft_err in_read(struct in_file *in, void *buf, size_t n, const char *what,
                        weft_error *err)
{
    if (n && fread(buf, 1, n, in->f) != n) {
        if (ferror(in->f))
            return weft_error_set(err, WEFT_ERR_IO, "%s: %s", in->path, strerror(errno));
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: truncated: the file ends inside %s "
                              "(after byte %llu)", in->path, what,
                              (unsigned long long)in->offset);
    }
    sha256_update(&in->sha, n, buf);
    in->offset += n;
    return WEFT_OK;
}

/* Where a blob's value goes while a file is read: the check pass gives NULL (the data is
 * read through a small buffer), the import pass memory of @p value_len bytes in the map. */
typedef weft_err (*blob_sink)(void *ctx, const char *name, size_t value_len,
                              unsigned char **dst, weft_error *err);

/* Read the data of a blob (@p n bytes) into @p dst, or through a buffer when NULL; its CRC-32. */
static weft_err read_data(struct in_file *in, unsigned char *dst, uint64_t n, const char *name,
                          uint32_t *crc, weft_error *err)
{
    uLong c = crc32_z(0L, Z_NULL, 0);
    if (dst) {
        weft_err e = in_read(in, dst, n, name, err);
        *crc = (uint32_t)crc32_z(c, dst, n);
        return e;
    }
    unsigned char *buf = malloc(SNAPFILE_CHUNK);
    if (!buf)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory importing");
    weft_err e = WEFT_OK;
    for (uint64_t done = 0; e == WEFT_OK && done < n;) {
        size_t step = n - done < SNAPFILE_CHUNK ? (size_t)(n - done) : SNAPFILE_CHUNK;
        if ((e = in_read(in, buf, step, name, err)) == WEFT_OK)
            c = crc32_z(c, buf, step);
        done += step;
    }
    free(buf);
    *crc = (uint32_t)c;
    return e;
}

/* Read and check the record of blob @p name described by @p desc. */
static weft_err read_blob(struct in_file *in, const char *name, const json_t *desc,
                          blob_sink sink, void *ctx, weft_error *err)
{
    unsigned char len[8], head[WEFT_BLOB_HEADER_BYTES], *dst = NULL;
    char got[WEFT_BLOB_MAX_NAME + 1], why[256];
    struct blob_desc d;
    size_t name_len = strlen(name);
    weft_err e = in_read(in, len, 4, "a blob record", err);
    if (e != WEFT_OK)
        return e;
    uint64_t got_len = get_le(len, 4);
    if (got_len != name_len || name_len == 0 || name_len > WEFT_BLOB_MAX_NAME)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: the blob record after byte %llu is "
                              "not the manifest's '%s'", in->path,
                              (unsigned long long)in->offset, name);
    if ((e = in_read(in, got, name_len, "a blob name", err)) != WEFT_OK)
        return e;
    got[name_len] = '\0';
    if (memcmp(got, name, name_len))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: blob record '%s' where the manifest "
                              "lists '%s'", in->path, got, name);
    if ((e = in_read(in, len, 8, "a blob record", err)) != WEFT_OK)
        return e;
    uint64_t value_len = get_le(len, 8);
    if (!parse_desc(desc, &d, why, sizeof why))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: blob '%s': %s", in->path, name, why);
    if (d.bytes > SIZE_MAX - WEFT_BLOB_HEADER_BYTES ||
        value_len != WEFT_BLOB_HEADER_BYTES + d.bytes)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: blob '%s': record of %llu bytes, "
                              "the manifest lists %llu data bytes", in->path, name,
                              (unsigned long long)value_len, (unsigned long long)d.bytes);
    if (sink && (e = sink(ctx, name, (size_t)value_len, &dst, err)) != WEFT_OK)
        return e;
    if ((e = in_read(in, head, sizeof head, name, err)) != WEFT_OK)
        return e;
    if (dst)
        memcpy(dst, head, sizeof head);
    if (!check_header(&d, head, (size_t)value_len, why, sizeof why))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: blob '%s': %s", in->path, name, why);
    uint32_t crc = 0;
    if ((e = read_data(in, dst ? dst + sizeof head : NULL, d.bytes, name, &crc, err)))
        return e;
    if (crc != d.crc)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: blob '%s': CRC-32 of the data is "
                              "%08x, the manifest says %08x: the data is damaged", in->path,
                              name, crc, d.crc);
    return WEFT_OK;
}

/* Read the fixed header and the manifest of a snapshot file. */
static weft_err read_manifest(struct in_file *in, json_t **out, weft_error *err)
{
    unsigned char fixed[SNAPFILE_FIXED];
    weft_err e = in_read(in, fixed, sizeof fixed, "the file header", err);
    if (e != WEFT_OK)
        return e;
    if (memcmp(fixed, SNAPFILE_MAGIC, 8))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: not a weft snapshot file", in->path);
    uint64_t format = get_le(fixed + 8, 4), n_blobs = get_le(fixed + 12, 4);
    uint64_t m_len = get_le(fixed + 16, 8);
    if (format != SNAPFILE_FORMAT)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: snapshot file format %llu; this weft "
                              "reads format %u", in->path, (unsigned long long)format,
                              SNAPFILE_FORMAT);
    if (m_len == 0 || m_len > SNAPFILE_MAX_MANIFEST || n_blobs > SNAPFILE_MAX_BLOBS)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "%s: manifest of %llu bytes with %llu "
                              "blobs is out of range", in->path, (unsigned long long)m_len,
                              (unsigned long long)n_blobs);
    char *text = malloc((size_t)m_len);
    if (!text)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory importing");
    json_t *m = NULL;
    json_error_t jerr;
    if ((e = in_read(in, text, (size_t)m_len, "the manifest", err)) == WEFT_OK &&
        !(m = json_loadb(text, (size_t)m_len, JSON_REJECT_DUPLICATES, &jerr)))
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: manifest: %s", in->path, jerr.text);
    free(text);
    const json_t *blobs = json_object_get(m, "blobs");
    if (e == WEFT_OK && (!json_is_object(blobs) || json_object_size(blobs) != n_blobs))
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: the manifest's \"blobs\" do not match "
                           "the %llu blob records", in->path, (unsigned long long)n_blobs);
    if (e != WEFT_OK) {
        json_decref(m);
        return e;
    }
    *out = m;
    return WEFT_OK;
}

/* Read a whole snapshot file from its start, checking everything, handing each blob's value
 * to @p sink (NULL: check only). On success *@p manifest (caller decrefs) and @p digest. */
static weft_err read_snapfile(struct in_file *in, blob_sink sink, void *ctx, json_t **manifest,
                              unsigned char digest[SHA256_DIGEST_SIZE], weft_error *err)
{
    json_t *m = NULL;
    unsigned char trailer[SHA256_DIGEST_SIZE];
    rewind(in->f);
    sha256_init(&in->sha);
    in->offset = 0;
    weft_err e = read_manifest(in, &m, err);
    const char *name;
    const json_t *desc;
    json_object_foreach(e == WEFT_OK ? json_object_get(m, "blobs") : NULL, name, desc)
        if ((e = read_blob(in, name, desc, sink, ctx, err)) != WEFT_OK)
            break;
    if (e == WEFT_OK && fread(trailer, 1, sizeof trailer, in->f) != sizeof trailer)
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: truncated: the SHA-256 at its end is "
                           "missing", in->path);
    if (e == WEFT_OK) {
        sha256_digest(&in->sha, SHA256_DIGEST_SIZE, digest);
        if (memcmp(trailer, digest, sizeof trailer))
            e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: SHA-256 mismatch: the file was "
                               "changed or damaged", in->path);
        else if (fgetc(in->f) != EOF)
            e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: bytes after the SHA-256 at its end",
                               in->path);
    }
    if (e != WEFT_OK) {
        json_decref(m);
        return e;
    }
    *manifest = m;
    return WEFT_OK;
}

struct import_ctx {
    struct in_file *in;
    const char *origin;    /* the file's absolute path */
    unsigned char digest[SHA256_DIGEST_SIZE];   /* of the checked file */
    uint64_t version;      /* out */
};

struct import_sink {
    MDB_txn *txn;
    weft_store *s;
    uint64_t version;
};

/* Reserve the blob's value in the map; the file is read straight into it. */
static weft_err reserve_blob(void *ctx, const char *name, size_t value_len, unsigned char **dst,
                             weft_error *err)
{
    struct import_sink *k = ctx;
    unsigned char key[8 + WEFT_BLOB_MAX_NAME];
    MDB_val kv = { weft_store_blob_key(k->version, name, key, sizeof key), key };
    MDB_val v = { value_len, NULL };
    int rc = mdb_put(k->txn, k->s->blobs, &kv, &v, MDB_RESERVE);
    if (rc)
        return store_error(k->s, rc, name, err);
    *dst = v.mv_data;
    return WEFT_OK;
}

/* The store's fields of an imported manifest @p m (from the file). */
static weft_err imported_fields(json_t *m, const struct import_ctx *c, uint64_t version,
                                weft_error *err)
{
    char at[32], sha[65], why[2 * PATH_MAX + 32];
    now_iso8601(at);
    hex_of(c->digest, sha);
    for (size_t i = 0; i < sizeof store_local_fields / sizeof store_local_fields[0]; i++)
        json_object_del(m, store_local_fields[i]);
    json_t *origin = json_pack("{s:s, s:s, s:s}", "file", c->origin, "sha256", sha,
                               "imported", at);
    bool is_bad =
        !origin ||
        json_object_set_new(m, "version", json_integer((json_int_t)version)) ||
        json_object_set_new(m, "state", json_string("staged")) ||
        (!json_is_string(json_object_get(m, "created")) &&
         json_object_set_new(m, "created", json_string(at))) ||
        json_object_set_new(m, "parent", json_null()) ||
        json_object_set_new(m, "origin", origin);
    if (is_bad)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory importing");
    snprintf(why, sizeof why, "imported from %s", c->origin);
    return add_history(m, "staged", at, why, false, 0, err);
}

static weft_err import_txn(MDB_txn *txn, weft_store *s, void *ctx, weft_error *err)
{
    struct import_ctx *c = ctx;
    struct import_sink sink = { txn, s, 0 };
    unsigned char digest[SHA256_DIGEST_SIZE];
    json_t *m = NULL;
    weft_err e = next_version(txn, s, &sink.version, err);
    if (e == WEFT_OK)
        e = read_snapfile(c->in, reserve_blob, &sink, &m, digest, err);
    if (e == WEFT_OK && memcmp(digest, c->digest, sizeof digest))
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: the file changed while it was imported; "
                           "nothing was stored", c->in->path);
    if (e == WEFT_OK)
        e = imported_fields(m, c, sink.version, err);
    if (e == WEFT_OK)
        e = put_manifest(txn, s, sink.version, m, err);
    if (e == WEFT_OK)
        e = put_head(txn, s, "last", sink.version, err);
    json_decref(m);
    c->version = sink.version;
    return e;
}

weft_err weft_store_import(weft_store *s, const char *path, uint64_t *version, weft_error *err)
{
    if (s->is_readonly)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: store opened read-only", s->dir);
    struct in_file in;
    in.path = path;
    in.offset = 0;
    if (!(in.f = fopen(path, "rb")))
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", path, strerror(errno));
    /* Where it came from, as an absolute path (realpath() is not POSIX.1 base). */
    char origin[2 * PATH_MAX + 2], cwd[PATH_MAX];
    if (path[0] != '/' && getcwd(cwd, sizeof cwd))
        snprintf(origin, sizeof origin, "%s/%s", cwd, path);
    else
        snprintf(origin, sizeof origin, "%s", path);
    struct import_ctx c = { &in, origin, { 0 }, 0 };
    json_t *m = NULL;
    /* First the whole file is checked, writing nothing; then it is read again into one
     * write transaction (checked again: it could change in between). */
    weft_err e = read_snapfile(&in, NULL, NULL, &m, c.digest, err);
    json_decref(m);
    if (e == WEFT_OK)
        e = run_write(s, import_txn, &c, "commit import", err);
    fclose(in.f);
    if (e == WEFT_OK && version)
        *version = c.version;
    return e;
}
