/* The store's operations on versions: rollback, prune, verify, promotion refusals, export
 * and import, map growth, a full disk, readers that outlive commits, stale reader slots.
 * Expected values are worked out by hand from the sequence of calls in each test (the
 * semantics in include/weft/store.h), or recomputed here independently (zlib CRC-32,
 * nettle SHA-256, bytes read back from the files). */
#include <criterion/criterion.h>
#include <errno.h>
#include <fcntl.h>
#include <nettle/sha2.h>
#include <signal.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>
#include <zlib.h>

#include "fixture.h"
#include "weft/snapshot.h"
#include "weft/store.h"

TestSuite(store_ops, .init = fixture_dir_create, .fini = fixture_dir_remove, .timeout = 60.0);

enum { ROWS = 300, COLS = 8 };   /* 9.6 KB: stored in overflow pages */

/* Values no other blob holds, so that a test can find them in data.mdb. */
static void fill(float *m, size_t n, float base)
{
    for (size_t i = 0; i < n; i++)
        m[i] = base + (float)i * 0.25f;
}

static weft_store *open_store(size_t map_size)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, map_size, &s, &err), WEFT_OK,
                 "%s", err.msg);
    return s;
}

/* The 16 bytes of blob "small" of a snapshot written from @p base. */
static void small_of(float base, char out[17])
{
    snprintf(out, 17, "small-%010.1f", (double)base);
}

/* One snapshot: "m" (ROWS x COLS floats from @p base) and "small" (16 bytes, in a page). */
static uint64_t write_as(weft_store *s, float base, weft_store_state state, const char *reason)
{
    static float m[ROWS * COLS];
    char small[17];
    fill(m, ROWS * COLS, base);
    small_of(base, small);
    weft_store_writer *w = NULL;
    uint64_t v = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &v, &err), WEFT_OK, "%s", err.msg);
    size_t shape[2] = { ROWS, COLS }, n_small = 16;
    cr_assert_eq(weft_store_writer_put(w, "m", WEFT_DTYPE_F32, 2, shape, m, &err), WEFT_OK);
    cr_assert_eq(weft_store_writer_put(w, "small", WEFT_DTYPE_U8, 1, &n_small, small, &err),
                 WEFT_OK);
    json_t *manifest = json_pack("{s:f}", "base", (double)base);
    weft_store_change how = { reason, false };
    cr_assert_eq(weft_store_writer_commit_as(w, manifest, state, &how, &err), WEFT_OK, "%s",
                 err.msg);
    json_decref(manifest);
    return v;
}

static uint64_t write_live(weft_store *s, float base)
{
    return write_as(s, base, WEFT_STORE_STATE_LIVE, NULL);
}

static void expect_head(weft_store *s, uint64_t live, uint64_t previous)
{
    uint64_t l = 99, p = 99;
    weft_error err;
    cr_assert_eq(weft_store_head(s, &l, &p, &err), WEFT_OK, "%s", err.msg);
    cr_assert(l == live && p == previous, "head live %llu previous %llu, expected %llu %llu",
              (unsigned long long)l, (unsigned long long)p, (unsigned long long)live,
              (unsigned long long)previous);
}

static json_t *manifest_of(weft_store *s, uint64_t v)
{
    json_t *m = NULL;
    weft_error err;
    cr_assert_eq(weft_store_manifest(s, v, &m, &err), WEFT_OK, "%s", err.msg);
    return m;
}

static void expect_state(weft_store *s, uint64_t v, const char *state)
{
    json_t *m = manifest_of(s, v);
    const char *got = json_string_value(json_object_get(m, "state"));
    cr_assert(got && !strcmp(got, state), "version %llu is %s, expected %s",
              (unsigned long long)v, got ? got : "(none)", state);
    json_decref(m);
}

/* The last entry of version @p v's history. */
static json_t *last_history(weft_store *s, uint64_t v)
{
    json_t *m = manifest_of(s, v);
    json_t *h = json_object_get(m, "history");
    cr_assert(json_array_size(h) > 0, "version %llu has no history", (unsigned long long)v);
    json_t *last = json_incref(json_array_get(h, json_array_size(h) - 1));
    json_decref(m);
    return last;
}

static size_t problems_of(weft_store *s, uint64_t version, json_t **report)
{
    size_t n = 99;
    weft_error err;
    cr_assert_eq(weft_store_verify(s, version, report, &n, &err), WEFT_OK, "%s", err.msg);
    return n;
}

/* The whole of a file (caller frees). */
static unsigned char *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    cr_assert_not_null(f, "%s: %s", path, strerror(errno));
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    unsigned char *buf = malloc((size_t)n + 1);
    cr_assert_eq(fread(buf, 1, (size_t)n, f), (size_t)n);
    fclose(f);
    *len = (size_t)n;
    return buf;
}

/* XOR the byte at @p at of every copy of @p pattern in data.mdb with @p mask (pwrite: the
 * read-only map of an open store sees it). Returns the number of copies changed. Stale
 * copies in free pages may exist; changing all of them reaches the live one for sure. */
static size_t flip_in_store(const void *pattern, size_t len, size_t at, unsigned char mask)
{
    size_t size = 0, n = 0;
    unsigned char *buf = slurp(fixture_path("data.mdb"), &size);
    int fd = open(fixture_path("data.mdb"), O_RDWR);
    cr_assert(fd >= 0);
    for (size_t i = 0; i + len <= size; i++)
        if (!memcmp(buf + i, pattern, len)) {
            unsigned char b = buf[i + at] ^ mask;
            cr_assert_eq(pwrite(fd, &b, 1, (off_t)(i + at)), 1);
            n++;
        }
    close(fd);
    free(buf);
    return n;
}

