/* Tests of the graph (core/graph.c): loading with its all-or-nothing rule, finalize
 * (order, duplicates, undirected edges), CSR adjacency and statistics. */
#include <criterion/criterion.h>
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <zlib.h>

#include "fixture.h"
#include "weft/graph.h"
#include "weft/io.h"
#include "weft/rng.h"

TestSuite(graph, .init = fixture_dir_create, .fini = fixture_dir_remove);


static weft_graph *new_graph(unsigned flags)
{
    weft_graph *g = NULL;
    cr_assert_eq(weft_graph_new(flags, &g, NULL), WEFT_OK);
    return g;
}

static void add(weft_graph *g, const char *s, const char *r, const char *t)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_add_edge(g, s, strlen(s), r, strlen(r), t, strlen(t), &err), WEFT_OK,
                 "%s", err.msg);
}

static void load(weft_graph *g, const char *path)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_load_edges(g, path, &err), WEFT_OK, "%s", err.msg);
}

static void finalize(weft_graph *g)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK, "%s", err.msg);
}

static uint32_t node_id(const weft_graph *g, const char *name)
{
    weft_names_view v = weft_names_as_view(&g->nodes);
    uint32_t id = UINT32_MAX;
    cr_assert(weft_names_find(&v, name, strlen(name), &id), "node '%s' missing", name);
    return id;
}

static bool has_node(const weft_graph *g, const char *name)
{
    weft_names_view v = weft_names_as_view(&g->nodes);
    uint32_t id = 0;
    return weft_names_find(&v, name, strlen(name), &id);
}

Test(graph, loads_two_column_file_with_default_relation)
{
    weft_graph *g = new_graph(0);
    load(g, fixture_write_text("e.tsv", "# people\nann\tbob\nbob\tcid\n"));
    cr_assert_eq(g->nodes.n, 3);
    cr_assert_eq(g->relations.n, 1);
    weft_names_view rv = weft_names_as_view(&g->relations);
    cr_assert_str_eq(weft_names_get(&rv, 0, NULL), WEFT_GRAPH_DEFAULT_RELATION);
    cr_assert_eq(g->n_input_edges, 2);
    finalize(g);
    cr_assert(weft_csr_has(&g->out, node_id(g, "ann"), 0, node_id(g, "bob")));
    cr_assert(weft_csr_has(&g->in, node_id(g, "cid"), 0, node_id(g, "bob")));
    cr_assert_not(weft_csr_has(&g->out, node_id(g, "bob"), 0, node_id(g, "ann")));
    weft_graph_free(g);
}

Test(graph, loads_three_column_csv_and_gzip)
{
    weft_graph *g = new_graph(0);
    load(g, fixture_write_text("k.csv", "\"Smith, J\",wrote,paper1\r\nann,cites,\"Smith, J\"\r\n"));
    const char *text = "paper1\tcites\tpaper2\n";
    static char gz_path[512];
    snprintf(gz_path, sizeof gz_path, "%s/more.tsv.gz", fixture_dir);
    gzFile gz = gzopen(gz_path, "wb");
    cr_assert_not_null(gz);
    cr_assert_eq(gzwrite(gz, text, (unsigned)strlen(text)), (int)strlen(text));
    cr_assert_eq(gzclose(gz), Z_OK);
    load(g, gz_path);
    cr_assert_eq(g->nodes.n, 4);   /* Smith, J; paper1; ann; paper2 */
    cr_assert_eq(g->relations.n, 2);
    cr_assert_eq(g->n_input_edges, 3);
    cr_assert(has_node(g, "Smith, J"));
    weft_graph_free(g);
}

/* The graph's visible state, to compare before and after a failed load. */
typedef struct graph_state {
    size_t n_nodes, n_relations, n_edges, n_input_edges;
} graph_state;

static graph_state state_of(const weft_graph *g)
{
    graph_state s = { g->nodes.n, g->relations.n, g->n_edges, g->n_input_edges };
    return s;
}

/* A graph holding one good file, so that a failed load has something to leave alone. */
static weft_graph *graph_with_base(void)
{
    weft_graph *g = new_graph(0);
    load(g, fixture_write_text("base.tsv", "a\tb\nb\tc\n"));
    return g;
}

/*
 * Loads @p content as file @p name into a graph that already holds base.tsv, expects
 * @p code with message "<path><suffix>", then checks that nothing changed: counts, and
 * the names "fresh1" / "fresh2" that bad files add on their good lines are not known.
 */
