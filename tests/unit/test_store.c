/* The LMDB snapshot store: write, read back in place, promote, abort, crash, corruption. */
#include <criterion/criterion.h>
#include <fcntl.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "fixture.h"
#include "weft/snapshot.h"
#include "weft/store.h"

TestSuite(store, .init = fixture_dir_create, .fini = fixture_dir_remove);

enum { ROWS = 300, COLS = 8 };   /* 9.6 KB: stored in overflow pages */

static float matrix[ROWS * COLS];

static void fill_matrix(float base)
{
    for (size_t i = 0; i < ROWS * COLS; i++)
        matrix[i] = base + (float)i * 0.25f;
}

/* Write one snapshot holding "m" (the matrix) and "tag" (3 bytes); returns its version. */
static uint64_t write_snapshot(weft_store *s, bool promote, const char *note)
{
    weft_store_writer *w = NULL;
    uint64_t v = 0;
    weft_error err;
    cr_assert_eq(weft_store_writer_open(s, &w, &v, &err), WEFT_OK, "%s", err.msg);
    size_t shape[2] = { ROWS, COLS }, three = 3;
    cr_assert_eq(weft_store_writer_put(w, "m", WEFT_DTYPE_F32, 2, shape, matrix, &err), WEFT_OK);
    cr_assert_eq(weft_store_writer_put(w, "tag", WEFT_DTYPE_U8, 1, &three, "abc", &err), WEFT_OK);
    json_t *m = json_pack("{s:s}", "note", note);
    cr_assert_eq(weft_store_writer_commit(w, m, promote, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(m);
    return v;
}

Test(store, snapshot_reads_back_in_place_and_aligned)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK, "%s",
                 err.msg);
    fill_matrix(1.0f);
    cr_assert_eq(write_snapshot(s, true, "first"), 1);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_blob b;
    cr_assert(weft_snapshot_blob(snap, "m", &b));
    cr_assert_eq(b.dtype, WEFT_DTYPE_F32);
    cr_assert(b.ndim == 2 && b.shape[0] == ROWS && b.shape[1] == COLS);
    cr_assert_eq(memcmp(b.data, matrix, sizeof matrix), 0);
    /* Overflow values start 16 bytes past a page; the 48-byte header aligns the data. */
    cr_assert_eq((uintptr_t)b.data % 64, 0, "data at %p", b.data);
    cr_assert(weft_snapshot_blob(snap, "tag", &b));
    cr_assert_eq(memcmp(b.data, "abc", 3), 0);
    cr_assert_not(weft_snapshot_blob(snap, "absent", &b));
    const json_t *m = weft_snapshot_manifest(snap);
    cr_assert_str_eq(json_string_value(json_object_get(m, "note")), "first");
    cr_assert_str_eq(json_string_value(json_object_get(m, "state")), "live");
    cr_assert(json_is_null(json_object_get(m, "parent")));
    json_int_t crc = json_integer_value(json_object_get(
        json_object_get(json_object_get(m, "blobs"), "tag"), "crc32"));
    cr_assert_eq(crc, 0x352441c2, "crc32('abc') is 0x352441c2 (the zlib/PNG CRC-32)");
    weft_snapshot_release(snap);
    weft_store_close(s);
}

Test(store, promotion_moves_head_and_retires_the_old)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK);
    fill_matrix(0);
    write_snapshot(s, true, "one");
    write_snapshot(s, true, "two");
    uint64_t live, prev;
    cr_assert_eq(weft_store_head(s, &live, &prev, &err), WEFT_OK);
    cr_assert(live == 2 && prev == 1, "live %llu prev %llu", (unsigned long long)live,
              (unsigned long long)prev);
    json_t *m = NULL;
    cr_assert_eq(weft_store_manifest(s, 1, &m, &err), WEFT_OK);
    cr_assert_str_eq(json_string_value(json_object_get(m, "state")), "retired");
    json_decref(m);
    cr_assert_eq(weft_store_manifest(s, 2, &m, &err), WEFT_OK);
    cr_assert_eq(json_integer_value(json_object_get(m, "parent")), 1);
    json_decref(m);
    /* A staged snapshot stays out of head until promoted. */
    cr_assert_eq(write_snapshot(s, false, "three"), 3);
    cr_assert_eq(weft_store_head(s, &live, &prev, &err), WEFT_OK);
    cr_assert_eq(live, 2);
    cr_assert_eq(weft_store_promote(s, 3, &err), WEFT_OK);
    cr_assert_eq(weft_store_head(s, &live, &prev, &err), WEFT_OK);
    cr_assert(live == 3 && prev == 2);
    cr_assert_eq(weft_store_promote(s, 9, &err), WEFT_ERR_NOT_FOUND);
    json_t *list = NULL;
    cr_assert_eq(weft_store_list(s, &list, &err), WEFT_OK);
    cr_assert_eq(json_array_size(list), 3);
    json_decref(list);
    weft_store_close(s);
}

