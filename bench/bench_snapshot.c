/* Write a dot-model snapshot whose embeddings are the rows of a float32 .npy matrix (as
 * ../shared/bench/make_emb.py writes them), so that weft serve and the reference service of
 * ../shared/bench/ref_service.py answer from the same numbers. Node i is named "i"; the
 * known links are a chain i -> i+1 (a snapshot needs a graph; each query then excludes at
 * most one known target besides itself). With INDEX (int8 or ivf), the snapshot carries that
 * index with weft train's defaults (include/weft/link_index.h). Prints the version, the
 * shape and the index's manifest record (recall@10, lists, nprobe, bytes) as one JSON line.
 * usage: bench_snapshot EMB.npy STORE_DIR [INDEX] */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <jansson.h>

#include "weft/graph.h"
#include "weft/link_index.h"
#include "weft/snapshot.h"
#include "weft/store.h"

static void die(const char *what, const weft_error *err)
{
    fprintf(stderr, "bench_snapshot: %s: %s\n", what, err ? err->msg : "");
    exit(1);
}

/* A C-order float32 .npy of two dimensions (format versions 1 to 3). */
static float *read_npy(const char *path, size_t *n, size_t *d)
{
    FILE *f = fopen(path, "rb");
    unsigned char head[12];
    if (!f || fread(head, 1, 10, f) != 10 || memcmp(head, "\x93NUMPY", 6))
        die("not a .npy file", NULL);
    size_t hlen = head[8] | (size_t)head[9] << 8;
    if (head[6] >= 2) {   /* 4-byte header length */
        if (fread(head + 10, 1, 2, f) != 2)
            die("short .npy header", NULL);
        hlen |= (size_t)head[10] << 16 | (size_t)head[11] << 24;
    }
    char *h = calloc(1, hlen + 1);
    if (!h || fread(h, 1, hlen, f) != hlen)
        die("short .npy header", NULL);
    unsigned long long a, b;
    char *shape = strstr(h, "'shape': (");
    if (!strstr(h, "'descr': '<f4'") || !strstr(h, "'fortran_order': False") || !shape ||
        sscanf(shape, "'shape': (%llu, %llu)", &a, &b) != 2)
        die("need a C-order float32 matrix", NULL);
    *n = a;
    *d = b;
    float *x = malloc(a * b * sizeof *x);
    if (!x || fread(x, sizeof *x, a * b, f) != a * b)
        die("short .npy data", NULL);
    free(h);
    fclose(f);
    return x;
}

int main(int argc, char **argv)
{
    weft_link_index_kind kind = WEFT_LINK_INDEX_EXACT;
    if ((argc != 3 && argc != 4) || (argc == 4 && !weft_link_index_kind_parse(argv[3], &kind))) {
        fprintf(stderr, "usage: bench_snapshot EMB.npy STORE_DIR [exact|int8|ivf]\n");
        return 2;
    }
    size_t n, d;
    float *e = read_npy(argv[1], &n, &d);
    weft_error err;
    weft_graph *g;
    if (weft_graph_new(0, &g, &err))
        die("graph", &err);
    char s[32], t[32];
    for (size_t i = 0; i + 1 < n; i++) {
        int ls = snprintf(s, sizeof s, "%zu", i), lt = snprintf(t, sizeof t, "%zu", i + 1);
        if (weft_graph_add_edge(g, s, (size_t)ls, "link", 4, t, (size_t)lt, &err))
            die("edge", &err);
    }
    if (weft_graph_finalize(g, &err))
        die("finalize", &err);
    weft_link_model m = { WEFT_LINK_DOT, n, 1, d, false, e, NULL };
    weft_store *st;
    weft_store_writer *w;
    uint64_t version;
    json_t *manifest = json_pack("{s:{s:s}}", "model", "kind", "dot");
    weft_link_index_settings settings = weft_link_index_defaults(kind);
    settings.n_threads = 2;
    weft_link_index index;
    if (weft_link_index_build(&m, &settings, &index, &err))
        die("index", &err);
    if (weft_store_open(argv[2], WEFT_STORE_CREATE, 0, &st, &err) ||
        weft_store_writer_open(st, &w, &version, &err) ||
        weft_snapshot_put_link(w, manifest, g, &m, true, &err) ||
        weft_link_index_put(w, manifest, &index, &err) ||
        weft_store_writer_commit(w, manifest, true, NULL, &err))
        die("store", &err);
    json_t *rec = index.kind == WEFT_LINK_INDEX_EXACT ? json_null() : weft_link_index_json(&index);
    char *rec_text = rec ? json_dumps(rec, JSON_COMPACT | JSON_ENCODE_ANY) : NULL;
    printf("{\"version\": %llu, \"nodes\": %zu, \"dim\": %zu, \"index\": %s}\n",
           (unsigned long long)version, n, d, rec_text ? rec_text : "null");
    free(rec_text);
    json_decref(rec);
    weft_link_index_fini(&index);
    json_decref(manifest);
    weft_store_close(st);
    weft_graph_free(g);
    free(e);
    return 0;
}