static void expect_load_fails(const char *name, const void *content, size_t len, weft_err code,
                              const char *suffix)
{
    weft_graph *g = graph_with_base();
    graph_state before = state_of(g);
    char path[512], want[600];
    strcpy(path, fixture_write(name, content, len));
    snprintf(want, sizeof want, "%s%s", path, suffix);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_load_edges(g, path, &err), code, "got %s: %s",
                 weft_err_name(err.code), err.msg);
    cr_assert_str_eq(err.msg, want);
    graph_state after = state_of(g);
    cr_assert_eq(after.n_nodes, before.n_nodes);
    cr_assert_eq(after.n_relations, before.n_relations);
    cr_assert_eq(after.n_edges, before.n_edges);
    cr_assert_eq(after.n_input_edges, before.n_input_edges);
    cr_assert_not(has_node(g, "fresh1"));
    cr_assert_not(has_node(g, "fresh2"));
    weft_names_view v = weft_names_as_view(&g->nodes);
    cr_assert_eq(weft_names_check(&v, NULL), WEFT_OK);
    /* Still usable: the same names get the same ids, new ones the next id. */
    add(g, "a", WEFT_GRAPH_DEFAULT_RELATION, "fresh1");
    cr_assert_eq(node_id(g, "fresh1"), before.n_nodes);
    weft_graph_free(g);
}

static void expect_load_fails_text(const char *name, const char *text, const char *suffix)
{
    expect_load_fails(name, text, strlen(text), WEFT_ERR_PARSE, suffix);
}

Test(graph, wrong_column_count_fails_whole_file)
{
    expect_load_fails_text("cols.tsv", "# c\nfresh1\tfresh2\nfresh1\tx\ty\tz\n",
                           ":3: expected 2 fields like line 2, found 4");
    expect_load_fails_text("cols3.tsv", "fresh1\tr\tfresh2\nfresh2\tfresh1\n",
                           ":2: expected 3 fields like line 1, found 2");
    expect_load_fails_text("one.tsv", "fresh1\n",
                           ":1: expected 2 fields (source, target) or 3 (source, relation, "
                           "target), found 1");
}

Test(graph, empty_field_fails_whole_file)
{
    expect_load_fails_text("empty.tsv", "fresh1\tfresh2\nfresh2\tq\nx\t\n",
                           ":3: field 2 (target): empty");
    expect_load_fails_text("emptyrel.csv", "fresh1,r,fresh2\nfresh2,,q\n",
                           ":2: field 2 (relation): empty");
    expect_load_fails_text("emptysrc.tsv", "fresh1\tfresh2\n\tq\n", ":2: field 1 (source): empty");
}

Test(graph, long_name_fails_whole_file)
{
    char text[4096];
    size_t used = (size_t)snprintf(text, sizeof text, "fresh1\tfresh2\n");
    for (int i = 0; i < 7; i++)
        used += (size_t)snprintf(text + used, sizeof text - used, "# filler %d\n", i);
    memset(text + used, 'x', 1500);   /* line 9, field 1 */
    used += 1500;
    used += (size_t)snprintf(text + used, sizeof text - used, "\tfresh2\n");
    expect_load_fails("long.tsv", text, used, WEFT_ERR_PARSE,
                      ":9: field 1 (source): name is 1500 bytes, limit 1024");
}

Test(graph, invalid_utf8_and_nul_fail_whole_file)
{
    expect_load_fails_text("utf.tsv", "fresh1\tfresh2\nfre\xff\tq\n", ":2: invalid UTF-8 at byte 4");
    static const char nul[] = "fresh1\tfresh2\nf\0x\tq\n";
    expect_load_fails("nul.tsv", nul, sizeof nul - 1, WEFT_ERR_PARSE, ":2: NUL byte at byte 2");
}

Test(graph, unreadable_file_is_io_error)
{
    weft_graph *g = graph_with_base();
    graph_state before = state_of(g);
    char path[512], want[600];
    snprintf(path, sizeof path, "%s/absent.tsv", fixture_dir);
    snprintf(want, sizeof want, "%s: No such file or directory", path);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_load_edges(g, path, &err), WEFT_ERR_IO);
    cr_assert_str_eq(err.msg, want);
    cr_assert_eq(state_of(g).n_nodes, before.n_nodes);
    cr_assert_eq(state_of(g).n_edges, before.n_edges);
    weft_graph_free(g);
}

