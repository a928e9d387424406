/* weft: name interning. Names map to dense ids 0..n-1 through an open-addressing hash index
 * whose arrays are also the stored form, so a snapshot serves lookups straight from the map. */
#ifndef WEFT_NAMES_H
#define WEFT_NAMES_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"

/**
 * Read-only view of a name table, over memory owned elsewhere (a weft_names, or blobs in the
 * LMDB map). Layout, the contract of the stored blobs:
 *  - off:   uint64[n + 1]; name i is bytes[off[i] .. off[i+1]-1), followed by one NUL byte
 *  - bytes: char[n_bytes], n_bytes == off[n]
 *  - slots: uint32[cap], cap a power of two >= 2n; 0 = empty, else id + 1; linear probing
 *           starting at weft_names_hash(name) & (cap - 1)
 */
typedef struct weft_names_view {
    size_t n;
    size_t cap;
    const uint64_t *off;
    const char *bytes;
    const uint32_t *slots;
    size_t n_bytes;   /**< length of bytes[] as stored; lets weft_names_check() bound off[] */
} weft_names_view;

/** A growable name table. Fields are private; use the functions. */
typedef struct weft_names {
    size_t n, cap;
    uint64_t *off;
    size_t off_cap;
    char *bytes;
    size_t bytes_cap;
    uint32_t *slots;
} weft_names;

/** 64-bit FNV-1a of @p s[0..len): the index hash, fixed forever because it is stored. */
uint64_t weft_names_hash(const char *s, size_t len);

/** FNV-1a continued over @p s[0..len) from @p h (a hash of the bytes before them):
 * weft_names_hash(ab) == weft_names_hash_more(weft_names_hash(a), b). */
uint64_t weft_names_hash_more(uint64_t h, const char *s, size_t len);

/** Make @p t an empty table. @return WEFT_OK, WEFT_ERR_NOMEM */
weft_err weft_names_init(weft_names *t, weft_error *err);
/** Release @p t's memory; NULL does nothing. */
void weft_names_fini(weft_names *t);

/**
 * Id of @p s[0..len), adding it when new. @p s need not be NUL-terminated; it is copied.
 * @param id      out: the id
 * @param is_new  out, may be NULL: true when the name was added
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_LIMIT (more than UINT32_MAX - 1 names)
 * Cost: amortised O(len).
 */
weft_err weft_names_intern(weft_names *t, const char *s, size_t len, uint32_t *id, bool *is_new,
                           weft_error *err);

/**
 * Forget the names with ids >= @p n, as if they had never been interned (an all-or-nothing
 * loader's undo). Names 0..n-1 keep their ids. @p n > t->n does nothing. Never fails.
 * Cost: O(cap).
 */
void weft_names_truncate(weft_names *t, size_t n);

/** A view of @p t, valid until @p t is changed or finalised. */
weft_names_view weft_names_as_view(const weft_names *t);

/** Look up @p s[0..len) in @p v. @return true and *@p id when found. Thread-safe on a const view. */
bool weft_names_find(const weft_names_view *v, const char *s, size_t len, uint32_t *id);

/** Name of @p id (< v->n), NUL-terminated, borrowed from the view's memory; @p len may be NULL. */
const char *weft_names_get(const weft_names_view *v, uint32_t id, size_t *len);

/**
 * Check that arrays loaded from storage form a consistent view (offsets rising and in range,
 * NUL after each name, cap a power of two >= 2n, every slot in range and every name found).
 * The caller vouches only for the array lengths: off holds n + 1 entries, slots cap, and
 * bytes n_bytes (all taken from the stored blob sizes); whatever they contain, nothing
 * outside them is read.
 * @return WEFT_OK or WEFT_ERR_CORRUPT. Cost: O(n + cap + bytes) for a table weft_names built
 * (short probe runs); a crafted view with long runs costs up to O(n * cap).
 */
weft_err weft_names_check(const weft_names_view *v, weft_error *err);

#endif
