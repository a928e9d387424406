/* Tests of name interning (core/names.c): the hash, the index, truncation, and the check
 * that guards views read back from storage. */
#include <criterion/criterion.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/names.h"
#include "weft/rng.h"

static weft_names table;

static void names_setup(void)
{
    cr_assert_eq(weft_names_init(&table, NULL), WEFT_OK);
}

static void names_teardown(void)
{
    weft_names_fini(&table);
}

TestSuite(names, .init = names_setup, .fini = names_teardown);

static uint32_t intern(weft_names *t, const char *s)
{
    uint32_t id = UINT32_MAX;
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_names_intern(t, s, strlen(s), &id, NULL, &err), WEFT_OK, "%s", err.msg);
    return id;
}

static void expect_check_ok(const weft_names_view *v)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_names_check(v, &err), WEFT_OK, "%s", err.msg);
}

Test(names, fnv1a_matches_published_vectors)
{
    /* 64-bit FNV-1a test vectors from the FNV authors' reference code (test_fnv.c, the
     * FNV1A_64 table) and draft-eastlake-fnv: "", "a", "foobar". */
    cr_assert_eq(weft_names_hash("", 0), 0xcbf29ce484222325ULL);
    cr_assert_eq(weft_names_hash("a", 1), 0xaf63dc4c8601ec8cULL);
    cr_assert_eq(weft_names_hash("foobar", 6), 0x85944171f73967e8ULL);
}

Test(names, intern_gives_dense_ids_and_repeats_the_same)
{
    bool is_new = false;
    uint32_t id = 99;
    cr_assert_eq(weft_names_intern(&table, "alpha", 5, &id, &is_new, NULL), WEFT_OK);
    cr_assert_eq(id, 0);
    cr_assert(is_new);
    cr_assert_eq(intern(&table, "beta"), 1);
    cr_assert_eq(intern(&table, ""), 2);   /* the empty name is a name like any other */
    cr_assert_eq(weft_names_intern(&table, "alpha", 5, &id, &is_new, NULL), WEFT_OK);
    cr_assert_eq(id, 0);
    cr_assert_not(is_new);
    cr_assert_eq(table.n, 3);
    weft_names_view v = weft_names_as_view(&table);
    size_t len = 9;
    cr_assert_str_eq(weft_names_get(&v, 1, &len), "beta");
    cr_assert_eq(len, 4);
    cr_assert_str_eq(weft_names_get(&v, 2, &len), "");
    cr_assert_eq(len, 0);
    expect_check_ok(&v);
}

Test(names, name_need_not_be_nul_terminated)
{
    const char buf[] = "abcdef";
    uint32_t id = 0, found = 9;
    cr_assert_eq(weft_names_intern(&table, buf, 3, &id, NULL, NULL), WEFT_OK);
    weft_names_view v = weft_names_as_view(&table);
    size_t len = 0;
    cr_assert_str_eq(weft_names_get(&v, id, &len), "abc");
    cr_assert_eq(len, 3);
    cr_assert(weft_names_find(&v, "abcXYZ", 3, &found));
    cr_assert_eq(found, id);
    cr_assert_not(weft_names_find(&v, buf, 6, &found));
}

/* Finds @p k names ("c0", "c1", ...) whose hash lands in home slot @p home of 16. */
static void colliding_names(char names[][16], size_t k, size_t home)
{
    size_t got = 0;
    for (unsigned i = 0; got < k; i++) {
        char s[16];
        snprintf(s, sizeof s, "c%u", i);
        if ((weft_names_hash(s, strlen(s)) & 15) == home)
            strcpy(names[got++], s);
    }
}

Test(names, colliding_names_fill_consecutive_slots)
{
    /* Five names with one home slot in the initial 16-slot table (5 <= 16 / 2, so no
     * growth): linear probing must put them in slots home, home+1, ... in intern order,
     * wrapping past the end. */
    char names[5][16];
    size_t home = 14;
    colliding_names(names, 5, home);
    for (size_t i = 0; i < 5; i++)
        cr_assert_eq(intern(&table, names[i]), i);
    weft_names_view v = weft_names_as_view(&table);
    cr_assert_eq(v.cap, 16);
    for (size_t i = 0; i < 5; i++)
        cr_assert_eq(v.slots[(home + i) & 15], i + 1, "slot %zu", (home + i) & 15);
    for (size_t i = 0; i < 5; i++) {
        uint32_t id = 99;
        cr_assert(weft_names_find(&v, names[i], strlen(names[i]), &id));
        cr_assert_eq(id, i);
    }
    expect_check_ok(&v);
}