Test(graph, truncated_gzip_fails_whole_file)
{
    /* Enough distinct lines that half the compressed file holds many complete ones. */
    size_t cap = 200000, used = 0;
    char *text = malloc(cap);
    cr_assert_not_null(text);
    weft_rng rng;
    weft_rng_seed(&rng, 5);
    while (used + 64 < cap)
        used += (size_t)snprintf(text + used, cap - used, "fresh%llx\tq%llx\n",
                                 (unsigned long long)weft_rng_next(&rng),
                                 (unsigned long long)weft_rng_next(&rng));
    char path[512];
    snprintf(path, sizeof path, "%s/cut.tsv.gz", fixture_dir);
    gzFile gz = gzopen(path, "wb");
    cr_assert_not_null(gz);
    cr_assert_eq(gzwrite(gz, text, (unsigned)used), (int)used);
    cr_assert_eq(gzclose(gz), Z_OK);
    free(text);
    FILE *f = fopen(path, "rb");
    fseek(f, 0, SEEK_END);
    long size = ftell(f);
    fclose(f);
    cr_assert_eq(truncate(path, size / 2), 0);
    weft_graph *g = graph_with_base();
    graph_state before = state_of(g);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_load_edges(g, path, &err), WEFT_ERR_IO, "%s", err.msg);
    cr_assert_eq(strncmp(err.msg, path, strlen(path)), 0, "%s", err.msg);
    cr_assert_eq(state_of(g).n_nodes, before.n_nodes);
    cr_assert_eq(state_of(g).n_edges, before.n_edges);
    cr_assert_eq(state_of(g).n_input_edges, before.n_input_edges);
    weft_graph_free(g);
}

Test(graph, empty_graph_cannot_be_finalized)
{
    weft_graph *g = new_graph(0);
    load(g, fixture_write_text("c.tsv", "# only a comment\n\n"));
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_ERR_INVALID);
    cr_assert_str_eq(err.msg, "empty graph: no edges");
    cr_assert_not(g->is_final);
    weft_graph_free(g);
}

Test(graph, final_graph_refuses_changes)
{
    weft_graph *g = graph_with_base();
    finalize(g);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_ERR_INVALID);
    cr_assert_eq(weft_graph_add_edge(g, "x", 1, "r", 1, "y", 1, &err), WEFT_ERR_INVALID);
    cr_assert_eq(weft_graph_load_edges(g, fixture_write_text("m.tsv", "x\ty\n"), &err), WEFT_ERR_INVALID);
    cr_assert_eq(g->nodes.n, 3);
    weft_graph_free(g);
}

Test(graph, directed_duplicates_are_counted)
{
    weft_graph *g = new_graph(0);
    add(g, "a", "r", "b");
    add(g, "a", "r", "b");   /* duplicate */
    add(g, "b", "r", "a");   /* the reverse: a different edge when directed */
    add(g, "a", "s", "b");   /* another relation: a different edge */
    add(g, "c", "r", "c");   /* self-loop */
    add(g, "c", "r", "c");   /* duplicate */
    finalize(g);
    cr_assert_eq(g->n_input_edges, 6);
    cr_assert_eq(g->n_edges, 4);
    cr_assert_eq(g->n_duplicates, 2);
    cr_assert_eq(g->n_self_loops, 1);
    weft_graph_free(g);
}

Test(graph, undirected_reverse_counts_as_duplicate)
{
    weft_graph *g = new_graph(WEFT_GRAPH_UNDIRECTED);
    add(g, "a", "r", "b");
    add(g, "b", "r", "a");   /* same edge as a-b */
    add(g, "a", "r", "b");   /* same again */
    add(g, "c", "r", "c");   /* a self-loop is stored once */
    finalize(g);
    uint32_t a = node_id(g, "a"), b = node_id(g, "b"), c = node_id(g, "c");
    cr_assert_eq(g->n_duplicates, 2);
    cr_assert_eq(g->n_self_loops, 1);
    cr_assert_eq(g->n_edges, 3);   /* a->b, b->a, c->c */
    cr_assert(weft_csr_has(&g->out, a, 0, b));
    cr_assert(weft_csr_has(&g->out, b, 0, a));
    cr_assert(weft_csr_has(&g->in, a, 0, b));
    cr_assert(weft_csr_has(&g->out, c, 0, c));
    weft_graph_stats st;
    cr_assert_eq(weft_graph_stats_compute(g, &st, NULL), WEFT_OK);
    cr_assert_eq(st.n_edges, 2);   /* a-b and c-c, each once */
    weft_graph_free(g);
}

enum { RN = 40, RR = 3 };   /* random graph: node and relation name counts */

/*
 * Adds @p m random edges over names "v0".."v39", "r0".."r2" and records, by the ids the
 * graph gave them, which (s, r, t) were added in @p present. This array is the brute-force
 * truth the CSR is compared with.
 */
