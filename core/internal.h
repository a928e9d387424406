/* Declarations shared inside libweft only; never included by server/ or installed. */
#ifndef WEFT_CORE_INTERNAL_H
#define WEFT_CORE_INTERNAL_H

#include <lmdb.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/store.h"

/** The store handle (store.c); snapshot.c reads its environment and databases. */
struct weft_store {
    MDB_env *env;
    MDB_dbi catalog, blobs, head;
    char *dir;
    bool is_readonly;
    size_t grow_to;          /* a write found the map full: map this many bytes before the
                                next write transaction (0: nothing pending) */
    size_t n_stale_readers;  /* reader slots of dead processes cleared by this handle */
};

/** Stored blob header, WEFT_BLOB_HEADER_BYTES long, little-endian as the host writes it. */
typedef struct weft_blob_header {
    char magic[8];                       /* "WEFTBLB1" */
    uint32_t dtype;
    uint32_t ndim;
    uint64_t shape[WEFT_BLOB_MAX_DIMS];
    uint64_t nbytes;                     /* bytes of data after the header */
} weft_blob_header;

#define WEFT_BLOB_MAGIC "WEFTBLB1"

/** Translate an LMDB return code into a weft error with @p what as context. */
weft_err weft_store_mdb_error(int rc, const char *what, weft_error *err);

/**
 * mdb_txn_begin() on @p s (@p flags: MDB_RDONLY or 0) that follows a map another process
 * grew: on MDB_MAP_RESIZED it adopts the new size and begins again when this process holds
 * no other read transaction, else fails with WEFT_ERR_LIMIT (release the snapshots, then
 * weft_store_remap()). Every transaction of libweft should begin here.
 */
weft_err weft_store_txn_begin(weft_store *s, unsigned flags, MDB_txn **txn, weft_error *err);

/** Big-endian 8-byte key of @p version into @p out. */
void weft_store_version_key(uint64_t version, unsigned char out[8]);

/** Blob key: 8-byte big-endian version then the name's bytes; @return key length. */
size_t weft_store_blob_key(uint64_t version, const char *name, unsigned char *out, size_t cap);

/* Marks a hot loop to be compiled once per instruction set (AVX-512, AVX2, baseline) and
 * picked at load time; the file must be built with -O3 for the vectoriser (see Makefile). */
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && !defined(__SANITIZE_ADDRESS__)
#define WEFT_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define WEFT_CLONES
#endif

#endif
