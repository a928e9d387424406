/* Link prediction quality and speed through each path of a stored snapshot: the exact scan,
 * an int8 index and the clustered indexes (ivf with int8 lists, ivf-pq with product-coded
 * lists), all built here with weft train's defaults (include/weft/link_index.h). Every test
 * triple (s, r, t) of TEST is asked both ways: the
 * targets of (s, r) and the sources of (r, t); each path returns its best K candidates (the
 * known links of the snapshot and the other test answers left out, the filtered setting of
 * Bordes et al. 2013), and t's (or s's) place in that list gives its rank; an answer outside
 * the list counts 0. So "MRR@K" here equals the filtered MRR wherever the answer ranks within
 * K, and the paths are compared on the same footing. Then speed: the same 2 x 3,134 queries
 * as top-10 queries without filters (as the service gets them by default, less the known
 * links), timed through each path one after another in 3 rounds (the best round counts),
 * with recall@10 against the exact scan's lists. Prints one JSON line per path.
 * usage: bench_index_mrr STORE TEST [K]   (K default 100; the live snapshot) */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/graph.h"
#include "weft/link_index.h"
#include "weft/snapshot.h"
#include "weft/store.h"
#include "weft/topk.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static int cmp_u32(const void *a, const void *b)
{
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return (x > y) - (x < y);
}

/* The ids to leave out for anchor @p a, relation @p r, direction @p is_in: the snapshot's
 * known links and every test answer of the same query except @p answer; sorted, in @p buf. */