static void random_graph(weft_graph *g, size_t m, uint64_t seed, bool present[RN][RR][RN])
{
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    memset(present, 0, sizeof(bool) * RN * RR * RN);
    for (size_t i = 0; i < m; i++) {
        char s[8], r[8], t[8];
        snprintf(s, sizeof s, "v%u", weft_rng_below(&rng, RN));
        snprintf(r, sizeof r, "r%u", weft_rng_below(&rng, RR));
        snprintf(t, sizeof t, "v%u", weft_rng_below(&rng, RN));
        add(g, s, r, t);
        weft_names_view rv = weft_names_as_view(&g->relations);
        uint32_t rid = 0;
        cr_assert(weft_names_find(&rv, r, strlen(r), &rid));
        present[node_id(g, s)][rid][node_id(g, t)] = true;
    }
}

/* Row @p v of @p c under relation @p r equals the ascending list of u with want(u). */
static void expect_row(const weft_csr *c, uint32_t v, uint32_t r, const bool *want, size_t n)
{
    uint64_t first = 0;
    size_t count = 0;
    weft_csr_range(c, v, r, &first, &count);
    size_t k = 0;
    for (uint32_t u = 0; u < n; u++) {
        if (!want[u])
            continue;
        cr_assert_lt(k, count, "row %u rel %u: too few entries", v, r);
        cr_assert_eq(c->nbr[first + k], u, "row %u rel %u entry %zu", v, r, k);
        cr_assert_eq(c->rel[first + k], r);
        k++;
    }
    cr_assert_eq(k, count, "row %u rel %u: %zu entries, expected %zu", v, r, count, k);
    for (uint32_t u = 0; u < n; u++)
        cr_assert_eq(weft_csr_has(c, v, r, u), want[u], "has(%u, %u, %u)", v, r, u);
}

/* Rows are sorted by (relation, neighbour) strictly, and the offsets cover every edge. */
static void expect_rows_sorted(const weft_csr *c, size_t m)
{
    cr_assert_eq(c->off[0], 0);
    cr_assert_eq(c->off[c->n_rows], m);
    for (size_t v = 0; v < c->n_rows; v++)
        for (uint64_t j = c->off[v] + 1; j < c->off[v + 1]; j++)
            cr_assert(c->rel[j - 1] < c->rel[j] ||
                      (c->rel[j - 1] == c->rel[j] && c->nbr[j - 1] < c->nbr[j]),
                      "row %zu not sorted at %llu", v, (unsigned long long)j);
}

Test(graph, csr_matches_brute_force_on_random_graph)
{
    static bool present[RN][RR][RN];
    weft_graph *g = new_graph(0);
    size_t m = 600;
    random_graph(g, m, 11, present);
    finalize(g);
    size_t n = g->nodes.n, n_rel = g->relations.n, unique = 0, loops = 0;
    for (size_t s = 0; s < n; s++)
        for (size_t r = 0; r < n_rel; r++)
            for (size_t t = 0; t < n; t++)
                if (present[s][r][t]) {
                    unique++;
                    loops += s == t;
                }
    cr_assert_eq(g->n_edges, unique);
    cr_assert_eq(g->n_duplicates, m - unique);
    cr_assert_eq(g->n_self_loops, loops);
    for (size_t i = 0; i < g->n_edges; i++) {
        weft_triple e = g->edges[i];
        cr_assert(present[e.s][e.r][e.t]);
        if (i > 0) {
            weft_triple p = g->edges[i - 1];
            cr_assert(p.s < e.s || (p.s == e.s && (p.r < e.r || (p.r == e.r && p.t < e.t))),
                      "edges not strictly sorted at %zu", i);
        }
    }
    expect_rows_sorted(&g->out, unique);
    expect_rows_sorted(&g->in, unique);
    bool want[RN];
    for (uint32_t v = 0; v < n; v++)
        for (uint32_t r = 0; r < n_rel; r++) {
            for (uint32_t u = 0; u < n; u++)
                want[u] = present[v][r][u];
            expect_row(&g->out, v, r, want, n);
            for (uint32_t u = 0; u < n; u++)
                want[u] = present[u][r][v];
            expect_row(&g->in, v, r, want, n);
        }
    weft_graph_free(g);
}

