/* Name interning (include/weft/names.h): an append-only byte arena with offsets, indexed by
 * an open-addressing table with linear probing. The arrays are the stored form as they are. */
#include "weft/names.h"

#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"

enum { NAMES_INITIAL_CAP = 16, NAMES_INITIAL_BYTES = 256 };

/* FNV-1a, 64-bit (Fowler, Noll & Vo): offset basis 14695981039346656037, prime 2^40 + 435. */
uint64_t weft_names_hash_more(uint64_t h, const char *s, size_t len)
{
    for (size_t i = 0; i < len; i++) {
        h ^= (unsigned char)s[i];
        h *= 0x100000001b3ULL;
    }
    return h;
}

uint64_t weft_names_hash(const char *s, size_t len)
{
    return weft_names_hash_more(0xcbf29ce484222325ULL, s, len);
}

weft_err weft_names_init(weft_names *t, weft_error *err)
{
    memset(t, 0, sizeof *t);
    t->slots = weft_calloc_array(NAMES_INITIAL_CAP, sizeof *t->slots);
    t->off = weft_alloc_array(NAMES_INITIAL_CAP, sizeof *t->off);
    t->bytes = weft_alloc_array(NAMES_INITIAL_BYTES, 1);
    if (!t->slots || !t->off || !t->bytes) {
        weft_names_fini(t);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a name table");
    }
    t->cap = NAMES_INITIAL_CAP;
    t->off_cap = NAMES_INITIAL_CAP;
    t->bytes_cap = NAMES_INITIAL_BYTES;
    t->off[0] = 0;
    return WEFT_OK;
}

void weft_names_fini(weft_names *t)
{
    if (!t)
        return;
    free(t->slots);
    free(t->off);
    free(t->bytes);
    memset(t, 0, sizeof *t);
}

static bool name_equals(const uint64_t *off, const char *bytes, uint32_t id, const char *s,
                        size_t len)
{
    uint64_t lo = off[id], hi = off[id + 1];
    return hi - lo - 1 == len && memcmp(bytes + lo, s, len) == 0;
}

/* Slot where @p s is, or the empty slot where it would go. Bounded by cap probes so that an
 * unchecked view with no empty slot cannot loop; *found tells which. */
static size_t probe(const weft_names_view *v, const char *s, size_t len, bool *found)
{
    size_t mask = v->cap - 1;
    size_t i = (size_t)weft_names_hash(s, len) & mask;
    for (size_t k = 0; k < v->cap; k++, i = (i + 1) & mask) {
        uint32_t slot = v->slots[i];
        if (slot == 0)
            break;
        if (name_equals(v->off, v->bytes, slot - 1, s, len)) {
            *found = true;
            return i;
        }
    }
    *found = false;
    return i;
}

/* Re-insert ids in ascending order: linear probing then places every name exactly where
 * interning 0, 1, 2, ... into a table of this size would, which weft_names_truncate relies on. */
static weft_err rehash(weft_names *t, size_t new_cap, weft_error *err)
{
    uint32_t *slots = weft_calloc_array(new_cap, sizeof *slots);
    if (!slots)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a name index");
    size_t mask = new_cap - 1;
    for (size_t id = 0; id < t->n; id++) {
        uint64_t lo = t->off[id];
        size_t i = (size_t)weft_names_hash(t->bytes + lo, t->off[id + 1] - lo - 1) & mask;
        while (slots[i])
            i = (i + 1) & mask;
        slots[i] = (uint32_t)id + 1;
    }
    free(t->slots);
    t->slots = slots;
    t->cap = new_cap;
    return WEFT_OK;
}

/* Room for one more name of @p len bytes. Only capacities change, so a failure part-way
 * leaves the table's contents as they were. */
