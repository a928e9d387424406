/* GCN node classification timing on a directory with edges.tsv, features.tsv, labels.tsv and
 * split.tsv (the layout of ../shared/datasets/cora), to compare side by side with
 * ../shared/bench/ref_gcn.py: the same recipe (weft_train_gcn_defaults: Kipf & Welling 2017),
 * seeds 1..SEEDS, THREADS threads. One epoch = a training step and a validation forward pass,
 * as in the reference; loading is not timed on either side.
 * usage: bench_gcn DIR THREADS [SEEDS]; prints a JSON line per seed, then SUMMARY {...}. */
#include <cblas.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/resource.h>

#include "weft/classify.h"
#include "weft/features.h"
#include "weft/graph.h"
#include "weft/labels.h"
#include "weft/train_gcn.h"

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

static void die(const weft_error *err)
{
    fprintf(stderr, "bench_gcn: %s\n", err->msg);
    exit(1);
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: bench_gcn DIR THREADS [SEEDS]\n");
        return 2;
    }
    const char *dir = argv[1];
    size_t threads = (size_t)atoi(argv[2]), seeds = argc > 3 ? (size_t)atoi(argv[3]) : 10;
    if (seeds < 1 || seeds > 100 || threads < 1)
        return 2;
    char path[4096];
    weft_error err;
    weft_graph *g;
    if (weft_graph_new(0, &g, &err))
        die(&err);
    snprintf(path, sizeof path, "%s/edges.tsv", dir);
    if (weft_graph_load_edges(g, path, &err) || weft_graph_finalize(g, &err))
        die(&err);
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_sparse x, adj;
    weft_labels labels;
    uint8_t *part = malloc(nodes.n);
    snprintf(path, sizeof path, "%s/features.tsv", dir);
    if (!part || weft_features_load(path, &nodes, true, &x, NULL, &err))
        die(&err);
    snprintf(path, sizeof path, "%s/labels.tsv", dir);
    if (weft_labels_load(path, &nodes, &labels, &err))
        die(&err);
    snprintf(path, sizeof path, "%s/split.tsv", dir);
    if (weft_labels_read_split(path, &nodes, &labels, part, &err) ||
        weft_sparse_adjacency(g->edges, g->n_edges, nodes.n, WEFT_SPARSE_NORM_SYM, true, &adj,
                              NULL, &err))
        die(&err);
    openblas_set_num_threads(1);   /* as weft train does at this size (cmd_train_gcn.c) */
    double *epoch_ms = malloc(seeds * sizeof *epoch_ms), *run_s = malloc(seeds * sizeof *run_s);
    double acc_sum = 0.0, acc_sq = 0.0, epochs_sum = 0.0;
    for (size_t s = 0; s < seeds; s++) {
        weft_train_gcn_config c;
        weft_train_gcn_defaults(&c, false);
        c.seed = s + 1;
        c.n_threads = threads;
        weft_gcn_trained t;
        weft_gcn_result r;
        weft_classify_metrics m;
        if (weft_train_gcn_classify(&c, &adj, &x, labels.y, part, labels.classes.n, NULL, NULL,
                                    &t, &r, &err) ||
            weft_classify_metrics_compute(t.output, labels.y, part, nodes.n, labels.classes.n,
                                          WEFT_LABEL_TEST, &m, &err))
            die(&err);
        epoch_ms[s] = 1e3 * r.seconds_per_epoch;
        run_s[s] = r.train_seconds;
        acc_sum += m.accuracy;
        acc_sq += m.accuracy * m.accuracy;
        epochs_sum += (double)r.epochs_run;
        printf("{\"seed\": %zu, \"test_acc\": %.4f, \"epochs\": %zu, \"median_epoch_ms\": %.4f, "
               "\"train_s\": %.4f}\n", s + 1, m.accuracy, r.epochs_run, epoch_ms[s], run_s[s]);
        weft_classify_metrics_fini(&m);
        weft_gcn_trained_fini(&t);
    }
    qsort(epoch_ms, seeds, sizeof *epoch_ms, cmp_double);
    qsort(run_s, seeds, sizeof *run_s, cmp_double);
    double mean = acc_sum / (double)seeds;
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    printf("SUMMARY {\"threads\": %zu, \"seeds\": %zu, \"test_acc_mean\": %.2f, "
           "\"test_acc_std\": %.2f, \"median_epoch_ms\": %.4f, \"median_train_s\": %.4f, "
           "\"mean_epochs\": %.1f, \"maxrss_mb\": %.1f}\n", threads, seeds, 100 * mean,
           100 * sqrt(fmax(0.0, acc_sq / (double)seeds - mean * mean)), epoch_ms[seeds / 2],
           run_s[seeds / 2], epochs_sum / (double)seeds, (double)ru.ru_maxrss / 1024.0);
    free(epoch_ms);
    free(run_s);
    free(part);
    weft_labels_fini(&labels);
    weft_sparse_fini(&x);
    weft_sparse_fini(&adj);
    weft_graph_free(g);
    return 0;
}