Test(graph, undirected_csr_matches_brute_force)
{
    static bool present[RN][RR][RN];
    weft_graph *g = new_graph(WEFT_GRAPH_UNDIRECTED);
    size_t m = 500;
    random_graph(g, m, 12, present);
    finalize(g);
    size_t n = g->nodes.n, n_rel = g->relations.n, pairs = 0, loops = 0;
    for (size_t s = 0; s < n; s++)
        for (size_t r = 0; r < n_rel; r++)
            for (size_t t = s; t < n; t++)
                if (present[s][r][t] || present[t][r][s]) {
                    pairs++;
                    loops += s == t;
                }
    cr_assert_eq(g->n_duplicates, m - pairs);
    cr_assert_eq(g->n_self_loops, loops);
    cr_assert_eq(g->n_edges, 2 * (pairs - loops) + loops);
    bool want[RN];
    for (uint32_t v = 0; v < n; v++)
        for (uint32_t r = 0; r < n_rel; r++) {
            for (uint32_t u = 0; u < n; u++)
                want[u] = present[v][r][u] || present[u][r][v];
            expect_row(&g->out, v, r, want, n);
            expect_row(&g->in, v, r, want, n);
        }
    weft_graph_stats st;
    cr_assert_eq(weft_graph_stats_compute(g, &st, NULL), WEFT_OK);
    cr_assert_eq(st.n_edges, pairs);
    weft_graph_free(g);
}

Test(graph, build_csr_keeps_duplicates_in_any_input_order)
{
    /* An unsorted subset with a repeat, as a train split would pass. Expected rows worked
     * by hand: by source, row 0 = (0,1) (0,2) (0,2) (1,0); row 2 = (0,0) (1,1); rows 1, 3
     * empty. By target, row 0 = (0,2) (1,0); row 1 = (0,0) (1,2); row 2 = (0,0) (0,0). */
    const weft_triple e[] = { { 2, 1, 1 }, { 0, 1, 0 }, { 0, 0, 2 }, { 2, 0, 0 },
                              { 0, 0, 1 }, { 0, 0, 2 } };
    const size_t m = sizeof e / sizeof e[0];
    weft_csr c;
    cr_assert_eq(weft_graph_build_csr(&c, e, m, 4, false, NULL), WEFT_OK);
    const uint64_t off[] = { 0, 4, 4, 6, 6 };
    const uint32_t rel[] = { 0, 0, 0, 1, 0, 1 }, nbr[] = { 1, 2, 2, 0, 0, 1 };
    for (size_t v = 0; v <= 4; v++)
        cr_assert_eq(c.off[v], off[v]);
    for (size_t i = 0; i < m; i++) {
        cr_assert_eq(c.rel[i], rel[i], "rel[%zu]", i);
        cr_assert_eq(c.nbr[i], nbr[i], "nbr[%zu]", i);
    }
    weft_csr_fini(&c);
    cr_assert_eq(weft_graph_build_csr(&c, e, m, 4, true, NULL), WEFT_OK);
    const uint64_t toff[] = { 0, 2, 4, 6, 6 };
    const uint32_t trel[] = { 0, 1, 0, 1, 0, 0 }, tnbr[] = { 2, 0, 0, 2, 0, 0 };
    for (size_t v = 0; v <= 4; v++)
        cr_assert_eq(c.off[v], toff[v]);
    for (size_t i = 0; i < m; i++) {
        cr_assert_eq(c.rel[i], trel[i], "rel[%zu]", i);
        cr_assert_eq(c.nbr[i], tnbr[i], "nbr[%zu]", i);
    }
    uint64_t first = 0;
    size_t count = 0;
    weft_csr_range(&c, 2, 0, &first, &count);
    cr_assert_eq(first, 4);
    cr_assert_eq(count, 2);
    weft_csr_range(&c, 3, 0, &first, &count);
    cr_assert_eq(count, 0);
    weft_csr_fini(&c);
    weft_csr_fini(&c);   /* harmless twice: the arrays were reset */
}

Test(graph, build_csr_rejects_ids_out_of_range)
{
    const weft_triple e[] = { { 0, 0, 1 }, { 1, 0, 3 } };
    weft_csr c = { 0 };
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_build_csr(&c, e, 2, 3, false, &err), WEFT_ERR_INVALID);
    cr_assert_str_eq(err.msg, "edge 1 (1, 3): node id beyond 3 nodes");
    cr_assert_null(c.off);
}

Test(graph, stats_need_a_final_graph)
{
    weft_graph *g = graph_with_base();
    weft_graph_stats st;
    cr_assert_eq(weft_graph_stats_compute(g, &st, NULL), WEFT_ERR_INVALID);
    weft_graph_free(g);
}