/* Id of @p s by scanning every name, the slow obvious way; UINT32_MAX when absent. */
static uint32_t linear_find(const weft_names_view *v, const char *s, size_t len)
{
    for (uint32_t id = 0; id < v->n; id++) {
        size_t n = 0;
        const char *name = weft_names_get(v, id, &n);
        if (n == len && memcmp(name, s, len) == 0)
            return id;
    }
    return UINT32_MAX;
}

/* A random name of 0..6 letters from "abcd": short and from a small alphabet, so many
 * repeats and many shared prefixes. */
static size_t random_name(weft_rng *rng, char *s)
{
    size_t len = weft_rng_below(rng, 7);
    for (size_t i = 0; i < len; i++)
        s[i] = "abcd"[weft_rng_below(rng, 4)];
    s[len] = '\0';
    return len;
}

Test(names, find_agrees_with_linear_scan)
{
    weft_rng rng;
    weft_rng_seed(&rng, 2024);
    char s[16];
    for (int k = 0; k < 3000; k++) {
        size_t len = random_name(&rng, s);
        weft_names_view before = weft_names_as_view(&table);
        uint32_t want = linear_find(&before, s, len), id = 0;
        bool is_new = false;
        cr_assert_eq(weft_names_intern(&table, s, len, &id, &is_new, NULL), WEFT_OK);
        cr_assert_eq(is_new, want == UINT32_MAX, "'%s'", s);
        cr_assert_eq(id, want == UINT32_MAX ? before.n : want, "'%s'", s);
    }
    /* Enough distinct names that the index grew from 16 slots past 1024 on the way. */
    cr_assert_gt(table.n, 512);
    weft_names_view v = weft_names_as_view(&table);
    cr_assert_geq(v.cap, 1024);
    cr_assert_eq(v.cap & (v.cap - 1), 0);
    cr_assert_geq(v.cap, 2 * v.n);
    for (int k = 0; k < 5000; k++) {
        size_t len = weft_rng_below(&rng, 9);   /* up to 8: some can never be present */
        for (size_t i = 0; i < len; i++)
            s[i] = "abcde"[weft_rng_below(&rng, 5)];
        uint32_t want = linear_find(&v, s, len), id = UINT32_MAX;
        bool found = weft_names_find(&v, s, len, &id);
        cr_assert_eq(found, want != UINT32_MAX);
        if (found)
            cr_assert_eq(id, want);
    }
    expect_check_ok(&v);
}

Test(names, truncate_forgets_later_names)
{
    char s[32];
    for (int i = 0; i < 100; i++) {   /* grows the index from 16 to 256 slots on the way */
        snprintf(s, sizeof s, "name%d", i);
        intern(&table, s);
    }
    weft_names_truncate(&table, 10);
    weft_names_view v = weft_names_as_view(&table);
    cr_assert_eq(v.n, 10);
    for (int i = 0; i < 100; i++) {
        snprintf(s, sizeof s, "name%d", i);
        uint32_t id = 999;
        bool found = weft_names_find(&v, s, strlen(s), &id);
        cr_assert_eq(found, i < 10, "name%d", i);
        if (found)
            cr_assert_eq(id, (uint32_t)i);
    }
    expect_check_ok(&v);
    cr_assert_eq(intern(&table, "name50"), 10);
    weft_names_truncate(&table, 50);   /* beyond n: nothing happens */
    cr_assert_eq(table.n, 11);
}

/* Mutable copies of a table's arrays, each allocated at exactly its stated length so that
 * AddressSanitizer would catch any read past the end. */
typedef struct names_copy {
    uint64_t *off;
    char *bytes;
    uint32_t *slots;
    weft_names_view v;
} names_copy;