/* The 48-byte header the store writes in front of an f32 ROWS x COLS blob (store.h). */
static void expected_header(unsigned char out[48])
{
    uint32_t dtype = WEFT_DTYPE_F32, ndim = 2;
    uint64_t shape[3] = { ROWS, COLS, 0 }, nbytes = ROWS * COLS * 4;
    memcpy(out, "WEFTBLB1", 8);
    memcpy(out + 8, &dtype, 4);
    memcpy(out + 12, &ndim, 4);
    memcpy(out + 16, shape, 24);
    memcpy(out + 40, &nbytes, 8);
}

/* ---- rollback ---- */

Test(store_ops, rollback_restores_previous_and_retires_live)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 1000);
    write_live(s, 2000);
    write_live(s, 3000);
    expect_head(s, 3, 2);
    uint64_t live = 0;
    weft_store_change why = { "bad predictions", false };
    cr_assert_eq(weft_store_rollback(s, &why, &live, &err), WEFT_OK, "%s", err.msg);
    /* 2 was made live over 1, so 1 becomes previous again. */
    cr_assert_eq(live, 2);
    expect_head(s, 2, 1);
    expect_state(s, 3, "retired");
    expect_state(s, 2, "live");
    json_t *h = last_history(s, 3);
    cr_assert_str_eq(json_string_value(json_object_get(h, "state")), "retired");
    cr_assert(strstr(json_string_value(json_object_get(h, "reason")), "bad predictions"));
    json_decref(h);
    h = last_history(s, 2);
    cr_assert_str_eq(json_string_value(json_object_get(h, "state")), "live");
    cr_assert_eq(json_integer_value(json_object_get(h, "previous")), 1);
    json_decref(h);
    /* 1 was the first live version: nothing before it. */
    cr_assert_eq(weft_store_rollback(s, NULL, &live, &err), WEFT_OK, "%s", err.msg);
    expect_head(s, 1, 0);
    cr_assert_eq(weft_store_rollback(s, NULL, &live, &err), WEFT_ERR_NOT_FOUND);
    cr_assert(strstr(err.msg, "no previous"), "message: %s", err.msg);
    expect_head(s, 1, 0);
    weft_store_close(s);
}

Test(store_ops, rollback_follows_the_lineage_not_the_retired_version)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 1000);
    write_live(s, 2000);
    write_live(s, 3000);
    cr_assert_eq(weft_store_rollback(s, NULL, NULL, &err), WEFT_OK);   /* live 2, prev 1 */
    cr_assert_eq(weft_store_promote(s, 3, &err), WEFT_OK, "%s", err.msg);
    expect_head(s, 3, 2);
    /* 2's last live entry (the rollback) recorded previous 1. */
    cr_assert_eq(weft_store_rollback(s, NULL, NULL, &err), WEFT_OK);
    expect_head(s, 2, 1);
    /* Promote 1 over 2 (1 records previous 2); rolling back to 2 must not make the retired 1
     * previous again, although 2's lineage names 1. */
    cr_assert_eq(weft_store_promote(s, 1, &err), WEFT_OK);
    expect_head(s, 1, 2);
    cr_assert_eq(weft_store_rollback(s, NULL, NULL, &err), WEFT_OK);
    expect_head(s, 2, 0);
    weft_store_close(s);
}

Test(store_ops, rollback_refuses_a_damaged_previous_and_changes_nothing)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 1111);
    write_live(s, 2222);
    float m[4];
    fill(m, 4, 1111);
    cr_assert_gt(flip_in_store(m, sizeof m, 5, 0x10), 0);
    cr_assert_eq(weft_store_rollback(s, NULL, NULL, &err), WEFT_ERR_CORRUPT);
    cr_assert(strstr(err.msg, "'m'"), "message: %s", err.msg);
    expect_head(s, 2, 1);
    expect_state(s, 2, "live");
    weft_store_close(s);
}

/* ---- prune ---- */

