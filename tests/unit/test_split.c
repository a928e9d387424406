/* Holdout splits: sizes, disjointness, the keep-every-node rule, determinism. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/graph.h"
#include "weft/rng.h"
#include "weft/split.h"

static weft_graph *random_graph(unsigned flags, uint64_t seed, size_t n, size_t m, size_t n_rel)
{
    weft_graph *g = NULL;
    cr_assert_eq(weft_graph_new(flags, &g, NULL), WEFT_OK);
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    for (size_t i = 0; i < m; i++) {
        char s[16], r[16], t[16];
        int ls = snprintf(s, sizeof s, "n%u", weft_rng_below(&rng, (uint32_t)n));
        int lr = snprintf(r, sizeof r, "r%u", weft_rng_below(&rng, (uint32_t)n_rel));
        int lt = snprintf(t, sizeof t, "n%u", weft_rng_below(&rng, (uint32_t)n));
        cr_assert_eq(weft_graph_add_edge(g, s, (size_t)ls, r, (size_t)lr, t, (size_t)lt, NULL),
                     WEFT_OK);
    }
    cr_assert_eq(weft_graph_finalize(g, NULL), WEFT_OK);
    return g;
}

static int cmp_triple(const weft_triple *a, const weft_triple *b)
{
    return memcmp(a, b, sizeof *a);
}

static void check_split(const weft_graph *g, const weft_split *sp)
{
    cr_assert_eq(sp->n_train + sp->n_valid + sp->n_test, g->n_edges);
    /* Every node and relation touched by a held-out edge appears in train. */
    size_t n = g->nodes.n;
    bool *seen = calloc(n, 1), *seen_rel = calloc(g->relations.n, 1);
    for (size_t i = 0; i < sp->n_train; i++) {
        seen[sp->train[i].s] = seen[sp->train[i].t] = true;
        seen_rel[sp->train[i].r] = true;
    }
    const weft_triple *parts[2] = { sp->valid, sp->test };
    size_t counts[2] = { sp->n_valid, sp->n_test };
    for (size_t p = 0; p < 2; p++)
        for (size_t i = 0; i < counts[p]; i++) {
            cr_assert(seen[parts[p][i].s] && seen[parts[p][i].t], "held-out node cut off");
            cr_assert(seen_rel[parts[p][i].r], "held-out relation cut off");
        }
    /* Parts are disjoint: each is sorted, so merge-compare train with test. */
    size_t a = 0, b = 0;
    while (a < sp->n_train && b < sp->n_test) {
        int c = cmp_triple(&sp->train[a], &sp->test[b]);
        cr_assert_neq(c, 0, "an edge is in train and test");
        c < 0 ? a++ : b++;
    }
    free(seen);
    free(seen_rel);
}

Test(split, holds_out_the_asked_share_and_keeps_nodes)
{
    weft_graph *g = random_graph(0, 1, 200, 3000, 3);
    weft_split sp;
    cr_assert_eq(weft_split_holdout(g, 0.05, 0.1, 42, &sp, NULL), WEFT_OK);
    check_split(g, &sp);
    cr_assert_eq(sp.n_test, (size_t)llround(0.1 * (double)g->n_edges));
    cr_assert_eq(sp.n_valid, (size_t)llround(0.05 * (double)g->n_edges));
    weft_split_fini(&sp);
    weft_graph_free(g);
}

Test(split, same_seed_same_split_other_seed_other_split)
{
    weft_graph *g = random_graph(0, 2, 100, 800, 1);
    weft_split a, b, c;
    cr_assert_eq(weft_split_holdout(g, 0, 0.2, 9, &a, NULL), WEFT_OK);
    cr_assert_eq(weft_split_holdout(g, 0, 0.2, 9, &b, NULL), WEFT_OK);
    cr_assert_eq(weft_split_holdout(g, 0, 0.2, 10, &c, NULL), WEFT_OK);
    cr_assert_eq(a.n_test, b.n_test);
    cr_assert_eq(memcmp(a.test, b.test, a.n_test * sizeof *a.test), 0);
    cr_assert(a.n_test != c.n_test || memcmp(a.test, c.test, a.n_test * sizeof *a.test) != 0);
    weft_split_fini(&a);
    weft_split_fini(&b);
    weft_split_fini(&c);
    weft_graph_free(g);
}

Test(split, undirected_holds_out_both_directions_together)
{
    weft_graph *g = random_graph(WEFT_GRAPH_UNDIRECTED, 3, 80, 600, 1);
    weft_split sp;
    cr_assert_eq(weft_split_holdout(g, 0, 0.15, 4, &sp, NULL), WEFT_OK);
    check_split(g, &sp);
    for (size_t i = 0; i < sp.n_test; i++) {
        weft_triple rev = { sp.test[i].t, sp.test[i].r, sp.test[i].s };
        bool found = false;
        for (size_t j = 0; j < sp.n_test && !found; j++)
            found = !cmp_triple(&sp.test[j], &rev);
        cr_assert(found, "reverse of a held-out edge stayed in train");
    }
    weft_split_fini(&sp);
    weft_graph_free(g);
}

