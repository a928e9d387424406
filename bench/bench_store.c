/* Write and open time of one snapshot holding an N x D float32 matrix ("entity"), through
 * include/weft/store.h and snapshot.h. Prints one JSON line:
 *   write_s      weft_store_writer_open + put + commit (live; LMDB fsyncs the commit)
 *   catalog_ms   weft_store_head + weft_store_manifest: what any open costs whatever the size
 *   open_s       weft_snapshot_open with the file in the page cache (warm): it checks every
 *                blob's CRC-32 and pre-faults its pages (a read pass)
 *   cold_open_s  weft_store_open + weft_snapshot_open after the file was dropped from the
 *                page cache (posix_fadvise DONTNEED with the store closed): a fresh start
 *   crc_s        crc32_z over the matrix in the map alone (warm): the CRC share of open_s
 *   touch_s      reading one byte per 4 KiB page of the matrix alone (warm)
 *   verify_s     weft_store_verify of the version (headers and CRCs, as promotion does)
 * Each is the median of REPS runs. usage: bench_store DIR N D [REPS] (DIR is created and
 * must not hold a store yet). */
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>
#include <zlib.h>

#include "weft/alloc.h"
#include "weft/snapshot.h"
#include "weft/store.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *t, size_t n)
{
    qsort(t, n, sizeof *t, cmp_double);
    return n % 2 ? t[n / 2] : 0.5 * (t[n / 2 - 1] + t[n / 2]);
}

static void die(const char *what, const weft_error *err)
{
    fprintf(stderr, "bench_store: %s: %s\n", what, err ? err->msg : "failed");
    exit(1);
}

static uint64_t write_once(weft_store *s, const float *m, size_t n, size_t d, double *seconds)
{
    weft_store_writer *w = NULL;
    weft_error err;
    uint64_t v = 0;
    size_t shape[2] = { n, d };
    json_t *manifest = json_object();
    double t0 = now();
    if (weft_store_writer_open(s, &w, &v, &err) ||
        weft_store_writer_put(w, "entity", WEFT_DTYPE_F32, 2, shape, m, &err) ||
        weft_store_writer_commit_as(w, manifest, WEFT_STORE_STATE_LIVE, NULL, &err))
        die("write", &err);
    *seconds = now() - t0;
    json_decref(manifest);
    json_t *deleted = NULL;   /* keep the file at live + previous */
    if (weft_store_prune(s, 0, &deleted, &err))
        die("prune", &err);
    json_decref(deleted);
    return v;
}

/* Drop the data file from the page cache; the store must be closed (mapped pages stay). */
static void drop_cache(const char *dir)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/data.mdb", dir);
    int fd = open(path, O_RDONLY);
    if (fd < 0 || posix_fadvise(fd, 0, 0, POSIX_FADV_DONTNEED) != 0)
        die("posix_fadvise", NULL);
    close(fd);
}

int main(int argc, char **argv)
{
    if (argc < 4) {
        fprintf(stderr, "usage: bench_store DIR N D [REPS]\n");
        return 2;
    }
    const char *dir = argv[1];
    size_t n = strtoul(argv[2], NULL, 10), d = strtoul(argv[3], NULL, 10);
    size_t reps = argc > 4 ? strtoul(argv[4], NULL, 10) : 3;
    float *m = weft_alloc_array(n * d, sizeof *m);
    double *t = weft_alloc_array(reps * 7 + 100, sizeof *t);
    if (!m || !t || n == 0 || d == 0 || reps == 0)
        die("bad sizes or out of memory", NULL);
    for (size_t i = 0; i < n * d; i++)
        m[i] = (float)(i % 1000003) * 1e-3f;
    weft_store *s = NULL;
    weft_error err;
    if (weft_store_open(dir, WEFT_STORE_CREATE, 0, &s, &err))
        die(dir, &err);

    uint64_t v = 0;
    for (size_t r = 0; r < reps; r++)
        v = write_once(s, m, n, d, &t[r]);
    double write_s = median(t, reps);

    for (size_t r = 0; r < 100; r++) {
        uint64_t live = 0;
        json_t *manifest = NULL;
        double t0 = now();
        if (weft_store_head(s, &live, NULL, &err) || weft_store_manifest(s, live, &manifest, &err))
            die("catalog", &err);
        t[r] = now() - t0;
        json_decref(manifest);
    }
    double catalog_s = median(t, 100);

    double crc_s[64], touch_s[64], open_s[64], verify_s[64];
    unsigned long sink = 0;
    for (size_t r = 0; r < reps && r < 64; r++) {
        weft_snapshot *snap = NULL;
        weft_blob b;
        json_t *report = NULL;
        double t0 = now();
        if (weft_snapshot_open(s, v, &snap, &err))
            die("open", &err);
        open_s[r] = now() - t0;
        if (!weft_snapshot_blob(snap, "entity", &b))
            die("no entity blob", NULL);
        t0 = now();
        sink += crc32_z(crc32_z(0L, Z_NULL, 0), b.data, b.nbytes);
        crc_s[r] = now() - t0;
        t0 = now();
        for (size_t off = 0; off < b.nbytes; off += 4096)
            sink += ((const unsigned char *)b.data)[off];
        touch_s[r] = now() - t0;
        weft_snapshot_release(snap);
        t0 = now();
        if (weft_store_verify(s, v, &report, NULL, &err))
            die("verify", &err);
        verify_s[r] = now() - t0;
        json_decref(report);
    }
    size_t k = reps < 64 ? reps : 64;
    double open_warm = median(open_s, k), crc = median(crc_s, k), touch = median(touch_s, k);
    double verify = median(verify_s, k);
    weft_store_close(s);

    for (size_t r = 0; r < k; r++) {
        weft_snapshot *snap = NULL;
        drop_cache(dir);
        double t0 = now();
        if (weft_store_open(dir, WEFT_STORE_READONLY, 0, &s, &err) ||
            weft_snapshot_open(s, v, &snap, &err))
            die("cold open", &err);
        open_s[r] = now() - t0;
        weft_snapshot_release(snap);
        weft_store_close(s);
    }
    double open_cold = median(open_s, k);
    printf("{\"mode\":\"store\",\"rows\":%zu,\"dim\":%zu,\"MiB\":%.1f,\"reps\":%zu,"
           "\"write_s\":%.4f,\"catalog_ms\":%.4f,\"open_s\":%.4f,\"cold_open_s\":%.4f,"
           "\"crc_s\":%.4f,\"touch_s\":%.4f,\"verify_s\":%.4f,\"chk\":%lu}\n",
           n, d, (double)n * (double)d * 4 / 1048576.0, reps, write_s, catalog_s * 1e3,
           open_warm, open_cold, crc, touch, verify, sink % 1000);
    free(m);
    free(t);
    return 0;
}