Test(store_ops, prune_deletes_oldest_and_never_live_or_previous)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    for (int i = 1; i <= 6; i++)
        write_as(s, 100.0f * (float)i, WEFT_STORE_STATE_STAGED, NULL);
    cr_assert_eq(weft_store_promote(s, 5, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_promote(s, 2, &err), WEFT_OK, "%s", err.msg);
    expect_head(s, 2, 5);
    json_t *deleted = NULL;
    /* Besides live 2 and previous 5: 1, 3, 4, 6. Keep 1: the oldest three go. */
    cr_assert_eq(weft_store_prune(s, 1, &deleted, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(json_array_size(deleted), 3);
    const uint64_t want[3] = { 1, 3, 4 };
    /* Each version stored two values: "m" and "small", each with a 48-byte header. */
    const json_int_t bytes = (48 + ROWS * COLS * 4) + (48 + 16);
    for (size_t i = 0; i < 3; i++) {
        json_t *d = json_array_get(deleted, i);
        cr_assert_eq(json_integer_value(json_object_get(d, "version")), (json_int_t)want[i]);
        cr_assert_eq(json_integer_value(json_object_get(d, "bytes")), bytes);
        cr_assert_str_eq(json_string_value(json_object_get(d, "state")), "staged");
    }
    json_decref(deleted);
    json_t *m = NULL;
    for (size_t i = 0; i < 3; i++)
        cr_assert_eq(weft_store_manifest(s, want[i], &m, &err), WEFT_ERR_NOT_FOUND);
    expect_head(s, 2, 5);
    /* No blob of a deleted version is left behind, and the kept ones are whole. */
    json_t *report = NULL;
    cr_assert_eq(problems_of(s, 0, &report), 0, "%s", json_dumps(report, 0));
    cr_assert_eq(json_array_size(json_object_get(report, "versions")), 3);
    json_decref(report);
    /* Keep 0 removes 6; live and previous stay whatever is asked. */
    cr_assert_eq(weft_store_prune(s, 0, &deleted, &err), WEFT_OK);
    cr_assert_eq(json_array_size(deleted), 1);
    cr_assert_eq(json_integer_value(json_object_get(json_array_get(deleted, 0), "version")), 6);
    json_decref(deleted);
    cr_assert_eq(weft_store_prune(s, 0, &deleted, &err), WEFT_OK);
    cr_assert_eq(json_array_size(deleted), 0);
    json_decref(deleted);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 2, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_snapshot_release(snap);
    cr_assert_eq(weft_snapshot_open(s, 5, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_snapshot_release(snap);
    /* The next version follows the last one stored, not a deleted one. */
    cr_assert_eq(write_as(s, 700, WEFT_STORE_STATE_STAGED, NULL), 7);
    weft_store_close(s);
}

/* ---- verify ---- */

Test(store_ops, verify_finds_one_flipped_byte_in_large_and_small_data)
{
    weft_store *s = open_store(1 << 26);
    json_t *report = NULL;
    write_live(s, 4242);
    write_live(s, 5353);
    cr_assert_eq(problems_of(s, 0, &report), 0);
    json_decref(report);
    float m[4];
    fill(m, 4, 4242);
    /* Byte 2 of the second float of version 1's "m" (overflow pages). */
    cr_assert_gt(flip_in_store(m, sizeof m, 6, 0x01), 0);
    cr_assert_eq(problems_of(s, 0, &report), 1);
    json_t *p = json_array_get(json_object_get(report, "problems"), 0);
    cr_assert_eq(json_integer_value(json_object_get(p, "version")), 1);
    cr_assert_str_eq(json_string_value(json_object_get(p, "blob")), "m");
    cr_assert(strstr(json_string_value(json_object_get(p, "problem")), "CRC-32"));
    json_decref(report);
    cr_assert_eq(problems_of(s, 2, &report), 0, "version 2 alone is intact");
    json_decref(report);
    ((unsigned char *)m)[6] ^= 0x01;   /* find the damaged bytes and flip them back */
    cr_assert_gt(flip_in_store(m, sizeof m, 6, 0x01), 0);
    cr_assert_eq(problems_of(s, 0, &report), 0, "restored");
    json_decref(report);
    /* A value small enough to live inside a page: "small" of version 2. */
    char small[17];
    small_of(5353, small);
    cr_assert_gt(flip_in_store(small, 16, 15, 0x80), 0);
    cr_assert_eq(problems_of(s, 0, &report), 1);
    p = json_array_get(json_object_get(report, "problems"), 0);
    cr_assert_eq(json_integer_value(json_object_get(p, "version")), 2);
    cr_assert_str_eq(json_string_value(json_object_get(p, "blob")), "small");
    json_decref(report);
    weft_store_close(s);
}

Test(store_ops, verify_finds_a_flipped_byte_anywhere_in_the_header)
{
    weft_store *s = open_store(1 << 26);
    json_t *report = NULL;
    write_live(s, 777);
    unsigned char head[48];
    expected_header(head);
    for (size_t i = 0; i < 48; i++) {
        cr_assert_gt(flip_in_store(head, 48, i, 0x04), 0, "header not found in data.mdb");
        size_t n = problems_of(s, 1, &report);
        cr_assert_eq(n, 1, "flipped header byte %zu not found", i);
        json_t *p = json_array_get(json_object_get(report, "problems"), 0);
        cr_assert_str_eq(json_string_value(json_object_get(p, "blob")), "m");
        json_decref(report);
        unsigned char damaged[48];
        memcpy(damaged, head, 48);
        damaged[i] ^= 0x04;
        cr_assert_gt(flip_in_store(damaged, 48, i, 0x04), 0);   /* restore */
        cr_assert_eq(problems_of(s, 1, &report), 0, "byte %zu restored", i);
        json_decref(report);
    }
    weft_store_close(s);
}

/* ---- promotion refusals, forced promotion ---- */

Test(store_ops, promote_refuses_a_damaged_snapshot_even_when_forced)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 1.5f);
    write_as(s, 8888, WEFT_STORE_STATE_STAGED, NULL);
    float m[4];
    fill(m, 4, 8888);
    cr_assert_gt(flip_in_store(m, sizeof m, 0, 0xff), 0);
    cr_assert_eq(weft_store_promote(s, 2, &err), WEFT_ERR_CORRUPT);
    cr_assert(strstr(err.msg, "version 2") && strstr(err.msg, "'m'"), "message: %s", err.msg);
    weft_store_change force = { "try anyway", true };
    cr_assert_eq(weft_store_promote_with(s, 2, &force, &err), WEFT_ERR_CORRUPT);
    expect_head(s, 1, 0);
    expect_state(s, 2, "staged");
    weft_store_close(s);
}

Test(store_ops, promote_refuses_rejected_unless_forced_and_records_it)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 10);
    write_as(s, 20, WEFT_STORE_STATE_REJECTED, "test MRR 0.30 is more than 0.01 below 0.35");
    expect_state(s, 2, "rejected");
    json_t *m = manifest_of(s, 2);
    cr_assert_str_eq(json_string_value(json_object_get(m, "reason")),
                     "test MRR 0.30 is more than 0.01 below 0.35");
    json_decref(m);
    cr_assert_eq(weft_store_promote(s, 2, &err), WEFT_ERR_INVALID);
    cr_assert(strstr(err.msg, "rejected") && strstr(err.msg, "0.35"), "message: %s", err.msg);
    expect_head(s, 1, 0);
    weft_store_change force = { "accepted by the on-call", true };
    cr_assert_eq(weft_store_promote_with(s, 2, &force, &err), WEFT_OK, "%s", err.msg);
    expect_head(s, 2, 1);
    m = manifest_of(s, 2);
    cr_assert(json_is_true(json_object_get(m, "forced")));
    cr_assert(json_is_string(json_object_get(m, "forced_at")));
    json_decref(m);
    json_t *h = last_history(s, 2);
    cr_assert_str_eq(json_string_value(json_object_get(h, "state")), "live");
    cr_assert(json_is_true(json_object_get(h, "forced")));
    cr_assert(strstr(json_string_value(json_object_get(h, "reason")), "on-call"));
    json_decref(h);
    weft_store_close(s);
}

