/* weft: the snapshot store, one LMDB environment (a directory) with three named databases:
 *   catalog  version (u64 big-endian) -> JSON manifest
 *   blobs    version (u64 big-endian) + blob name -> 48-byte header + raw bytes
 *   head     "live", "previous" -> version (u64 big-endian); "last" -> the highest version
 *            ever given, so that a pruned version's number is never given again
 * A snapshot is written in one write transaction and is visible only once it commits.
 *
 * Fields of a manifest the store owns (it sets them; whatever a caller put there is replaced):
 *   "version", "state" (staged | live | retired | rejected), "created" (UTC, ISO 8601),
 *   "parent" (the live version when it was written, or null), "blobs" (name -> dtype, shape,
 *   bytes, crc32), "history" (one entry per state change: {"state", "at", "reason"?,
 *   "forced"?, "previous"?}; "previous" on a live entry is what head.previous became),
 *   "reason" (why it was rejected), "forced" and "forced_at" (promoted past a rejection),
 *   "origin" ({"file", "sha256", "imported"} when imported).
 * Of these, "version", "state", "parent", "history", "reason", "forced", "forced_at" and
 * "origin" belong to one store and are left out of an exported file. */
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

/** @p n bytes for people, "512 B", "9.4 KiB", "1.0 GiB", written into @p out; returns @p out. */
const char *weft_store_format_bytes(double n, char out[16]);

/** An open store. Opaque; one per process per directory (an LMDB rule). */
typedef struct weft_store weft_store;

/**
 * Open the store in directory @p dir (a local file system, never NFS).
 * @param dir       created when WEFT_STORE_CREATE is given and it does not exist; copied
 * @param flags     0, WEFT_STORE_CREATE, WEFT_STORE_READONLY
 * @param map_size  bytes of address space to map, 0 for WEFT_STORE_DEFAULT_MAP_SIZE; every
 *                  process opening the store should pass the same value. When the store's
 *                  file records a larger map (a writer grew it), the larger one is used; a
 *                  writable open also makes room for two more snapshots as large as the
 *                  largest stored (see Map growth).
 * @param out       on success, a handle to close with weft_store_close()
 * @return WEFT_OK, WEFT_ERR_IO (dir missing or unreadable), WEFT_ERR_NOT_FOUND (read-only
 *         and no store there yet), WEFT_ERR_STORE, WEFT_ERR_NOMEM
 * Clears reader slots left by crashed processes (mdb_reader_check; see
 * weft_store_stale_readers()).
 * Threads: a handle may be shared; each call opens its own transaction.
 */
weft_err weft_store_open(const char *dir, unsigned flags, size_t map_size, weft_store **out,
                         weft_error *err);

/** Close @p s; NULL does nothing. Every snapshot opened from it must be closed first. */
void weft_store_close(weft_store *s);

/** Directory of @p s; borrowed. */
const char *weft_store_dir(const weft_store *s);

/**
 * Reader slots of crashed processes that @p s has cleared since it was opened (at open,
 * before each snapshot write, at each weft_store_verify()). A slot a dead process left pins
 * old pages, so the file grows until it is cleared; it matters only while another process
 * keeps the store open (the first process to open a store starts with an empty reader
 * table). Pure memory.
 */
size_t weft_store_stale_readers(const weft_store *s);

/**
 * How much of the map is in use.
 * @param used      out: bytes of the data file in use (pages up to the last one written)
 * @param map_size  out: bytes this process maps
 * Either may be NULL. @return WEFT_OK, WEFT_ERR_STORE
 */
weft_err weft_store_usage(weft_store *s, size_t *used, size_t *map_size, weft_error *err);