Test(split, a_star_cannot_lose_any_edge)
{
    /* Every leaf has one edge: holding it out would cut the leaf off, so nothing is held. */
    weft_graph *g = NULL;
    cr_assert_eq(weft_graph_new(0, &g, NULL), WEFT_OK);
    for (int i = 0; i < 10; i++) {
        char t[8];
        int lt = snprintf(t, sizeof t, "leaf%d", i);
        cr_assert_eq(weft_graph_add_edge(g, "hub", 3, "r", 1, t, (size_t)lt, NULL), WEFT_OK);
    }
    cr_assert_eq(weft_graph_finalize(g, NULL), WEFT_OK);
    weft_split sp;
    cr_assert_eq(weft_split_holdout(g, 0, 0.3, 1, &sp, NULL), WEFT_OK);
    cr_assert_eq(sp.n_test, 0);
    cr_assert_eq(sp.n_wanted, 3);
    weft_split_fini(&sp);
    weft_graph_free(g);
}

Test(split, rejects_fractions_that_leave_no_training)
{
    weft_graph *g = random_graph(0, 5, 10, 30, 1);
    weft_split sp;
    weft_error err;
    cr_assert_eq(weft_split_holdout(g, 0.5, 0.5, 1, &sp, &err), WEFT_ERR_INVALID);
    cr_assert(strstr(err.msg, "below 1"), "message: %s", err.msg);
    weft_graph_free(g);
}

/* "s r t" of edge @p e of @p g, into @p buf. */
static void edge_name(const weft_graph *g, const weft_triple *e, char *buf, size_t cap)
{
    weft_names_view nodes = weft_names_as_view(&g->nodes), rels = weft_names_as_view(&g->relations);
    size_t ls, lr, lt;
    const char *s = weft_names_get(&nodes, e->s, &ls), *t = weft_names_get(&nodes, e->t, &lt);
    const char *r = weft_names_get(&rels, e->r, &lr);
    snprintf(buf, cap, "%.*s %.*s %.*s", (int)ls, s, (int)lr, r, (int)lt, t);
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* The held-out edges (valid and test) of @p sp as sorted names; *n out. */
static char **held_out_names(const weft_graph *g, const weft_split *sp, size_t *n)
{
    *n = sp->n_valid + sp->n_test;
    char **out = calloc(*n ? *n : 1, sizeof *out);
    for (size_t i = 0; i < *n; i++) {
        const weft_triple *e = i < sp->n_valid ? &sp->valid[i] : &sp->test[i - sp->n_valid];
        out[i] = malloc(64);
        edge_name(g, e, out[i], 64);
    }
    qsort(out, *n, sizeof *out, cmp_str);
    return out;
}

/* A graph that grows (5 % more edges, the old ones given in the reverse order, so every node
 * gets another id) keeps its held-out edges: a model trained on the first split's training
 * edges has seen hardly any of the second split's held-out ones. */
Test(split, a_grown_graph_holds_out_the_same_old_edges)
{
    enum { N = 400, M = 4000, EXTRA = 200 };
    weft_graph *g1 = random_graph(0, 5, N, M, 3), *g2 = NULL;
    cr_assert_eq(weft_graph_new(0, &g2, NULL), WEFT_OK);
    weft_rng rng;
    weft_rng_seed(&rng, 77);
    for (size_t k = 0; k < g1->n_edges + EXTRA; k++) {
        char name[64], s[16], r[16], t[16];
        if (k < g1->n_edges)
            edge_name(g1, &g1->edges[g1->n_edges - 1 - k], name, sizeof name);
        else
            snprintf(name, sizeof name, "n%u r%u n%u", weft_rng_below(&rng, N),
                     weft_rng_below(&rng, 3), weft_rng_below(&rng, N));
        cr_assert_eq(sscanf(name, "%15s %15s %15s", s, r, t), 3);
        cr_assert_eq(weft_graph_add_edge(g2, s, strlen(s), r, strlen(r), t, strlen(t), NULL),
                     WEFT_OK);
    }
    cr_assert_eq(weft_graph_finalize(g2, NULL), WEFT_OK);
    weft_split a, b;
    cr_assert_eq(weft_split_holdout(g1, 0.05, 0.1, 3, &a, NULL), WEFT_OK);
    cr_assert_eq(weft_split_holdout(g2, 0.05, 0.1, 3, &b, NULL), WEFT_OK);
    size_t na, nb;
    char **ha = held_out_names(g1, &a, &na), **hb = held_out_names(g2, &b, &nb);
    /* held out in the second split, and a training edge of the first */
    size_t leaked = 0, kept = 0;
    for (size_t i = 0; i < nb; i++) {
        bool in_g1 = false, was_held = bsearch(&hb[i], ha, na, sizeof *ha, cmp_str) != NULL;
        for (size_t j = 0; !was_held && !in_g1 && j < g1->n_edges; j++) {
            char name[64];
            edge_name(g1, &g1->edges[j], name, sizeof name);
            in_g1 = !strcmp(name, hb[i]);
        }
        leaked += in_g1 && !was_held;
        kept += was_held;
    }
    cr_assert_leq(leaked, nb / 50, "%zu of %zu held-out edges were training edges before",
                  leaked, nb);
    cr_assert_geq(kept, na * 9 / 10, "%zu of the %zu edges held out before still are", kept, na);
    for (size_t i = 0; i < na; i++)
        free(ha[i]);
    for (size_t i = 0; i < nb; i++)
        free(hb[i]);
    free(ha);
    free(hb);
    weft_split_fini(&a);
    weft_split_fini(&b);
    weft_graph_free(g1);
    weft_graph_free(g2);
}