Test(store, aborted_writer_leaves_nothing)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK);
    fill_matrix(0);
    write_snapshot(s, true, "one");
    weft_store_writer *w = NULL;
    uint64_t v = 0;
    cr_assert_eq(weft_store_writer_open(s, &w, &v, &err), WEFT_OK);
    cr_assert_eq(v, 2);
    size_t shape[2] = { ROWS, COLS };
    cr_assert_eq(weft_store_writer_put(w, "m", WEFT_DTYPE_F32, 2, shape, matrix, &err), WEFT_OK);
    cr_assert_eq(weft_store_writer_put(w, "m", WEFT_DTYPE_F32, 2, shape, matrix, &err),
                 WEFT_ERR_INVALID, "a repeated blob name is refused");
    weft_store_writer_abort(w);
    json_t *m = NULL;
    cr_assert_eq(weft_store_manifest(s, 2, &m, &err), WEFT_ERR_NOT_FOUND);
    uint64_t live;
    cr_assert_eq(weft_store_head(s, &live, NULL, &err), WEFT_OK);
    cr_assert_eq(live, 1);
    weft_store_close(s);
}

Test(store, crash_before_commit_keeps_head)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK);
    fill_matrix(0);
    write_snapshot(s, true, "one");
    weft_store_close(s);
    pid_t pid = fork();
    if (pid == 0) {   /* the child writes most of a snapshot, then dies */
        weft_store *cs = NULL;
        weft_store_writer *w = NULL;
        if (weft_store_open(fixture_dir, 0, 1 << 26, &cs, NULL) ||
            weft_store_writer_open(cs, &w, NULL, NULL))
            _exit(3);
        size_t shape[2] = { ROWS, COLS };
        weft_store_writer_put(w, "m", WEFT_DTYPE_F32, 2, shape, matrix, NULL);
        _exit(0);
    }
    int status = 0;
    waitpid(pid, &status, 0);
    cr_assert(WIFEXITED(status) && WEXITSTATUS(status) == 0);
    cr_assert_eq(weft_store_open(fixture_dir, 0, 1 << 26, &s, &err), WEFT_OK, "%s", err.msg);
    uint64_t live;
    cr_assert_eq(weft_store_head(s, &live, NULL, &err), WEFT_OK);
    cr_assert_eq(live, 1);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_snapshot_release(snap);
    /* The next writer gets version 2: nothing of the dead one remains. */
    cr_assert_eq(write_snapshot(s, true, "two"), 2);
    weft_store_close(s);
}

/* Flip one byte of the data file at the first occurrence of @p pattern. */
static void flip_byte_at(const char *pattern, size_t len)
{
    char path[128];
    snprintf(path, sizeof path, "%s/data.mdb", fixture_dir);
    FILE *f = fopen(path, "r+b");
    cr_assert_not_null(f);
    fseek(f, 0, SEEK_END);
    long size = ftell(f);
    char *buf = malloc((size_t)size);
    fseek(f, 0, SEEK_SET);
    cr_assert_eq(fread(buf, 1, (size_t)size, f), (size_t)size);
    char *hit = NULL;
    for (size_t i = 0; !hit && i + len <= (size_t)size; i++)
        if (!memcmp(buf + i, pattern, len))
            hit = buf + i;
    cr_assert_not_null(hit, "pattern not in the file");
    fseek(f, (long)(hit - buf) + 1, SEEK_SET);
    fputc(hit[1] ^ 0x01, f);
    fclose(f);
    free(buf);
}

Test(store, one_flipped_byte_is_detected)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK);
    fill_matrix(12345.0f);
    write_snapshot(s, true, "one");
    weft_store_close(s);
    flip_byte_at((const char *)&matrix[100], 4 * sizeof(float));
    cr_assert_eq(weft_store_open(fixture_dir, 0, 1 << 26, &s, &err), WEFT_OK);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_ERR_CORRUPT);
    cr_assert(strstr(err.msg, "'m'") && strstr(err.msg, "CRC"), "message: %s", err.msg);
    weft_store_close(s);
}

Test(store, readonly_open_of_an_empty_directory_says_so)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_READONLY, 0, &s, &err), WEFT_ERR_NOT_FOUND);
    cr_assert(strstr(err.msg, fixture_dir), "message: %s", err.msg);
}

Test(store, readonly_open_reads_what_a_writer_stored)
{
    weft_store *s = NULL;
    weft_error err;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK);
    fill_matrix(3.0f);
    write_snapshot(s, true, "one");
    weft_store_close(s);
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_READONLY, 1 << 26, &s, &err), WEFT_OK, "%s",
                 err.msg);
    uint64_t live = 0;
    cr_assert_eq(weft_store_head(s, &live, NULL, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(live, 1);
    weft_snapshot *snap = NULL;
    cr_assert_eq(weft_snapshot_open(s, 1, &snap, &err), WEFT_OK, "%s", err.msg);
    weft_snapshot_release(snap);
    cr_assert_eq(weft_store_promote(s, 1, &err), WEFT_ERR_INVALID, "read-only refuses writes");
    weft_store_close(s);
}