Test(graph, stats_on_hand_worked_graph)
{
    /*
     * Hand-computed. Directed edges: a->b (link), b->c, c->a, a->c, a->b (also), d->d,
     * e->f, plus a repeat of a->b (link).
     * Input 8, duplicates 1, unique edges 7, relations 2 (link, also), self-loops 1.
     * Distinct neighbours, either direction, self excluded: a {b,c} 2, b {a,c} 2,
     * c {a,b} 2, d {} 0, e {f} 1, f {e} 1; sorted 0 1 1 2 2 2: min 0, median
     * (1 + 2) / 2 = 1.5, max 2. Isolated: d (only a self-loop). Components {a,b,c}, {d},
     * {e,f}: 3, the largest 3.
     */
    weft_graph *g = new_graph(0);
    add(g, "a", "link", "b");
    add(g, "b", "link", "c");
    add(g, "c", "link", "a");
    add(g, "a", "link", "c");
    add(g, "a", "also", "b");
    add(g, "d", "link", "d");
    add(g, "e", "link", "f");
    add(g, "a", "link", "b");
    finalize(g);
    weft_graph_stats st;
    cr_assert_eq(weft_graph_stats_compute(g, &st, NULL), WEFT_OK);
    cr_assert_eq(st.n_nodes, 6);
    cr_assert_eq(st.n_edges, 7);
    cr_assert_eq(st.n_relations, 2);
    cr_assert_eq(st.n_input_edges, 8);
    cr_assert_eq(st.n_duplicates, 1);
    cr_assert_eq(st.n_self_loops, 1);
    cr_assert_eq(st.degree_min, 0);
    cr_assert_float_eq(st.degree_median, 1.5, 1e-12);
    cr_assert_eq(st.degree_max, 2);
    cr_assert_eq(st.n_isolated, 1);
    cr_assert_eq(st.n_components, 3);
    cr_assert_eq(st.largest_component, 3);
    weft_graph_free(g);
}

/* ---- parts: train / valid / test files in one graph ---- */

static void load_part(weft_graph *g, const char *path, weft_graph_part *p)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_load_part(g, path, p, &err), WEFT_OK, "%s", err.msg);
}

static void finalize_part(const weft_graph *g, weft_graph_part *p)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_part_finalize(g, p, &err), WEFT_OK, "%s", err.msg);
}

static bool part_has(const weft_graph *g, const weft_graph_part *p, const char *s,
                     const char *r, const char *t)
{
    weft_names_view rv = weft_names_as_view(&g->relations);
    uint32_t rid;
    cr_assert(weft_names_find(&rv, r, strlen(r), &rid));
    weft_triple want = { node_id(g, s), rid, node_id(g, t) };
    for (size_t i = 0; i < p->n_edges; i++)
        if (!memcmp(&p->edges[i], &want, sizeof want))
            return true;
    return false;
}

Test(graph, parts_keep_their_edges_apart_in_one_graph)
{
    weft_graph *g = new_graph(0);
    weft_graph_part train = { 0 }, valid = { 0 }, test = { 0 };
    load_part(g, fixture_write_text("train.tsv", "a\tr\tb\nb\tr\tc\na\tr\tb\n"), &train);
    load_part(g, fixture_write_text("valid.tsv", "c\tr\td\n"), &valid);
    load_part(g, fixture_write_text("test.tsv", "a\tr\tb\nd\tr\te\na\tq\tc\n"), &test);
    finalize(g);
    finalize_part(g, &train);
    finalize_part(g, &valid);
    finalize_part(g, &test);
    /* The graph: every name and every distinct edge of the three files. */
    cr_assert_eq(g->nodes.n, 5);
    cr_assert_eq(g->relations.n, 2);
    cr_assert_eq(g->n_edges, 5);   /* a-b, b-c, c-d, d-e, a q c */
    cr_assert_eq(train.n_input_edges, 3);
    cr_assert_eq(train.n_duplicates, 1);
    cr_assert_eq(train.n_edges, 2);
    cr_assert(part_has(g, &train, "a", "r", "b") && part_has(g, &train, "b", "r", "c"));
    cr_assert_eq(valid.n_edges, 1);
    cr_assert(part_has(g, &valid, "c", "r", "d"));
    cr_assert_eq(test.n_edges, 3);
    cr_assert(part_has(g, &test, "d", "r", "e") && part_has(g, &test, "a", "q", "c"));
    for (size_t i = 1; i < test.n_edges; i++)
        cr_assert(memcmp(&test.edges[i - 1], &test.edges[i], sizeof test.edges[i]) != 0);
    weft_graph_part_overlap o;
    cr_assert_eq(weft_graph_part_compare(g, &train, &test, &o, NULL), WEFT_OK);
    cr_assert_eq(o.n_shared, 1);            /* a r b is also a training edge */
    cr_assert_eq(o.n_unseen_node, 1);       /* d r e: neither d nor e is in train */
    cr_assert_eq(o.n_unseen_relation, 1);   /* a q c */
    cr_assert_eq(weft_graph_part_compare(g, &train, &valid, &o, NULL), WEFT_OK);
    cr_assert_eq(o.n_shared, 0);
    cr_assert_eq(o.n_unseen_node, 1);       /* c r d: d */
    weft_graph_part_fini(&train);
    weft_graph_part_fini(&valid);
    weft_graph_part_fini(&test);
    weft_graph_free(g);
}