static names_copy copy_of(const weft_names *t)
{
    weft_names_view src = weft_names_as_view(t);
    names_copy c;
    c.off = malloc((src.n + 1) * sizeof *c.off);
    c.bytes = malloc(src.n_bytes ? src.n_bytes : 1);
    c.slots = malloc(src.cap * sizeof *c.slots);
    cr_assert(c.off && c.bytes && c.slots);
    memcpy(c.off, src.off, (src.n + 1) * sizeof *c.off);
    memcpy(c.bytes, src.bytes, src.n_bytes);
    memcpy(c.slots, src.slots, src.cap * sizeof *c.slots);
    c.v = src;
    c.v.off = c.off;
    c.v.bytes = c.bytes;
    c.v.slots = c.slots;
    return c;
}

static void copy_free(names_copy *c)
{
    free(c->off);
    free(c->bytes);
    free(c->slots);
}

/* 40 names "n0".."n39": 128 slots, so plenty of empty ones. Worked by hand: n0..n9 take
 * 3 bytes each with the NUL and n10..n39 take 4, so off[i] = 3i below 10 and
 * 30 + 4(i - 10) from 10 on, ending at off[40] = 150. */
static names_copy good_copy(void)
{
    char s[16];
    for (int i = 0; i < 40; i++) {
        snprintf(s, sizeof s, "n%d", i);
        intern(&table, s);
    }
    names_copy c = copy_of(&table);
    expect_check_ok(&c.v);
    return c;
}

static void expect_corrupt(const weft_names_view *v, const char *want)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_names_check(v, &err), WEFT_ERR_CORRUPT, "accepted; wanted '%s'", want);
    cr_assert_str_eq(err.msg, want);
}

Test(names, check_accepts_empty_and_good_views)
{
    weft_names_view empty = weft_names_as_view(&table);
    expect_check_ok(&empty);
    names_copy c = good_copy();
    copy_free(&c);
}

Test(names, check_rejects_bad_offsets)
{
    names_copy c = good_copy();
    c.off[0] = 1;
    expect_corrupt(&c.v, "name table: first offset is not 0");
    c.off[0] = 0;
    uint64_t keep = c.off[3];
    c.off[3] = c.off[2];   /* name 2 with no room even for its NUL */
    expect_corrupt(&c.v, "name table: name 2 has offsets 6..6, bytes hold 150");
    c.off[3] = UINT64_MAX;   /* far past the end of bytes */
    expect_corrupt(&c.v, "name table: name 2 has offsets 6..18446744073709551615, bytes hold 150");
    c.off[3] = keep;
    c.v.n_bytes = 149;   /* stored bytes shorter than the offsets claim */
    expect_corrupt(&c.v, "name table: name 39 has offsets 146..150, bytes hold 149");
    copy_free(&c);
}

Test(names, check_rejects_trailing_bytes)
{
    names_copy c = good_copy();
    c.v.n_bytes = 100;   /* fewer than stored: caught at the name that runs past */
    expect_corrupt(&c.v, "name table: name 27 has offsets 98..102, bytes hold 100");
    copy_free(&c);
    /* A longer stored blob than the offsets use. */
    names_copy d = copy_of(&table);
    char *more = realloc(d.bytes, 151);
    cr_assert_not_null(more);
    more[150] = '\0';
    d.bytes = more;
    d.v.bytes = more;
    d.v.n_bytes = 151;
    expect_corrupt(&d.v, "name table: names end at byte 150, bytes hold 151");
    copy_free(&d);
}

Test(names, check_rejects_missing_nul)
{
    names_copy c = good_copy();
    c.bytes[c.off[5] - 1] = 'x';
    expect_corrupt(&c.v, "name table: name 4 is not followed by a NUL");
    copy_free(&c);
}

/* Index of a slot holding @p id + 1, and of an empty slot. */
static size_t slot_of(const names_copy *c, uint32_t id)
{
    for (size_t i = 0; i < c->v.cap; i++)
        if (c->slots[i] == id + 1)
            return i;
    cr_assert_fail("id %u has no slot", id);
    return 0;
}

static size_t empty_slot(const names_copy *c)
{
    for (size_t i = 0; i < c->v.cap; i++)
        if (c->slots[i] == 0)
            return i;
    cr_assert_fail("no empty slot");
    return 0;
}