/*
 * Map growth. LMDB stores nothing past the map size it was given: a write that needs more
 * fails with "map full" and its whole transaction is lost. The store then grows the map
 * (doubles it) before its next write transaction, and weft_store_write() runs the snapshot's
 * writing again by itself; promotion, rollback, pruning and import retry by themselves too.
 * Growing remaps the file, which would silently invalidate every pointer into the map, so it
 * happens only while this process holds no read transaction of the store (no open snapshot):
 * otherwise the write fails with WEFT_ERR_LIMIT saying so. A writer that must hold a snapshot
 * while it writes grows the map first (weft_store_reserve), or opens the snapshot inside its
 * weft_store_put_fn; and a writable weft_store_open() keeps room in the map for two more
 * snapshots as large as the largest stored, so such a write usually fits. Other processes
 * keep their map until data lies beyond it; the store's functions then adopt the new size
 * when that process holds no snapshot, else fail with WEFT_ERR_LIMIT (release the snapshots,
 * then weft_store_remap()).
 * A full disk is not a full map: that write fails with WEFT_ERR_IO naming the cause, and
 * the store keeps everything it had (LMDB writes the new pages first, the meta page last).
 */

/**
 * Grow the map now so that @p bytes more fit, for a caller that will write while holding a
 * snapshot (which forbids growth mid-write). Does nothing when they already fit.
 * @return WEFT_OK, WEFT_ERR_LIMIT (this process holds a snapshot open, or the map cannot
 *         grow that far), WEFT_ERR_INVALID (read-only), WEFT_ERR_STORE
 */
weft_err weft_store_reserve(weft_store *s, size_t bytes, weft_error *err);

/**
 * Adopt the map size another process grew the store to. Call after every snapshot of this
 * process is released, when a call failed with WEFT_ERR_LIMIT because the map grew.
 * @return WEFT_OK, WEFT_ERR_LIMIT (a snapshot or read transaction of this process is still
 *         open), WEFT_ERR_STORE
 */
weft_err weft_store_remap(weft_store *s, weft_error *err);

/**
 * Current head: the live version and the one before it; 0 means none.
 * @return WEFT_OK, WEFT_ERR_STORE, WEFT_ERR_LIMIT (map grown elsewhere: see above).
 * Cost: one short read transaction.
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

/** States of a stored snapshot (the manifest's "state"). */
typedef enum weft_store_state {
    WEFT_STORE_STATE_STAGED = 0,  /**< stored; served only once promoted */
    WEFT_STORE_STATE_LIVE,        /**< head.live names it: servers serve it */
    WEFT_STORE_STATE_RETIRED,     /**< was live; head.previous may name it */
    WEFT_STORE_STATE_REJECTED     /**< the gate refused it; "reason" says why */
} weft_store_state;

/** "staged", "live", "retired", "rejected"; NULL for an unknown value. */
const char *weft_store_state_name(weft_store_state state);

/** Why a state change happens; recorded in the manifest's "history". */
typedef struct weft_store_change {
    const char *reason;  /**< for people, valid UTF-8, copied; NULL for none */
    bool is_forced;      /**< promote even a rejected snapshot; recorded as forced */
} weft_store_change;

/**
 * Make @p version live: weft_store_promote_with() with no reason and no force.
 */
weft_err weft_store_promote(weft_store *s, uint64_t version, weft_error *err);

/**
 * Make @p version live. First every blob of it is verified as weft_store_verify() does
 * (O(size), in a read transaction); then one small write transaction sets head.previous =
 * the old live and head.live = @p version, marks the old live "retired" and this one
 * "live", and adds a history entry to both. A rejected snapshot is promoted only with
 * @p how->is_forced, which also sets "forced": true and "forced_at" in its manifest.
 * Promoting the live version changes nothing.
 * @param how  NULL for no reason and no force
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND, WEFT_ERR_CORRUPT (fails verification: the message
 *         names the first bad blob), WEFT_ERR_INVALID (rejected and not forced, reason not
 *         UTF-8, read-only store), WEFT_ERR_LIMIT, WEFT_ERR_IO (disk full), WEFT_ERR_STORE
 */
weft_err weft_store_promote_with(weft_store *s, uint64_t version, const weft_store_change *how,
                                 weft_error *err);

/**
 * Go back to the previous version: it is verified (O(size)), then one small write transaction
 * makes it live and the current live one "retired". head.previous then names the version
 * that was previous when the restored one was last made live (from its history), if that
 * version is still stored and is not the one just retired; else 0.
 * @param how   NULL, or a reason for the history (is_forced is ignored)
 * @param live  out (may be NULL): the version now live
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND (no previous version), WEFT_ERR_CORRUPT (the previous
 *         version fails verification; nothing changed), WEFT_ERR_INVALID (read-only),
 *         WEFT_ERR_LIMIT, WEFT_ERR_IO, WEFT_ERR_STORE
 */