Test(graph, undirected_part_holds_both_directions)
{
    weft_graph *g = new_graph(WEFT_GRAPH_UNDIRECTED);
    weft_graph_part train = { 0 }, test = { 0 };
    load_part(g, fixture_write_text("train.tsv", "a\tb\nb\ta\nb\tc\nc\tc\n"), &train);
    load_part(g, fixture_write_text("test.tsv", "c\tb\nd\ta\n"), &test);
    finalize(g);
    finalize_part(g, &train);
    finalize_part(g, &test);
    cr_assert_eq(train.n_duplicates, 1);   /* b-a repeats a-b */
    cr_assert_eq(train.n_unique, 3);       /* a-b, b-c, the loop c-c */
    cr_assert_eq(train.n_edges, 5);        /* both directions of two pairs, the loop once */
    cr_assert(part_has(g, &train, "b", "link", "a") && part_has(g, &train, "c", "link", "b"));
    cr_assert_eq(test.n_edges, 4);
    cr_assert(part_has(g, &test, "a", "link", "d") && part_has(g, &test, "b", "link", "c"));
    weft_graph_part_overlap o;
    cr_assert_eq(weft_graph_part_compare(g, &train, &test, &o, NULL), WEFT_OK);
    cr_assert_eq(o.n_shared, 1, "the pair b-c is shared once, not per direction");
    cr_assert_eq(o.n_unseen_node, 1);
    weft_graph_part_fini(&train);
    weft_graph_part_fini(&test);
    weft_graph_free(g);
}

Test(graph, failed_part_load_leaves_graph_and_part_alone)
{
    weft_graph *g = new_graph(0);
    weft_graph_part p = { 0 };
    load_part(g, fixture_write_text("good.tsv", "a\tb\nb\tc\n"), &p);
    graph_state before = state_of(g);
    weft_error err = { WEFT_OK, "" };
    const char *bad = fixture_write_text("bad.tsv", "fresh1\tfresh2\nx\ty\tz\n");
    cr_assert_eq(weft_graph_load_part(g, bad, &p, &err), WEFT_ERR_PARSE);
    graph_state after = state_of(g);
    cr_assert_eq(after.n_nodes, before.n_nodes);
    cr_assert_eq(after.n_edges, before.n_edges);
    cr_assert_eq(p.n_edges, 2);
    cr_assert_eq(p.n_input_edges, 2);
    cr_assert_not(has_node(g, "fresh1"));
    weft_graph_part_fini(&p);
    weft_graph_free(g);
}

Test(graph, part_is_finalized_after_its_graph)
{
    weft_graph *g = new_graph(0);
    weft_graph_part p = { 0 };
    load_part(g, fixture_write_text("e.tsv", "a\tb\n"), &p);
    cr_assert_eq(weft_graph_part_finalize(g, &p, NULL), WEFT_ERR_INVALID);
    finalize(g);
    finalize_part(g, &p);
    cr_assert_eq(weft_graph_part_finalize(g, &p, NULL), WEFT_ERR_INVALID);
    weft_graph_part_fini(&p);
    weft_graph_part_fini(NULL);
    weft_graph_free(g);
}

