/* Helper of tests/e2e/test_crash.sh, built by it: a writer that commits large snapshots in
 * a loop, to be killed at random moments, and a checker of what it left.
 *
 *   crash_writer write STORE BLOBS MIB   loop: begin a snapshot (print "begin V"), put BLOBS
 *                                        blobs of MIB MiB each, commit it live (print "done
 *                                        V MS", MS the milliseconds since "begin"), prune to
 *                                        one spare version
 *   crash_writer check STORE BLOBS MIB   the live snapshot opens (CRC-checked), holds BLOBS
 *                                        blobs, and each holds exactly the bytes "write"
 *                                        puts for that version; prints "live V"
 *
 * Blob b of version v holds the floats v * 1000 + b + i / 2^20 (i = 0, 1, ...): a blob of
 * another version, or one half written, differs. Uses only include/weft/. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/snapshot.h"
#include "weft/store.h"

static void fill(float *out, size_t n, uint64_t version, size_t blob)
{
    float base = (float)(version % 1000) * 1000.0f + (float)blob;
    for (size_t i = 0; i < n; i++)
        out[i] = base + (float)(i & 0xfffff) / 1048576.0f;
}

static double now_ms(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec * 1e3 + (double)t.tv_nsec / 1e6;
}

static int fail(const char *what, const weft_error *err)
{
    fprintf(stderr, "crash_writer: %s: %s\n", what, err->msg);
    return 1;
}

static int write_forever(weft_store *s, size_t n_blobs, size_t n_floats)
{
    float *buf = malloc(n_floats * sizeof *buf);
    weft_error err;
    if (!buf)
        return 1;
    for (;;) {
        weft_store_writer *w = NULL;
        uint64_t v = 0;
        if (weft_store_writer_open(s, &w, &v, &err))
            return fail("begin", &err);
        double t0 = now_ms();
        printf("begin %llu\n", (unsigned long long)v);
        fflush(stdout);
        for (size_t b = 0; b < n_blobs; b++) {
            char name[32];
            snprintf(name, sizeof name, "part%zu", b);
            fill(buf, n_floats, v, b);
            if (weft_store_writer_put(w, name, WEFT_DTYPE_F32, 1, &n_floats, buf, &err))
                return fail("put", &err);
        }
        json_t *m = json_pack("{s:I}", "written_as", (json_int_t)v);
        if (weft_store_writer_commit_as(w, m, WEFT_STORE_STATE_LIVE, NULL, &err))
            return fail("commit", &err);
        json_decref(m);
        printf("done %llu %.0f\n", (unsigned long long)v, now_ms() - t0);
        fflush(stdout);
        json_t *deleted = NULL;
        if (weft_store_prune(s, 1, &deleted, &err))
            return fail("prune", &err);
        json_decref(deleted);
    }
}

static int check_live(weft_store *s, size_t n_blobs, size_t n_floats)
{
    weft_error err;
    uint64_t live = 0;
    weft_snapshot *snap = NULL;
    float *want = malloc(n_floats * sizeof *want);
    if (!want || weft_store_head(s, &live, NULL, &err))
        return fail("head", &err);
    if (live == 0) {
        printf("live 0\n");
        return 0;
    }
    if (weft_snapshot_open(s, live, &snap, &err))
        return fail("open the live snapshot", &err);
    const json_t *m = weft_snapshot_manifest(snap);
    int bad = json_integer_value(json_object_get(m, "written_as")) != (json_int_t)live ||
              json_object_size(json_object_get(m, "blobs")) != n_blobs;
    for (size_t b = 0; !bad && b < n_blobs; b++) {
        char name[32];
        weft_blob blob;
        snprintf(name, sizeof name, "part%zu", b);
        fill(want, n_floats, live, b);
        bad = !weft_snapshot_blob(snap, name, &blob) || blob.nbytes != n_floats * sizeof *want ||
              memcmp(blob.data, want, blob.nbytes) != 0;
    }
    weft_snapshot_release(snap);
    free(want);
    printf("live %llu%s\n", (unsigned long long)live, bad ? " INCOMPLETE" : "");
    return bad;
}

int main(int argc, char **argv)
{
    if (argc != 5 || (strcmp(argv[1], "write") && strcmp(argv[1], "check"))) {
        fprintf(stderr, "usage: crash_writer write|check STORE BLOBS MIB\n");
        return 2;
    }
    size_t n_blobs = strtoul(argv[3], NULL, 10);
    size_t n_floats = strtoul(argv[4], NULL, 10) * (1u << 20) / sizeof(float);
    weft_store *s = NULL;
    weft_error err;
    if (weft_store_open(argv[2], WEFT_STORE_CREATE, 0, &s, &err))
        return fail(argv[2], &err);
    int rc = !strcmp(argv[1], "write") ? write_forever(s, n_blobs, n_floats)
                                       : check_live(s, n_blobs, n_floats);
    weft_store_close(s);
    return rc;
}