Test(store_ops, commit_as_live_forced_records_the_override)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 30);
    weft_store_writer *w = NULL;
    cr_assert_eq(weft_store_writer_open(s, &w, NULL, &err), WEFT_OK);
    size_t one = 1;
    cr_assert_eq(weft_store_writer_put(w, "x", WEFT_DTYPE_U8, 1, &one, "x", &err), WEFT_OK);
    json_t *manifest = json_pack("{s:s, s:i}", "state", "made up", "version", 77);
    weft_store_change how = { "the gate refused: accuracy below baseline", true };
    cr_assert_eq(weft_store_writer_commit_as(w, manifest, WEFT_STORE_STATE_LIVE, &how, &err),
                 WEFT_OK, "%s", err.msg);
    json_decref(manifest);
    expect_head(s, 2, 1);
    json_t *m = manifest_of(s, 2);
    cr_assert_eq(json_integer_value(json_object_get(m, "version")), 2, "the store's own fields");
    cr_assert_str_eq(json_string_value(json_object_get(m, "state")), "live");
    cr_assert(json_is_true(json_object_get(m, "forced")));
    cr_assert_eq(json_integer_value(json_object_get(m, "parent")), 1);
    json_decref(m);
    json_t *h = last_history(s, 1);
    cr_assert_str_eq(json_string_value(json_object_get(h, "state")), "retired");
    json_decref(h);
    /* A retired state cannot be where a snapshot starts; the old API refuses unknown ones. */
    cr_assert_eq(weft_store_writer_open(s, &w, NULL, &err), WEFT_OK);
    cr_assert_eq(weft_store_writer_commit_as(w, NULL, WEFT_STORE_STATE_RETIRED, NULL, &err),
                 WEFT_ERR_INVALID);
    cr_assert_eq(weft_store_writer_open(s, &w, NULL, &err), WEFT_OK);
    json_t *empty = json_object();
    cr_assert_eq(weft_store_writer_commit(w, empty, false, "bogus", &err), WEFT_ERR_INVALID);
    json_decref(empty);
    expect_head(s, 2, 1);
    weft_store_close(s);
}

/* ---- export and import ---- */

/* SHA-256 (nettle) of the first @p n bytes of @p buf. */
static void sha256_of(const unsigned char *buf, size_t n, unsigned char out[32])
{
    struct sha256_ctx ctx;
    sha256_init(&ctx);
    sha256_update(&ctx, n, buf);
    sha256_digest(&ctx, 32, out);
}

/* A second store directory inside the fixture's (removed by the test itself). */
static const char *other_dir(void)
{
    static char dir[128];
    snprintf(dir, sizeof dir, "%s/other", fixture_dir);
    mkdir(dir, 0755);
    return dir;
}

static void remove_other(void)
{
    char path[160];
    const char *dir = other_dir();
    snprintf(path, sizeof path, "%s/data.mdb", dir);
    unlink(path);
    snprintf(path, sizeof path, "%s/lock.mdb", dir);
    unlink(path);
    rmdir(dir);
}