Test(graph, read_triples_resolves_names_without_adding_any)
{
    weft_graph *g = new_graph(0);
    load(g, fixture_write_text("known.tsv", "a\tr\tb\nb\ts\tc\n"));
    finalize(g);
    weft_names_view nv = weft_names_as_view(&g->nodes), rv = weft_names_as_view(&g->relations);
    weft_triple *e = NULL;
    size_t n = 0;
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_graph_read_triples(fixture_write_text("ok.tsv", "c\tr\ta\n# note\nb\ts\tb\n"),
                                         &nv, &rv, &e, &n, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(n, 2);
    cr_assert_eq(e[0].s, node_id(g, "c"));
    cr_assert_eq(e[0].t, node_id(g, "a"));
    cr_assert_eq(e[1].s, node_id(g, "b"));
    cr_assert_eq(e[1].r, 1);
    free(e);

    char want[600];
    const char *path = fixture_write_text("unknown.tsv", "a\tr\tb\n\na\tr\tzed\n");
    cr_assert_eq(weft_graph_read_triples(path, &nv, &rv, &e, &n, &err), WEFT_ERR_NOT_FOUND);
    snprintf(want, sizeof want, "%s:3: field 3 (target): unknown node 'zed'", path);
    cr_assert_str_eq(err.msg, want);
    path = fixture_write_text("rel.tsv", "a\tq\tb\n");
    cr_assert_eq(weft_graph_read_triples(path, &nv, &rv, &e, &n, &err), WEFT_ERR_NOT_FOUND);
    snprintf(want, sizeof want, "%s:1: field 2 (relation): unknown relation 'q'", path);
    cr_assert_str_eq(err.msg, want);
    path = fixture_write_text("two.tsv", "a\tb\n");   /* relation "link" is not in the graph */
    cr_assert_eq(weft_graph_read_triples(path, &nv, &rv, &e, &n, &err), WEFT_ERR_NOT_FOUND);
    cr_assert(strstr(err.msg, "two.tsv:1:") != NULL, "%s", err.msg);
    path = fixture_write_text("cols.tsv", "a\tr\tb\na\tb\n");
    cr_assert_eq(weft_graph_read_triples(path, &nv, &rv, &e, &n, &err), WEFT_ERR_PARSE);
    cr_assert_eq(g->nodes.n, 3, "reading added a name");
    weft_graph_free(g);
}

Test(graph, csr_triples_except_leaves_out_exactly_the_dropped)
{
    weft_graph *g = new_graph(0);
    weft_rng rng;
    weft_rng_seed(&rng, 3);
    for (int i = 0; i < 300; i++) {
        char s[8], t[8], r[8];
        snprintf(s, sizeof s, "n%u", weft_rng_below(&rng, 40));
        snprintf(t, sizeof t, "n%u", weft_rng_below(&rng, 40));
        snprintf(r, sizeof r, "r%u", weft_rng_below(&rng, 3));
        add(g, s, r, t);
    }
    finalize(g);
    /* Drop every third edge, plus one triple the graph does not hold. */
    weft_triple drop[200];
    size_t n_drop = 0;
    for (size_t i = 0; i < g->n_edges; i += 3)
        drop[n_drop++] = g->edges[i];
    weft_triple *kept = NULL;
    size_t n_kept = 0;
    cr_assert_eq(weft_csr_triples_except(&g->out, drop, n_drop, &kept, &n_kept, NULL), WEFT_OK);
    cr_assert_eq(n_kept, g->n_edges - n_drop);
    size_t k = 0;
    for (size_t i = 0; i < g->n_edges; i++)   /* g->edges is sorted like the CSR walk */
        if (i % 3 != 0) {
            cr_assert_eq(memcmp(&kept[k], &g->edges[i], sizeof kept[k]), 0, "edge %zu", i);
            k++;
        }
    free(kept);
    weft_graph_free(g);
}

/* Brute force for weft_graph_unique_triples: is (s, r, t) in e[0..m), as given or, when
 * undirected, reversed? */
static bool brute_has(const weft_triple *e, size_t m, bool undirected, weft_triple x)
{
    for (size_t i = 0; i < m; i++)
        if (e[i].r == x.r && ((e[i].s == x.s && e[i].t == x.t) ||
                              (undirected && e[i].s == x.t && e[i].t == x.s)))
            return true;
    return false;
}

Test(graph, unique_triples_match_brute_force)
{
    enum { M = 120 };
    weft_triple e[M];
    weft_rng rng;
    weft_rng_seed(&rng, 4);
    for (size_t i = 0; i < M; i++)
        e[i] = (weft_triple){ weft_rng_below(&rng, 9), weft_rng_below(&rng, 2),
                              weft_rng_below(&rng, 9) };
    for (int undirected = 0; undirected <= 1; undirected++) {
        weft_triple *u = NULL;
        size_t n = 0, dup = 0;
        cr_assert_eq(weft_graph_unique_triples(e, M, undirected, &u, &n, &dup, NULL), WEFT_OK);
        /* Every output is an input (or its reverse), sorted strictly ascending; every
         * input's directions are in the output; count distinct inputs by brute force. */
        size_t distinct = 0;
        for (size_t i = 0; i < M; i++)
            distinct += !brute_has(e, i, undirected, e[i]);
        cr_assert_eq(dup, M - distinct);
        for (size_t i = 0; i < n; i++) {
            cr_assert(brute_has(e, M, undirected, u[i]));
            if (i)
                cr_assert(((uint64_t)u[i - 1].s << 40 | (uint64_t)u[i - 1].r << 20 | u[i - 1].t) <
                          ((uint64_t)u[i].s << 40 | (uint64_t)u[i].r << 20 | u[i].t));
        }
        for (size_t i = 0; i < M; i++) {
            cr_assert(brute_has(u, n, false, e[i]));
            weft_triple rev = { e[i].t, e[i].r, e[i].s };
            if (undirected)
                cr_assert(brute_has(u, n, false, rev));
        }
        free(u);
    }
}
