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