weft_err weft_store_rollback(weft_store *s, const weft_store_change *how, uint64_t *live,
                             weft_error *err);

/**
 * Delete the oldest versions other than head.live and head.previous, with their blobs, so
 * that at most @p keep of them remain (one write transaction). Never deletes live or
 * previous. A reader holding a deleted version keeps reading it until it ends.
 * @param deleted  out: JSON array (caller json_decref()s) of {"version", "state", "bytes"}
 *                 for each version deleted, oldest first; bytes = stored blob bytes freed
 * @return WEFT_OK, WEFT_ERR_INVALID (read-only), WEFT_ERR_CORRUPT (a manifest is not JSON),
 *         WEFT_ERR_LIMIT, WEFT_ERR_IO, WEFT_ERR_STORE, WEFT_ERR_NOMEM
 */
weft_err weft_store_prune(weft_store *s, size_t keep, json_t **deleted, weft_error *err);

/**
 * Check stored data against the manifests: for every blob listed in version @p version's
 * manifest (0: every version), its stored header (magic, dtype, number of dimensions, every
 * shape slot, the used ones against the manifest and the unused ones zero, data length)
 * and the CRC-32 of its data; blobs stored but not listed; manifests that are not JSON;
 * head entries naming a version the catalog lacks. One flipped byte anywhere in a blob's
 * header or data is found. Runs in one read transaction; O(bytes stored).
 * @param report      out: a JSON object (caller json_decref()s): "versions" (array of
 *                    {"version", "blobs", "bytes", "ok"}), "problems" (array of {"version",
 *                    "blob" (name or null), "problem"}), "live", "previous",
 *                    "stale_readers_cleared"
 * @param n_problems  out (may be NULL): the number of problems found
 * @return WEFT_OK whether or not problems were found; WEFT_ERR_NOT_FOUND (no such
 *         version), WEFT_ERR_STORE, WEFT_ERR_NOMEM
 */
weft_err weft_store_verify(weft_store *s, uint64_t version, json_t **report, size_t *n_problems,
                           weft_error *err);

/**
 * Write version @p version to @p path as one snapshot file (format in DEVELOPERS.md: magic,
 * lengths, the manifest without its store-local fields, every blob as stored with its
 * header, a trailing SHA-256). Written to "@p path.tmp", flushed to disk, then renamed over
 * @p path, so @p path is either the old file or the complete new one. Each blob is checked
 * against its CRC-32 on the way: a damaged snapshot is not exported. Exporting an imported
 * snapshot gives a byte-identical file.
 * @param sha256  out (may be NULL): the file's trailing SHA-256, 64 lowercase hex + NUL
 * @return WEFT_OK, WEFT_ERR_NOT_FOUND, WEFT_ERR_CORRUPT, WEFT_ERR_IO, WEFT_ERR_STORE,
 *         WEFT_ERR_NOMEM
 * Cost: O(size), one read transaction; blobs are written from the map without a copy.
 */
weft_err weft_store_export(weft_store *s, uint64_t version, const char *path, char sha256[65],
                           weft_error *err);

/**
 * Add the snapshot in file @p path (written by weft_store_export()) as the next version,
 * with state "staged" (never live by itself), "parent" null, and "origin" naming the file
 * (absolute path) and its SHA-256. The whole file is checked first (structure, SHA-256,
 * every blob's header and CRC-32) without writing anything; then it is read again straight
 * into one write transaction, checked again, and committed.
 * @param version  out (may be NULL): the version it got
 * @return WEFT_OK, WEFT_ERR_IO (unreadable), WEFT_ERR_CORRUPT (not a snapshot file,
 *         truncated, checksum or CRC mismatch: the message says which; nothing stored),
 *         WEFT_ERR_INVALID (read-only store), WEFT_ERR_LIMIT, WEFT_ERR_STORE, WEFT_ERR_NOMEM
 */
weft_err weft_store_import(weft_store *s, const char *path, uint64_t *version, weft_error *err);

/** A snapshot being written: one LMDB write transaction. Opaque. */
typedef struct weft_store_writer weft_store_writer;

