/* Train a link model on a knowledge graph with standard train/valid/test files and report
 * time per epoch, validation MRR per epoch, and filtered test metrics, as JSON lines like
 * ../shared/bench/ref_kge.py prints, for side-by-side runs in `make bench`.
 * usage: bench_kge DATA_DIR MODEL LOSS BUDGET_S THREADS [key=value ...]
 *   keys: dim lr optim(adagrad|adam) reg(l2|n3) reg_weight batch neg init eval_every
 *         patience seed epochs
 * BUDGET_S bounds training time (validation excluded), as the reference's budget does. */
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/baseline.h"
#include "weft/eval.h"
#include "weft/graph.h"
#include "weft/io.h"
#include "weft/train_link.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static void die(const char *what, const weft_error *err)
{
    fprintf(stderr, "bench_kge: %s: %s\n", what, err ? err->msg : "");
    exit(1);
}

/* The triples of one file, as ids of graph g (which already holds every name). */
static weft_triple *read_split(const weft_graph *g, const char *path, size_t *n)
{
    weft_io_reader *r = NULL;
    weft_error err;
    if (weft_io_open(path, &r, &err))
        die(path, &err);
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_names_view rels = weft_names_as_view(&g->relations);
    size_t cap = 0, m = 0;
    weft_triple *out = NULL;
    weft_io_record rec;
    bool eof = false;
    while (weft_io_next(r, &rec, &eof, &err) == WEFT_OK && !eof) {
        weft_triple t;
        if (rec.n_fields != 3 || !weft_names_find(&nodes, rec.field[0], rec.len[0], &t.s) ||
            !weft_names_find(&rels, rec.field[1], rec.len[1], &t.r) ||
            !weft_names_find(&nodes, rec.field[2], rec.len[2], &t.t))
            die(path, NULL);
        if (weft_grow_array((void **)&out, &cap, m + 1, sizeof *out))
            die("out of memory", NULL);
        out[m++] = t;
    }
    weft_io_close(r);
    *n = m;
    return out;
}

static void print_epoch(void *ctx, const weft_train_epoch *ep)
{
    (void)ctx;
    printf("{\"epoch\":%zu,\"loss\":%.5f,\"train_s\":%.2f,\"triples_per_s\":%.0f", ep->epoch,
           ep->loss, ep->seconds, ep->triples_per_s);
    if (!isnan(ep->valid_mrr))
        printf(",\"valid_mrr\":%.4f,\"eval_s\":%.2f", ep->valid_mrr, ep->eval_seconds);
    printf("}\n");
    fflush(stdout);
}

static void set_option(weft_train_link_config *c, const char *kv)
{
    const char *eq = strchr(kv, '=');
    if (!eq)
        die(kv, NULL);
    const char *v = eq + 1;
    size_t k = (size_t)(eq - kv);
#define KEY(name) (k == strlen(name) && !strncmp(kv, name, k))
    if (KEY("dim")) c->dim = strtoul(v, NULL, 10);
    else if (KEY("lr")) c->lr = strtof(v, NULL);
    else if (KEY("optim")) { if (!weft_train_optim_parse(v, &c->optim)) die(kv, NULL); }
    else if (KEY("reg")) { if (!weft_train_reg_parse(v, &c->reg)) die(kv, NULL); }
    else if (KEY("reg_weight")) c->reg_weight = strtof(v, NULL);
    else if (KEY("batch")) c->batch = strtoul(v, NULL, 10);
    else if (KEY("neg")) c->negatives = strtoul(v, NULL, 10);
    else if (KEY("init")) c->init_scale = strtof(v, NULL);
    else if (KEY("eval_every")) c->eval_every = strtoul(v, NULL, 10);
    else if (KEY("patience")) c->patience = strtoul(v, NULL, 10);
    else if (KEY("seed")) c->seed = strtoull(v, NULL, 10);
    else if (KEY("epochs")) c->epochs = strtoul(v, NULL, 10);
    else die(kv, NULL);
#undef KEY
}