static size_t left_out(const weft_link_view *v, const weft_triple *test, size_t n_test,
                       uint32_t a, uint32_t r, bool is_in, uint32_t answer, uint32_t *buf,
                       size_t cap)
{
    const weft_csr *known = is_in ? &v->known_in : &v->known_out;
    uint64_t first = 0;
    size_t n_known = 0, n = 0;
    weft_csr_range(known, a, r, &first, &n_known);
    for (size_t i = 0; i < n_known && n < cap; i++)
        if (known->nbr[first + i] != answer)
            buf[n++] = known->nbr[first + i];
    for (size_t i = 0; i < n_test && n < cap; i++) {
        const weft_triple *x = &test[i];
        uint32_t anchor = is_in ? x->t : x->s, other = is_in ? x->s : x->t;
        if (anchor == a && x->r == r && other != answer)
            buf[n++] = other;
    }
    qsort(buf, n, sizeof *buf, cmp_u32);
    return n;
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: bench_index_mrr STORE TEST [K]\n");
        return 2;
    }
    size_t k = argc > 3 ? strtoull(argv[3], NULL, 10) : 100;
    weft_error err;
    weft_store *store = NULL;
    weft_snapshot *snap = NULL;
    uint64_t live = 0, previous = 0;
    weft_link_view v;
    if (weft_store_open(argv[1], WEFT_STORE_READONLY, 0, &store, &err) != WEFT_OK
        || weft_store_head(store, &live, &previous, &err) != WEFT_OK
        || weft_snapshot_open(store, live, &snap, &err) != WEFT_OK
        || weft_snapshot_link_view(snap, &v, &err) != WEFT_OK) {
        fprintf(stderr, "bench_index_mrr: %s\n", err.msg);
        return 1;
    }
    weft_triple *test = NULL;
    size_t n_test = 0;
    if (weft_graph_read_triples(argv[2], &v.nodes, &v.relations, &test, &n_test, &err)
        != WEFT_OK) {
        fprintf(stderr, "bench_index_mrr: %s\n", err.msg);
        return 1;
    }
    enum { PATHS = 4, TOP = 10, ROUNDS = 3 };
    weft_link_index ix[PATHS];
    static const weft_link_index_kind kinds[PATHS] = { WEFT_LINK_INDEX_EXACT,
                                                       WEFT_LINK_INDEX_INT8, WEFT_LINK_INDEX_IVF,
                                                       WEFT_LINK_INDEX_IVF_PQ };
    for (int p = 0; p < PATHS; p++) {
        weft_link_index_settings s = weft_link_index_defaults(kinds[p]);
        s.n_threads = 2;
        if (weft_link_index_build(&v.model, &s, &ix[p], &err) != WEFT_OK) {
            fprintf(stderr, "bench_index_mrr: %s\n", err.msg);
            return 1;
        }
    }
    size_t cap = v.n_nodes + n_test;
    uint32_t *buf = malloc(cap * sizeof *buf), *id = malloc(k * sizeof *id);
    float *q = malloc(v.dim * sizeof *q), *score = malloc(k * sizeof *score);
    if (!buf || !id || !q || !score)
        return 1;
    /* Top-10 speed and recall: every query's vector first, then each path timed alone. */
    size_t n_q2 = 2 * n_test;
    float *qs = malloc(n_q2 * v.dim * sizeof *qs), *s10 = malloc(TOP * sizeof *s10);
    uint32_t *want = malloc(n_q2 * TOP * sizeof *want), *got = malloc(TOP * sizeof *got);
    size_t *n_want = malloc(n_q2 * sizeof *n_want);
    double best_s[PATHS], recall[PATHS];
    if (!qs || !s10 || !want || !got || !n_want)
        return 1;
    for (size_t i = 0; i < n_q2; i++) {
        const weft_triple *x = &test[i / 2];
        weft_model_query(&v.model, i % 2 ? x->t : x->s, x->r, i % 2 == 1, qs + i * v.dim);
        n_want[i] = weft_topk_scan(v.entity, v.n_nodes, v.dim, qs + i * v.dim, TOP, NULL,
                                   want + i * TOP, s10);
    }
    for (int round = 0; round < ROUNDS; round++)
        for (int p = 0; p < PATHS; p++) {
            double hits = 0.0, t0 = now();
            for (size_t i = 0; i < n_q2; i++) {
                const float *qi = qs + i * v.dim;
                size_t n = 0;
                weft_err rc = WEFT_OK;
                if (kinds[p] == WEFT_LINK_INDEX_EXACT)
                    n = weft_topk_scan(v.entity, v.n_nodes, v.dim, qi, TOP, NULL, got, s10);
                else if (kinds[p] == WEFT_LINK_INDEX_INT8) {
                    weft_index_codes c = { .n = v.n_nodes, .d = v.dim, .code = ix[p].code,
                                           .scale = ix[p].scale };
                    rc = weft_index_int8_search(&c, v.entity, qi, TOP, ix[p].oversample, NULL,
                                                got, s10, &n, &err);
                } else
                    rc = weft_index_ivf_search(&ix[p].ivf.ivf, v.entity, qi, TOP, ix[p].nprobe,
                                               ix[p].oversample, NULL, got, s10, &n, &err);
                if (rc != WEFT_OK) {
                    fprintf(stderr, "bench_index_mrr: %s\n", err.msg);
                    return 1;
                }
                size_t hit = 0;
                for (size_t a = 0; a < n_want[i]; a++)
                    for (size_t b = 0; b < n; b++)
                        hit += want[i * TOP + a] == got[b];
                hits += n_want[i] ? (double)hit / (double)n_want[i] : 1.0;
            }
            double secs = now() - t0;
            best_s[p] = round == 0 || secs < best_s[p] ? secs : best_s[p];
            recall[p] = hits / (double)n_q2;
        }
    free(qs);
    free(s10);
    free(want);
    free(got);
    free(n_want);

    for (int p = 0; p < PATHS; p++) {
        double rr = 0.0, h10 = 0.0, t0 = now();
        size_t n_q = 0;
        for (size_t i = 0; i < n_test; i++)
            for (int dir = 0; dir < 2; dir++) {
                bool is_in = dir == 1;
                uint32_t a = is_in ? test[i].t : test[i].s, answer = is_in ? test[i].s : test[i].t;
                weft_topk_exclude ex = { .sorted = buf, .has_self = !v.has_self_loops,
                                         .self = a };
                ex.n_sorted = left_out(&v, test, n_test, a, test[i].r, is_in, answer, buf, cap);
                weft_model_query(&v.model, a, test[i].r, is_in, q);
                weft_index_filter f = { .ex = &ex };
                size_t n = 0;
                weft_err rc = WEFT_OK;
                if (kinds[p] == WEFT_LINK_INDEX_EXACT)
                    n = weft_topk_scan(v.entity, v.n_nodes, v.dim, q, k, &ex, id, score);
                else if (kinds[p] == WEFT_LINK_INDEX_INT8) {
                    weft_index_codes c = { .n = v.n_nodes, .d = v.dim, .code = ix[p].code,
                                           .scale = ix[p].scale };
                    rc = weft_index_int8_search(&c, v.entity, q, k, ix[p].oversample, &f, id,
                                                score, &n, &err);
                } else {   /* ivf, ivf-pq */
                    rc = weft_index_ivf_search(&ix[p].ivf.ivf, v.entity, q, k, ix[p].nprobe,
                                               ix[p].oversample, &f, id, score, &n, &err);
                }
                if (rc != WEFT_OK) {
                    fprintf(stderr, "bench_index_mrr: %s\n", err.msg);
                    return 1;
                }
                for (size_t j = 0; j < n; j++)
                    if (id[j] == answer) {
                        rr += 1.0 / (double)(j + 1);
                        h10 += j < 10;
                        break;
                    }
                n_q++;
            }
        double secs = now() - t0;
        printf("{\"path\":\"%s\",\"queries\":%zu,\"k\":%zu,\"mrr_at_k\":%.5f,\"hits_at_10\":%.5f,"
               "\"ms_per_query\":%.4f,\"nprobe\":%zu,\"lists\":%zu,\"probe_recall_at_10\":%.4f,"
               "\"build_s\":%.3f,\"bytes\":%zu,\"top10_us_per_query\":%.2f,"
               "\"top10_qps\":%.0f,\"top10_x_exact\":%.2f,\"top10_recall\":%.4f,"
               "\"oversample\":%zu}\n",
               weft_link_index_kind_name(kinds[p]), n_q, k, rr / (double)n_q,
               h10 / (double)n_q, 1e3 * secs / (double)n_q, ix[p].nprobe,
               ix[p].ivf.ivf.n_lists, ix[p].recall, ix[p].build_seconds, ix[p].bytes,
               1e6 * best_s[p] / (double)n_q2, (double)n_q2 / best_s[p], best_s[0] / best_s[p],
               recall[p], ix[p].oversample);
    }
    for (int p = 0; p < PATHS; p++)
        weft_link_index_fini(&ix[p]);
    free(buf);
    free(id);
    free(q);
    free(score);
    free(test);
    weft_snapshot_release(snap);
    weft_store_close(store);
    return 0;
}
