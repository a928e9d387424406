/* Graph statistics of Zachary's karate club (tests/data/karate, provenance in
 * tests/data/README.md) against figures from outside weft. */
#include <criterion/criterion.h>
#include <stdio.h>
#include <string.h>

#include "weft/graph.h"

/* tests/data/karate/edges.tsv, found through __FILE__: relative to where the build ran
 * (the repository root), or absolute. */
static void karate_path(char *out, size_t cap)
{
    const char *src = __FILE__;   /* .../tests/reference/test_karate.c */
    const char *slash = strrchr(src, '/');
    int dir_len = slash ? (int)(slash - src) : 1;
    snprintf(out, cap, "%.*s/../data/karate/edges.tsv", dir_len, slash ? src : ".");
}

static void check_karate(unsigned flags)
{
    char path[1024];
    karate_path(path, sizeof path);
    weft_graph *g = NULL;
    weft_error err;
    cr_assert_eq(weft_graph_new(flags, &g, &err), WEFT_OK);
    cr_assert_eq(weft_graph_load_edges(g, path, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK, "%s", err.msg);
    weft_graph_stats st;
    cr_assert_eq(weft_graph_stats_compute(g, &st, NULL), WEFT_OK);
    /* 34 members and 78 friendships are the counts Zachary (1977) reports. Degrees and
     * components computed with plain /usr/bin/python3 over the same edges.tsv (neighbour
     * sets, statistics.median, a breadth-first search), and again with scipy's
     * connected_components in tests/e2e/test_train.sh: degree 1 / 3 / 17, one component. */
    cr_assert_eq(st.n_nodes, 34);
    cr_assert_eq(st.n_edges, 78);
    cr_assert_eq(st.n_relations, 1);
    cr_assert_eq(st.n_input_edges, 78);
    cr_assert_eq(st.n_duplicates, 0);
    cr_assert_eq(st.n_self_loops, 0);
    cr_assert_eq(st.degree_min, 1);
    cr_assert_float_eq(st.degree_median, 3.0, 1e-12);
    cr_assert_eq(st.degree_max, 17);
    cr_assert_eq(st.n_isolated, 0);
    cr_assert_eq(st.n_components, 1);
    cr_assert_eq(st.largest_component, 34);
    cr_assert_eq(g->n_edges, (flags & WEFT_GRAPH_UNDIRECTED) ? 156 : 78);
    weft_graph_free(g);
}

Test(reference, karate_statistics_undirected,
     .description = "Zachary 1977 karate club: 34 nodes, 78 edges; degrees from python3")
{
    check_karate(WEFT_GRAPH_UNDIRECTED);
}

Test(reference, karate_statistics_directed,
     .description = "the same file read as directed: degree ignores direction, same figures")
{
    check_karate(0);
}