int main(int argc, char **argv)
{
    if (argc < 6) {
        fprintf(stderr, "usage: bench_kge DATA_DIR MODEL LOSS BUDGET_S THREADS [key=value ...]\n");
        return 2;
    }
    char path[3][1024];
    const char *names[3] = { "train", "valid", "test" };
    weft_graph *g = NULL;
    weft_error err;
    if (weft_graph_new(0, &g, &err))
        die("graph", &err);
    for (int i = 0; i < 3; i++) {
        snprintf(path[i], sizeof path[i], "%s/%s.tsv", argv[1], names[i]);
        if (weft_graph_load_edges(g, path[i], &err))
            die(path[i], &err);
    }
    if (weft_graph_finalize(g, &err))
        die("finalize", &err);
    size_t n[3];
    weft_triple *split[3];
    for (int i = 0; i < 3; i++)
        split[i] = read_split(g, path[i], &n[i]);

    weft_link_kind kind;
    weft_train_link_config cfg;
    if (!weft_model_kind_parse(argv[2], &kind))
        die(argv[2], NULL);
    weft_loss loss;
    if (!weft_train_loss_parse(argv[3], &loss))
        die(argv[3], NULL);
    weft_train_link_defaults(&cfg, kind, loss, g->nodes.n);
    cfg.max_seconds = strtod(argv[4], NULL);
    cfg.n_threads = strtoul(argv[5], NULL, 10);
    cfg.epochs = 100000;
    cfg.patience = 0;
    for (int i = 6; i < argc; i++)
        set_option(&cfg, argv[i]);

    weft_eval_filter filter = { &g->out, &g->in, g->n_self_loops == 0 };
    weft_train_validation val = { split[1], n[1], &filter, true };
    weft_link_params p;
    weft_train_result res;
    if (weft_train_link_run(&cfg, split[0], n[0], g->nodes.n, g->relations.n, &val, print_epoch,
                            NULL, &p, &res, &err))
        die("train", &err);
    weft_link_model model = weft_link_params_model(&p);
    weft_rank_metrics test, pop;
    double t0 = now();
    if (weft_eval_ranking(split[2], n[2], g->nodes.n, true, &filter, weft_eval_model_scores,
                          &model, cfg.n_threads, &test, &err))
        die("eval", &err);
    double eval_s = now() - t0;
    weft_baseline_popularity bp;
    if (weft_baseline_popularity_init(&bp, split[0], n[0], g->nodes.n, g->relations.n, &err) ||
        weft_eval_ranking(split[2], n[2], g->nodes.n, true, &filter,
                          weft_baseline_popularity_scores, &bp, cfg.n_threads, &pop, &err))
        die("baseline", &err);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    printf("SUMMARY {\"model\":\"%s\",\"loss\":\"%s\",\"dim\":%zu,\"threads\":%zu,"
           "\"epochs\":%zu,\"best_epoch\":%zu,\"train_s\":%.1f,\"s_per_epoch\":%.2f,"
           "\"valid_mrr\":%.4f,\"test_mrr\":%.4f,\"test_h1\":%.4f,\"test_h3\":%.4f,"
           "\"test_h10\":%.4f,\"test_mean_rank\":%.1f,\"test_eval_s\":%.2f,"
           "\"popularity_mrr\":%.4f,\"peak_rss_mb\":%.0f}\n",
           argv[2], argv[3], cfg.dim, cfg.n_threads, res.epochs_run, res.best_epoch,
           res.train_seconds, res.train_seconds / (double)res.epochs_run, res.best_valid_mrr,
           test.mrr, test.hits1, test.hits3, test.hits10, test.mean_rank, eval_s, pop.mrr,
           (double)ru.ru_maxrss / 1024.0);
    weft_baseline_popularity_fini(&bp);
    weft_link_params_fini(&p);
    for (int i = 0; i < 3; i++)
        free(split[i]);
    weft_graph_free(g);
    return 0;
}