Test(store_ops, export_then_import_is_byte_identical)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 31.25f);
    write_as(s, 62.5f, WEFT_STORE_STATE_REJECTED, "below the live one");
    char sha[65];
    char a[256], b[256], c[256];
    snprintf(a, sizeof a, "%s", fixture_path("a.snap"));
    snprintf(b, sizeof b, "%s", fixture_path("b.snap"));
    snprintf(c, sizeof c, "%s", fixture_path("c.snap"));
    cr_assert_eq(weft_store_export(s, 2, a, sha, &err), WEFT_OK, "%s", err.msg);
    size_t na = 0, nb = 0, nc = 0;
    unsigned char *fa = slurp(a, &na);
    /* The file's last 32 bytes are the SHA-256 of the rest (nettle, computed here). */
    unsigned char digest[32];
    sha256_of(fa, na - 32, digest);
    cr_assert_eq(memcmp(digest, fa + na - 32, 32), 0);
    char hex[65];
    for (size_t i = 0; i < 32; i++)
        snprintf(hex + 2 * i, 3, "%02x", digest[i]);
    cr_assert_str_eq(sha, hex);
    cr_assert_eq(memcmp(fa, "WEFTSNAP", 8), 0);
    /* Import into a fresh store: version 1, staged, with its origin; nothing goes live. */
    weft_store *t = NULL;
    cr_assert_eq(weft_store_open(other_dir(), WEFT_STORE_CREATE, 1 << 26, &t, &err), WEFT_OK);
    uint64_t v = 0;
    cr_assert_eq(weft_store_import(t, a, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(v, 1);
    uint64_t live = 9;
    cr_assert_eq(weft_store_head(t, &live, NULL, &err), WEFT_OK);
    cr_assert_eq(live, 0, "an import is never live by itself");
    json_t *m = NULL;
    cr_assert_eq(weft_store_manifest(t, 1, &m, &err), WEFT_OK);
    cr_assert_str_eq(json_string_value(json_object_get(m, "state")), "staged");
    cr_assert_null(json_object_get(m, "reason"), "the rejection belonged to the other store");
    json_t *origin = json_object_get(m, "origin");
    cr_assert_str_eq(json_string_value(json_object_get(origin, "sha256")), hex);
    cr_assert_str_eq(json_string_value(json_object_get(origin, "file")), a);
    json_decref(m);
    /* The data is the data: the floats written for version 2 of the first store. */
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(t, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_blob blob;
    cr_assert(weft_snapshot_blob(snap, "m", &blob));
    float *want = malloc(sizeof(float) * ROWS * COLS);
    fill(want, ROWS * COLS, 62.5f);
    cr_assert_eq(memcmp(blob.data, want, sizeof(float) * ROWS * COLS), 0);
    free(want);
    weft_snapshot_release(snap);
    /* Exporting the imported snapshot gives the same bytes. */
    cr_assert_eq(weft_store_export(t, 1, b, NULL, &err), WEFT_OK, "%s", err.msg);
    unsigned char *fb = slurp(b, &nb);
    cr_assert(na == nb && !memcmp(fa, fb, na), "re-exported file differs (%zu, %zu bytes)", na,
              nb);
    /* Also when it is promoted (its store fields change) and imported a second time. */
    cr_assert_eq(weft_store_promote(t, 1, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_import(t, b, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(v, 2);
    cr_assert_eq(weft_store_export(t, 1, c, NULL, &err), WEFT_OK);
    unsigned char *fc = slurp(c, &nc);
    cr_assert(na == nc && !memcmp(fa, fc, na));
    free(fc);
    cr_assert_eq(weft_store_export(t, 2, c, NULL, &err), WEFT_OK);
    fc = slurp(c, &nc);
    cr_assert(na == nc && !memcmp(fa, fc, na));
    free(fa);
    free(fb);
    free(fc);
    weft_store_close(t);
    remove_other();
    weft_store_close(s);
}

/* Import @p bytes as a file; expect it refused with @p code, with data.mdb untouched. */
static void expect_refused(weft_store *s, const unsigned char *bytes, size_t n, weft_err code,
                           const char *says, const char *what)
{
    size_t before_n = 0, after_n = 0;
    unsigned char *before = slurp(fixture_path("data.mdb"), &before_n);
    const char *path = fixture_write("bad.snap", bytes, n);
    weft_error err;
    uint64_t v = 0;
    cr_assert_eq(weft_store_import(s, path, &v, &err), code, "%s: got '%s'", what, err.msg);
    cr_assert(strstr(err.msg, says), "%s: message '%s' lacks '%s'", what, err.msg, says);
    unsigned char *after = slurp(fixture_path("data.mdb"), &after_n);
    cr_assert(before_n == after_n && !memcmp(before, after, before_n),
              "%s: data.mdb changed", what);
    free(before);
    free(after);
}

Test(store_ops, import_refuses_truncated_or_tampered_files_and_writes_nothing)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 123);
    char a[256];
    snprintf(a, sizeof a, "%s", fixture_path("a.snap"));
    cr_assert_eq(weft_store_export(s, 1, a, NULL, &err), WEFT_OK, "%s", err.msg);
    size_t n = 0;
    unsigned char *file = slurp(a, &n);
    /* Truncated anywhere: in the fixed header, the manifest, a blob, the checksum. */
    const size_t cuts[] = { 0, 7, 23, 40, n / 2, n - 33, n - 32, n - 1 };
    for (size_t i = 0; i < sizeof cuts / sizeof cuts[0]; i++) {
        char what[64];
        snprintf(what, sizeof what, "cut at %zu of %zu", cuts[i], n);
        expect_refused(s, file, cuts[i], WEFT_ERR_CORRUPT, "truncated", what);
    }
    unsigned char *bad = malloc(n + 1);
    /* A byte of the manifest changed (a digit of "base": the JSON still parses). */
    memcpy(bad, file, n);
    unsigned char *digit = memchr(bad + 24, '1', n - 24);
    cr_assert_not_null(digit);
    *digit = '2';
    expect_refused(s, bad, n, WEFT_ERR_CORRUPT, "SHA-256", "manifest byte");
    /* A data byte changed, the checksum recomputed over it: the CRC-32 still catches it. */
    memcpy(bad, file, n);
    bad[n - 32 - 100] ^= 0x01;
    sha256_of(bad, n - 32, bad + n - 32);
    expect_refused(s, bad, n, WEFT_ERR_CORRUPT, "CRC-32", "data byte, checksum redone");
    /* A data byte changed alone. */
    memcpy(bad, file, n);
    bad[n - 32 - 100] ^= 0x01;
    expect_refused(s, bad, n, WEFT_ERR_CORRUPT, "CRC-32", "data byte");
    /* The checksum changed; a byte after it; not a snapshot file at all. */
    memcpy(bad, file, n);
    bad[n - 1] ^= 0x01;
    expect_refused(s, bad, n, WEFT_ERR_CORRUPT, "SHA-256", "checksum byte");
    memcpy(bad, file, n);
    bad[n] = 0;
    expect_refused(s, bad, n + 1, WEFT_ERR_CORRUPT, "after the SHA-256", "trailing byte");
    memcpy(bad, file, n);
    bad[0] = 'X';
    expect_refused(s, bad, n, WEFT_ERR_CORRUPT, "not a weft snapshot file", "magic");
    free(bad);
    free(file);
    expect_head(s, 1, 0);
    json_t *list = NULL;
    cr_assert_eq(weft_store_list(s, &list, &err), WEFT_OK);
    cr_assert_eq(json_array_size(list), 1);
    json_decref(list);
    /* The intact file still imports. */
    uint64_t v = 0;
    cr_assert_eq(weft_store_import(s, a, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(v, 2);
    weft_store_close(s);
}

Test(store_ops, export_of_a_damaged_snapshot_fails_and_keeps_the_old_file)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 9191);
    const char *path = fixture_write_text("out.snap", "the previous export");
    char out[256];
    snprintf(out, sizeof out, "%s", path);
    float m[4];
    fill(m, 4, 9191);
    cr_assert_gt(flip_in_store(m, sizeof m, 9, 0x02), 0);
    cr_assert_eq(weft_store_export(s, 1, out, NULL, &err), WEFT_ERR_CORRUPT);
    cr_assert(strstr(err.msg, "'m'"), "message: %s", err.msg);
    size_t n = 0;
    unsigned char *kept = slurp(out, &n);
    cr_assert(n == strlen("the previous export") && !memcmp(kept, "the previous export", n));
    free(kept);
    struct stat st;
    char tmp[300];
    snprintf(tmp, sizeof tmp, "%s.tmp", out);
    cr_assert_neq(stat(tmp, &st), 0, "the temporary file is removed");
    cr_assert_eq(weft_store_export(s, 9, out, NULL, &err), WEFT_ERR_NOT_FOUND);
    weft_store_close(s);
}

/* ---- map growth ---- */

enum { BIG_ROWS = 1024 * 1024 };   /* 4 MiB of u32 */

struct big_put {
    uint32_t *data;
    int calls;
};

static weft_err put_big(void *ctx, weft_store_writer *w, json_t *manifest, weft_error *err)
{
    struct big_put *b = ctx;
    size_t shape = BIG_ROWS;
    b->calls++;
    (void)manifest;
    return weft_store_writer_put(w, "big", WEFT_DTYPE_U32, 1, &shape, b->data, err);
}

static uint32_t *big_data(uint32_t seed)
{
    uint32_t *d = malloc(sizeof *d * BIG_ROWS);
    for (size_t i = 0; i < BIG_ROWS; i++)
        d[i] = seed * 2654435761u + (uint32_t)i;
    return d;
}

Test(store_ops, a_full_map_grows_and_the_write_runs_again)
{
    weft_store *s = open_store(1 << 20);   /* 1 MiB: the 4 MiB blob does not fit */
    weft_error err;
    size_t map0 = 0, map1 = 0, used = 0;
    cr_assert_eq(weft_store_usage(s, NULL, &map0, &err), WEFT_OK);
    struct big_put b = { big_data(1), 0 };
    json_t *manifest = json_object();
    uint64_t v = 0;
    cr_assert_eq(weft_store_write(s, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, &v,
                                  &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(v, 1);
    /* 1 MiB -> 2 -> 4 -> 8: three failed attempts, then the one that fits. */
    cr_assert_eq(b.calls, 4, "put called %d times", b.calls);
    cr_assert_eq(weft_store_usage(s, &used, &map1, &err), WEFT_OK);
    cr_assert(map1 >= used && used > 4u << 20 && map1 == 8u * map0, "map %zu, used %zu", map1,
              used);
    weft_snapshot *snap = NULL;
    weft_blob blob;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    cr_assert(weft_snapshot_blob(snap, "big", &blob));
    cr_assert_eq(memcmp(blob.data, b.data, sizeof(uint32_t) * BIG_ROWS), 0);
    weft_snapshot_release(snap);
    weft_store_close(s);
    /* Reopened with the small size asked, the store keeps the grown map. */
    s = open_store(1 << 20);
    cr_assert_eq(weft_store_usage(s, NULL, &map0, &err), WEFT_OK);
    cr_assert_geq(map0, map1);
    weft_store_close(s);
    json_decref(manifest);
    free(b.data);
}

Test(store_ops, the_map_does_not_grow_under_an_open_snapshot_unless_reserved)
{
    weft_store *s = open_store(1 << 20);
    weft_error err;
    write_live(s, 5);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    struct big_put b = { big_data(2), 0 };
    json_t *manifest = json_object();
    /* Growing would move the map under the snapshot's pointers: refused, clearly. */
    cr_assert_eq(weft_store_write(s, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL,
                                  &err), WEFT_ERR_LIMIT);
    cr_assert(strstr(err.msg, "release"), "message: %s", err.msg);
    expect_head(s, 1, 0);
    weft_blob blob;
    char small[17];
    small_of(5, small);
    cr_assert(weft_snapshot_blob(snap, "small", &blob));
    cr_assert_eq(memcmp(blob.data, small, 16), 0);
    weft_snapshot_release(snap);
    /* Reserved ahead (no snapshot open), the same write succeeds while one is held. */
    cr_assert_eq(weft_store_reserve(s, 6u << 20, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    b.calls = 0;
    cr_assert_eq(weft_store_write(s, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL,
                                  &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(b.calls, 1);
    weft_snapshot_release(snap);
    expect_head(s, 2, 1);
    json_decref(manifest);
    free(b.data);
    weft_store_close(s);
}

Test(store_ops, a_writable_open_leaves_room_for_two_more_of_the_largest_snapshot)
{
    weft_store *s = open_store(1 << 20);
    weft_error err;
    struct big_put b = { big_data(6), 0 };
    json_t *manifest = json_object();
    cr_assert_eq(weft_store_write(s, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL,
                                  &err), WEFT_OK, "%s", err.msg);
    weft_store_close(s);
    /* Version 1 stores 4 MiB + 48 bytes; reopened asking for 1 MiB, the map holds what is
     * used plus twice that, so a process holding a snapshot can write one as large. */
    s = open_store(1 << 20);
    size_t used = 0, map = 0;
    cr_assert_eq(weft_store_usage(s, &used, &map, &err), WEFT_OK);
    cr_assert_geq(map, used + 2 * ((size_t)BIG_ROWS * 4 + 48), "map %zu, used %zu", map, used);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    b.calls = 0;
    cr_assert_eq(weft_store_write(s, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL,
                                  &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(b.calls, 1, "it fitted the first time");
    weft_snapshot_release(snap);
    expect_head(s, 2, 1);
    json_decref(manifest);
    free(b.data);
    weft_store_close(s);
}

/* In a child process: open the store with @p map_size, write a 4 MiB live snapshot, exit
 * 0 on success. The parent's handle is never touched in the child (an LMDB rule). */
static pid_t spawn_big_writer(size_t map_size, uint32_t seed)
{
    pid_t pid = fork();
    if (pid == 0) {
        weft_store *cs = NULL;
        struct big_put b = { big_data(seed), 0 };
        json_t *manifest = json_object();
        if (weft_store_open(fixture_dir, 0, map_size, &cs, NULL) ||
            weft_store_write(cs, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL,
                             NULL))
            _exit(3);
        weft_store_close(cs);
        _exit(0);
    }
    return pid;
}

static void expect_child_ok(pid_t pid)
{
    int status = 0;
    cr_assert_eq(waitpid(pid, &status, 0), pid);
    cr_assert(WIFEXITED(status) && WEXITSTATUS(status) == 0, "child status %d", status);
}

Test(store_ops, a_map_grown_by_another_process_is_followed)
{
    weft_store *s = open_store(1 << 20);
    weft_error err;
    write_live(s, 6);
    expect_child_ok(spawn_big_writer(16u << 20, 3));
    /* The data file now reaches past this process's 1 MiB map: adopted on the next read. */
    expect_head(s, 2, 1);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 2, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_snapshot_release(snap);
    weft_store_close(s);
}

Test(store_ops, a_grown_map_is_not_adopted_under_an_open_snapshot)
{
    weft_store *s = open_store(1 << 20);
    weft_error err;
    write_live(s, 7);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    expect_child_ok(spawn_big_writer(16u << 20, 4));
    uint64_t live = 0;
    cr_assert_eq(weft_store_head(s, &live, NULL, &err), WEFT_ERR_LIMIT);
    cr_assert(strstr(err.msg, "release"), "message: %s", err.msg);
    weft_blob blob;   /* the held snapshot still reads its own data */
    char small[17];
    small_of(7, small);
    cr_assert(weft_snapshot_blob(snap, "small", &blob));
    cr_assert_eq(memcmp(blob.data, small, 16), 0);
    weft_snapshot_release(snap);
    cr_assert_eq(weft_store_remap(s, &err), WEFT_OK, "%s", err.msg);
    expect_head(s, 2, 1);
    weft_store_close(s);
}

/* ---- a full disk ---- */

Test(store_ops, a_full_disk_fails_the_write_clearly_and_keeps_the_store)
{
    weft_store *s = open_store(1 << 26);
    write_live(s, 8);
    weft_store_close(s);
    struct stat st;
    cr_assert_eq(stat(fixture_path("data.mdb"), &st), 0);
    int fds[2];
    cr_assert_eq(pipe(fds), 0);
    pid_t pid = fork();
    if (pid == 0) {
        /* The file may grow by 64 KiB, then write() fails with EFBIG (SIGXFSZ ignored):
         * what a full disk looks like to the writer. */
        signal(SIGXFSZ, SIG_IGN);
        struct rlimit rl = { (rlim_t)st.st_size + 65536, (rlim_t)st.st_size + 65536 };
        weft_store *cs = NULL;
        weft_error cerr;
        weft_error_clear(&cerr);
        struct big_put b = { big_data(5), 0 };
        json_t *manifest = json_object();
        weft_err e = weft_store_open(fixture_dir, 0, 1 << 26, &cs, &cerr);
        if (e == WEFT_OK && setrlimit(RLIMIT_FSIZE, &rl) != 0)
            _exit(4);
        if (e == WEFT_OK)
            e = weft_store_write(cs, put_big, &b, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL,
                                 &cerr);
        if (write(fds[1], &cerr, sizeof cerr) != (ssize_t)sizeof cerr)
            _exit(5);
        _exit(e == WEFT_ERR_IO ? 0 : 6);
    }
    close(fds[1]);
    weft_error got;
    cr_assert_eq(read(fds[0], &got, sizeof got), (ssize_t)sizeof got);
    close(fds[0]);
    int status = 0;
    waitpid(pid, &status, 0);
    cr_assert(WIFEXITED(status) && WEXITSTATUS(status) == 0, "child exit %d, error '%s'",
              WEXITSTATUS(status), got.msg);
    cr_assert(strstr(got.msg, "nothing was stored") && strstr(got.msg, "data.mdb"),
              "message: %s", got.msg);
    cr_assert(strstr(got.msg, "file too large") || strstr(got.msg, "short write"),
              "message: %s", got.msg);
    /* The store opens, verifies, and version 1 is still live and whole. */
    s = open_store(1 << 26);
    json_t *report = NULL;
    cr_assert_eq(problems_of(s, 0, &report), 0);
    cr_assert_eq(json_array_size(json_object_get(report, "versions")), 1);
    json_decref(report);
    expect_head(s, 1, 0);
    /* With room again the same write goes through as version 2. */
    cr_assert_eq(write_live(s, 9), 2);
    weft_store_close(s);
}

/* ---- readers across commits ---- */

Test(store_ops, a_held_snapshot_is_unchanged_while_two_more_are_committed)
{
    weft_store *s = open_store(1 << 26);
    weft_error err;
    write_live(s, 11);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_blob blob;
    cr_assert(weft_snapshot_blob(snap, "m", &blob));
    size_t n = blob.nbytes;
    unsigned char *copy = malloc(n);
    memcpy(copy, blob.data, n);
    uint32_t crc = (uint32_t)crc32_z(crc32_z(0L, Z_NULL, 0), blob.data, n);
    cr_assert_eq(crc, blob.crc32);
    /* Another process commits two snapshots, then one more after pruning version 1 away:
     * its pages are free for reuse except that this reader pins them. */
    pid_t pid = fork();
    if (pid == 0) {
        weft_store *cs = NULL;
        json_t *deleted = NULL;
        if (weft_store_open(fixture_dir, 0, 1 << 26, &cs, NULL))
            _exit(3);
        static float m[ROWS * COLS];
        for (int k = 0; k < 3; k++) {
            weft_store_writer *w = NULL;
            size_t shape[2] = { ROWS, COLS };
            json_t *manifest = json_object();
            fill(m, ROWS * COLS, 50.0f + (float)k);
            if (weft_store_writer_open(cs, &w, NULL, NULL) ||
                weft_store_writer_put(w, "m", WEFT_DTYPE_F32, 2, shape, m, NULL) ||
                weft_store_writer_commit_as(w, manifest, WEFT_STORE_STATE_LIVE, NULL, NULL))
                _exit(4);
            json_decref(manifest);
            if (k == 1 && weft_store_prune(cs, 0, &deleted, NULL))
                _exit(5);
        }
        json_decref(deleted);
        weft_store_close(cs);
        _exit(0);
    }
    expect_child_ok(pid);
    json_t *m = NULL;
    cr_assert_eq(weft_store_manifest(s, 1, &m, &err), WEFT_ERR_NOT_FOUND, "version 1 pruned");
    expect_head(s, 4, 3);
    cr_assert(weft_snapshot_blob(snap, "m", &blob));
    cr_assert_eq(memcmp(blob.data, copy, n), 0, "the held snapshot's bytes changed");
    cr_assert_eq((uint32_t)crc32_z(crc32_z(0L, Z_NULL, 0), blob.data, n), crc);
    weft_snapshot_release(snap);
    free(copy);
    weft_store_close(s);
}

/* ---- stale reader slots ---- */

Test(store_ops, reader_slots_of_dead_processes_are_cleared_and_counted)
{
    /* This process keeps the store open, as a server would: the first process to open a
     * store resets the reader table, so a stale slot matters only while others hold it. */
    weft_store *s = open_store(1 << 26);
    write_live(s, 12);
    pid_t pid = fork();
    if (pid == 0) {   /* opens a snapshot and dies without releasing it */
        weft_store *cs = NULL;
        weft_snapshot *snap = NULL;
        if (weft_store_open(fixture_dir, WEFT_STORE_READONLY, 1 << 26, &cs, NULL) ||
            weft_snapshot_open(cs, 1, &snap, NULL))
            _exit(3);
        _exit(0);
    }
    expect_child_ok(pid);
    cr_assert_eq(weft_store_stale_readers(s), 0);
    json_t *report = NULL;
    cr_assert_eq(problems_of(s, 0, &report), 0);
    cr_assert_eq(json_integer_value(json_object_get(report, "stale_readers_cleared")), 1);
    json_decref(report);
    cr_assert_eq(weft_store_stale_readers(s), 1);
    weft_store_close(s);
}
