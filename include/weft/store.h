/* weft: the snapshot store, one LMDB environment (a directory) with three named databases:
 *   catalog  version (u64 big-endian) -> JSON manifest
 *   blobs    version (u64 big-endian) + blob name -> 48-byte header + raw bytes
 *   head     "live", "previous" -> version (u64 big-endian)
 * A snapshot is written in one write transaction and is visible only once it commits. */
#ifndef WEFT_STORE_H
#define WEFT_STORE_H

#include <jansson.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"

/** Flags for weft_store_open(). */
enum {
    WEFT_STORE_CREATE = 1u << 0,   /**< create the directory's environment if absent */
    WEFT_STORE_READONLY = 1u << 1  /**< open read-only (no writer, no promotion) */
};

/** Default map size: address space only, the file grows with its content. */
#define WEFT_STORE_DEFAULT_MAP_SIZE (64ull << 30)

/** Element types of blobs. */
typedef enum weft_dtype {
    WEFT_DTYPE_U8 = 1,  /**< raw bytes */
    WEFT_DTYPE_U32 = 2,
    WEFT_DTYPE_U64 = 3,
    WEFT_DTYPE_F32 = 4
} weft_dtype;

/** Most dimensions a blob may have. */
#define WEFT_BLOB_MAX_DIMS 3
/** Longest blob name, bytes. */
#define WEFT_BLOB_MAX_NAME 64
/** Bytes of the header stored in front of every blob's data (keeps float data 64-byte aligned
 *  in LMDB overflow pages, which start 16 bytes past a page boundary). */
#define WEFT_BLOB_HEADER_BYTES 48

/** "f32", "u32", "u64", "u8"; NULL for an unknown value. */
const char *weft_dtype_name(weft_dtype t);
/** Size of one element in bytes; 0 for an unknown value. */
size_t weft_dtype_size(weft_dtype t);

/** An open store. Opaque; one per process per directory (an LMDB rule). */
typedef struct weft_store weft_store;

/**
 * Open the store in directory @p dir (a local file system, never NFS).
 * @param dir       created when WEFT_STORE_CREATE is given and it does not exist; copied
 * @param flags     0, WEFT_STORE_CREATE, WEFT_STORE_READONLY
 * @param map_size  bytes of address space to map, 0 for WEFT_STORE_DEFAULT_MAP_SIZE; every
 *                  process opening the store should pass the same value
 * @param out       on success, a handle to close with weft_store_close()
 * @return WEFT_OK, WEFT_ERR_IO (dir missing or unreadable), WEFT_ERR_NOT_FOUND (read-only
 *         and no store there yet), WEFT_ERR_STORE, WEFT_ERR_NOMEM
 * Clears reader slots left by crashed processes (mdb_reader_check).
 * Threads: a handle may be shared; each call opens its own transaction.
 */
weft_err weft_store_open(const char *dir, unsigned flags, size_t map_size, weft_store **out,
                         weft_error *err);

/** Close @p s; NULL does nothing. Every snapshot opened from it must be closed first. */
void weft_store_close(weft_store *s);

/** Directory of @p s; borrowed. */
const char *weft_store_dir(const weft_store *s);

/**
 * Current head: the live version and the one before it; 0 means none.
 * @return WEFT_OK, WEFT_ERR_STORE. Cost: one short read transaction.
 */
weft_err weft_store_head(weft_store *s, uint64_t *live, uint64_t *previous, weft_error *err);

/**
 * Manifest of @p version (caller json_decref()s).
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND, WEFT_ERR_CORRUPT (not JSON), WEFT_ERR_STORE
 */
weft_err weft_store_manifest(weft_store *s, uint64_t version, json_t **out, weft_error *err);

/**
 * Every manifest, oldest first, as a JSON array (caller json_decref()s).
 * @return WEFT_OK, WEFT_ERR_CORRUPT, WEFT_ERR_STORE, WEFT_ERR_NOMEM
 */
weft_err weft_store_list(weft_store *s, json_t **out, weft_error *err);

/**
 * Make @p version live in one small transaction: head.previous = old live, head.live =
 * @p version, states updated (old live "retired", new "live").
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND, WEFT_ERR_INVALID (rejected snapshot), WEFT_ERR_STORE
 */
weft_err weft_store_promote(weft_store *s, uint64_t version, weft_error *err);

/** A snapshot being written: one LMDB write transaction. Opaque. */
typedef struct weft_store_writer weft_store_writer;

/**
 * Begin writing the next snapshot (last version + 1). Blocks while another process writes.
 * @param version  out: the version it will get
 * @param out      the writer; finish with weft_store_writer_commit() or _abort()
 * @return WEFT_OK, WEFT_ERR_INVALID (read-only store), WEFT_ERR_STORE, WEFT_ERR_NOMEM
 */
weft_err weft_store_writer_open(weft_store *s, weft_store_writer **out, uint64_t *version,
                                weft_error *err);

/**
 * Add blob @p name with @p ndim dimensions @p shape of @p dtype, copying
 * product(shape) * weft_dtype_size(dtype) bytes from @p data. Its CRC-32, shape and dtype go
 * into the manifest's "blobs" object at commit.
 * @return WEFT_OK, WEFT_ERR_INVALID (name empty, too long or repeated, bad dtype or ndim),
 *         WEFT_ERR_LIMIT (map full: the writer is dead, abort it), WEFT_ERR_STORE
 */
weft_err weft_store_writer_put(weft_store_writer *w, const char *name, weft_dtype dtype,
                               size_t ndim, const size_t *shape, const void *data,
                               weft_error *err);

/**
 * Write @p manifest (borrowed; the store adds "version", "state", "created", "parent" and
 * "blobs") and commit. With @p promote the snapshot becomes live in the same transaction;
 * otherwise it is stored with state @p state ("staged" or "rejected"; NULL means "staged").
 * The writer is freed whatever the outcome.
 * @return WEFT_OK; WEFT_ERR_LIMIT (map full: nothing was stored), WEFT_ERR_STORE
 */
weft_err weft_store_writer_commit(weft_store_writer *w, json_t *manifest, bool promote,
                                  const char *state, weft_error *err);

/** Abandon the snapshot: nothing of it is stored. Frees @p w; NULL does nothing. */
void weft_store_writer_abort(weft_store_writer *w);

#endif