Test(names, check_rejects_slot_out_of_range)
{
    names_copy c = good_copy();
    size_t e = empty_slot(&c);
    c.slots[e] = 41;   /* id 40 of 40 names */
    char want[128];
    snprintf(want, sizeof want, "name table: slot %zu holds id 40, only 40 names", e);
    expect_corrupt(&c.v, want);
    c.slots[e] = UINT32_MAX;
    snprintf(want, sizeof want, "name table: slot %zu holds id 4294967294, only 40 names", e);
    expect_corrupt(&c.v, want);
    copy_free(&c);
}

Test(names, check_rejects_bad_slot_count)
{
    names_copy c = good_copy();
    cr_assert_eq(c.v.cap, 128);
    c.v.cap = 64;   /* a power of two, but less than 2n */
    expect_corrupt(&c.v, "name table: 64 slots for 40 names, need a power of two >= 2n");
    c.v.cap = 96;
    expect_corrupt(&c.v, "name table: 96 slots for 40 names, need a power of two >= 2n");
    c.v.cap = 0;
    expect_corrupt(&c.v, "name table: 0 slots for 40 names, need a power of two >= 2n");
    copy_free(&c);
}

Test(names, check_rejects_unreachable_and_repeated_slots)
{
    names_copy c = good_copy();
    /* Move id 7 to an empty slot: find starts at its home slot and stops at the hole. */
    size_t at = slot_of(&c, 7), e = empty_slot(&c);
    c.slots[e] = 8;
    c.slots[at] = 0;
    expect_corrupt(&c.v, "name table: name 7 is not found under its id");
    /* Id 7 in both places: one slot too many. */
    c.slots[at] = 8;
    expect_corrupt(&c.v, "name table: 41 slots in use for 40 names");
    copy_free(&c);
}

Test(names, check_rejects_repeated_names)
{
    names_copy c = good_copy();
    memcpy(c.bytes + c.off[12], "n11", 3);   /* name 12 "n12" becomes a second "n11" */
    expect_corrupt(&c.v, "name table: name 12 is not found under its id");
    copy_free(&c);
}

Test(names, check_rejects_missing_arrays)
{
    names_copy c = good_copy();
    weft_names_view v = c.v;
    v.off = NULL;
    expect_corrupt(&v, "name table: missing array");
    v = c.v;
    v.bytes = NULL;
    expect_corrupt(&v, "name table: missing array");
    copy_free(&c);
}

Test(names, check_survives_random_corruption)
{
    /* Whatever the bytes, check must answer OK or CORRUPT without reading outside the
     * arrays (this test earns its keep under -fsanitize=address); a flip that changes a
     * slot, an offset or a terminator must be caught. */
    names_copy good = good_copy();
    weft_rng rng;
    weft_rng_seed(&rng, 99);
    for (int k = 0; k < 3000; k++) {
        names_copy c = copy_of(&table);
        uint32_t what = weft_rng_below(&rng, 3);
        bool must_fail = true;
        if (what == 0) {
            size_t i = weft_rng_below(&rng, (uint32_t)(c.v.n + 1));
            c.off[i] ^= 1ULL << weft_rng_below(&rng, 64);
        } else if (what == 1) {
            size_t i = weft_rng_below(&rng, (uint32_t)c.v.n_bytes);
            c.bytes[i] ^= (char)(1u << weft_rng_below(&rng, 8));
            /* a lost terminator must be caught; a changed letter may still hash to a
             * probe run that reaches its slot, which is consistent */
            must_fail = good.bytes[i] == '\0';
        } else {
            size_t i = weft_rng_below(&rng, (uint32_t)c.v.cap);
            c.slots[i] ^= 1u << weft_rng_below(&rng, 32);
        }
        weft_err rc = weft_names_check(&c.v, NULL);
        cr_assert(rc == WEFT_OK || rc == WEFT_ERR_CORRUPT);
        if (must_fail)
            cr_assert_eq(rc, WEFT_ERR_CORRUPT, "flip %d of kind %u accepted", k, what);
        copy_free(&c);
    }
    copy_free(&good);
}