static weft_err reserve_one(weft_names *t, size_t len, weft_error *err)
{
    if (2 * (t->n + 1) > t->cap) {
        weft_err rc = rehash(t, 2 * t->cap, err);
        if (rc != WEFT_OK)
            return rc;
    }
    size_t used = (size_t)t->off[t->n];
    if (len > SIZE_MAX - used - 1 ||
        weft_grow_array((void **)&t->off, &t->off_cap, t->n + 2, sizeof *t->off) != 0 ||
        weft_grow_array((void **)&t->bytes, &t->bytes_cap, used + len + 1, 1) != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a name table");
    return WEFT_OK;
}

weft_err weft_names_intern(weft_names *t, const char *s, size_t len, uint32_t *id, bool *is_new,
                           weft_error *err)
{
    weft_names_view v = weft_names_as_view(t);
    bool found = false;
    size_t i = probe(&v, s, len, &found);
    if (found) {
        *id = t->slots[i] - 1;
        if (is_new)
            *is_new = false;
        return WEFT_OK;
    }
    if (t->n >= UINT32_MAX - 1)
        return weft_error_set(err, WEFT_ERR_LIMIT, "more than %u names", UINT32_MAX - 1);
    size_t old_cap = t->cap;
    weft_err rc = reserve_one(t, len, err);
    if (rc != WEFT_OK)
        return rc;
    if (t->cap != old_cap) {
        v = weft_names_as_view(t);
        i = probe(&v, s, len, &found);
    }
    uint64_t lo = t->off[t->n];
    memcpy(t->bytes + lo, s, len);
    t->bytes[lo + len] = '\0';
    t->off[t->n + 1] = lo + len + 1;
    t->slots[i] = (uint32_t)t->n + 1;
    *id = (uint32_t)t->n;
    t->n++;
    if (is_new)
        *is_new = true;
    return WEFT_OK;
}

/* With linear probing, an insertion never moves an earlier entry, and ids were inserted in
 * ascending order (rehash keeps that order). Clearing the slots of ids >= n therefore gives
 * exactly the table that interning only 0..n-1 would have built. */
void weft_names_truncate(weft_names *t, size_t n)
{
    if (n >= t->n)
        return;
    for (size_t i = 0; i < t->cap; i++)
        if (t->slots[i] > n)
            t->slots[i] = 0;
    t->n = n;
}

weft_names_view weft_names_as_view(const weft_names *t)
{
    weft_names_view v = {
        .n = t->n,
        .cap = t->cap,
        .off = t->off,
        .bytes = t->bytes,
        .slots = t->slots,
        .n_bytes = t->off ? (size_t)t->off[t->n] : 0,
    };
    return v;
}

bool weft_names_find(const weft_names_view *v, const char *s, size_t len, uint32_t *id)
{
    if (v->cap == 0)
        return false;
    bool found = false;
    size_t i = probe(v, s, len, &found);
    if (found)
        *id = v->slots[i] - 1;
    return found;
}

const char *weft_names_get(const weft_names_view *v, uint32_t id, size_t *len)
{
    uint64_t lo = v->off[id];
    if (len)
        *len = (size_t)(v->off[id + 1] - lo - 1);
    return v->bytes + lo;
}

static weft_err corrupt(weft_error *err, const char *what)
{
    return weft_error_set(err, WEFT_ERR_CORRUPT, "name table: %s", what);
}

/* Shape: counts in range, cap a power of two >= 2n, arrays present. */
static weft_err check_shape(const weft_names_view *v, weft_error *err)
{
    if (v->n > UINT32_MAX - 1)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "name table: %zu names, limit %u", v->n,
                              UINT32_MAX - 1);
    if (v->cap == 0 || (v->cap & (v->cap - 1)) != 0 || v->cap / 2 < v->n)
        return weft_error_set(err, WEFT_ERR_CORRUPT,
                              "name table: %zu slots for %zu names, need a power of two >= 2n",
                              v->cap, v->n);
    if (!v->off || !v->slots || (!v->bytes && v->n_bytes > 0))
        return corrupt(err, "missing array");
    return WEFT_OK;
}

/* Offsets start at 0, rise by at least the NUL, stay within bytes[] and end exactly there. */
static weft_err check_offsets(const weft_names_view *v, weft_error *err)
{
    if (v->off[0] != 0)
        return corrupt(err, "first offset is not 0");
    for (size_t i = 0; i < v->n; i++) {
        uint64_t lo = v->off[i], hi = v->off[i + 1];
        if (hi <= lo || hi > v->n_bytes)
            return weft_error_set(err, WEFT_ERR_CORRUPT,
                                  "name table: name %zu has offsets %llu..%llu, bytes hold %zu",
                                  i, (unsigned long long)lo, (unsigned long long)hi, v->n_bytes);
        if (v->bytes[hi - 1] != '\0')
            return weft_error_set(err, WEFT_ERR_CORRUPT,
                                  "name table: name %zu is not followed by a NUL", i);
    }
    if (v->off[v->n] != v->n_bytes)
        return weft_error_set(err, WEFT_ERR_CORRUPT,
                              "name table: names end at byte %llu, bytes hold %zu",
                              (unsigned long long)v->off[v->n], v->n_bytes);
    return WEFT_OK;
}

/* Exactly n slots in use, each naming an id < n, and each name found under its own id.
 * Together these mean every id sits in exactly one reachable slot and no name repeats. */
static weft_err check_slots(const weft_names_view *v, weft_error *err)
{
    size_t used = 0;
    for (size_t i = 0; i < v->cap; i++) {
        if (v->slots[i] > v->n)
            return weft_error_set(err, WEFT_ERR_CORRUPT,
                                  "name table: slot %zu holds id %lu, only %zu names", i,
                                  (unsigned long)v->slots[i] - 1, v->n);
        used += v->slots[i] != 0;
    }
    if (used != v->n)
        return weft_error_set(err, WEFT_ERR_CORRUPT,
                              "name table: %zu slots in use for %zu names", used, v->n);
    for (size_t id = 0; id < v->n; id++) {
        size_t len = 0;
        const char *s = weft_names_get(v, (uint32_t)id, &len);
        uint32_t got = 0;
        if (!weft_names_find(v, s, len, &got) || got != id)
            return weft_error_set(err, WEFT_ERR_CORRUPT,
                                  "name table: name %zu is not found under its id", id);
    }
    return WEFT_OK;
}

weft_err weft_names_check(const weft_names_view *v, weft_error *err)
{
    weft_err rc = check_shape(v, err);
    if (rc == WEFT_OK)
        rc = check_offsets(v, err);
    if (rc == WEFT_OK)
        rc = check_slots(v, err);
    return rc;
}