/**
 * Begin writing the next snapshot (one past the highest version ever given, pruned ones
 * included). Blocks while another process writes.
 * Grows the map first when the last write ran out of it (see Map growth).
 * @param version  out: the version it will get
 * @param out      the writer; finish with weft_store_writer_commit_as() or _abort()
 * @return WEFT_OK, WEFT_ERR_INVALID (read-only store), WEFT_ERR_LIMIT (the map must grow
 *         but this process holds a snapshot open), WEFT_ERR_STORE, WEFT_ERR_NOMEM
 */
weft_err weft_store_writer_open(weft_store *s, weft_store_writer **out, uint64_t *version,
                                weft_error *err);

/** The version @p w will commit as. */
uint64_t weft_store_writer_version(const weft_store_writer *w);

/**
 * Add blob @p name with @p ndim dimensions @p shape of @p dtype, copying
 * product(shape) * weft_dtype_size(dtype) bytes from @p data. Its CRC-32, shape and dtype go
 * into the manifest's "blobs" object at commit.
 * @return WEFT_OK, WEFT_ERR_INVALID (name empty, too long or repeated, bad dtype or ndim),
 *         WEFT_ERR_LIMIT (map full: the writer is dead; abort it and write again, the map
 *         grows first), WEFT_ERR_STORE
 */
weft_err weft_store_writer_put(weft_store_writer *w, const char *name, weft_dtype dtype,
                               size_t ndim, const size_t *shape, const void *data,
                               weft_error *err);

/**
 * Write @p manifest (borrowed; the store sets the fields it owns, listed at the top of this
 * header) and commit, entering the snapshot as @p state:
 *   WEFT_STORE_STATE_STAGED    stored, not served;
 *   WEFT_STORE_STATE_REJECTED  stored with "reason" = @p how->reason (the gate's verdict);
 *   WEFT_STORE_STATE_LIVE      promoted in the same transaction (the old live is retired,
 *                              head.previous names it); with @p how->is_forced it is
 *                              recorded as forced ("forced", "forced_at", and the reason
 *                              in its history: say why the gate refused it).
 * The blobs were just written from the caller's memory, so they are not verified again.
 * The writer is freed whatever the outcome.
 * @param how  NULL, or the reason and force flag (a reason is expected with REJECTED)
 * @return WEFT_OK; WEFT_ERR_INVALID (state RETIRED, reason not UTF-8); WEFT_ERR_LIMIT (map
 *         full: nothing was stored, write again); WEFT_ERR_IO (disk full: nothing was
 *         stored); WEFT_ERR_STORE
 */
weft_err weft_store_writer_commit_as(weft_store_writer *w, json_t *manifest,
                                     weft_store_state state, const weft_store_change *how,
                                     weft_error *err);

/**
 * weft_store_writer_commit_as() with state LIVE when @p promote, else @p state ("staged" or
 * "rejected"; NULL means "staged"), no reason.
 */
weft_err weft_store_writer_commit(weft_store_writer *w, json_t *manifest, bool promote,
                                  const char *state, weft_error *err);

/** Abandon the snapshot: nothing of it is stored. Frees @p w; NULL does nothing. */
void weft_store_writer_abort(weft_store_writer *w);

/**
 * Fills a snapshot writer: puts every blob (weft_store_writer_put) and may add to the
 * manifest. It may be called more than once for one snapshot (after the map grew), each
 * time on a fresh writer, and must then put the same blobs again; it may open snapshots
 * of the store but must release them before it returns.
 */
typedef weft_err (*weft_store_put_fn)(void *ctx, weft_store_writer *w, json_t *manifest,
                                      weft_error *err);

/**
 * Write one snapshot: open a writer, call @p put, commit as weft_store_writer_commit_as()
 * does. When the map fills up, the map grows and it all runs again (at most 16 times).
 * @param version  out (may be NULL): the version committed
 * @return WEFT_OK, what @p put returns, and the codes of weft_store_writer_open() and
 *         weft_store_writer_commit_as()
 */
weft_err weft_store_write(weft_store *s, weft_store_put_fn put, void *ctx, json_t *manifest,
                          weft_store_state state, const weft_store_change *how,
                          uint64_t *version, weft_error *err);

#endif
