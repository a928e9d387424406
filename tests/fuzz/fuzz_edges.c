/* Fuzz target: edge files (core/graph.c: weft_graph_load_edges, weft_graph_load_part,
 * weft_graph_read_triples), read through core/io.c. The first byte chooses how the file is
 * stored (tests/fuzz/fuzz.h); its switch bit makes the graph undirected.
 *
 * Beside "no crash, no leak", the checks are the header's promises: a file that fails to
 * load leaves the graph exactly as it was; one that loads is read back by
 * weft_graph_read_triples against the tables it filled, edge for edge; and the final graph
 * and its part are consistent (CSR rows, statistics). */
#include <stdlib.h>
#include <string.h>

#include "fuzz.h"
#include "weft/graph.h"

/* The edges every graph starts with, so that "as it was" is not just "empty". Added by
 * name rather than read from a file: each file opened costs the sanitizers' allocator two
 * large mappings (zlib's buffers), the most expensive part of an input. */
static const char *const base_edges[][3] = { { "a", "knows", "b" }, { "b", "link", "c" } };

static void add_base_edges(weft_graph *g)
{
    weft_error err;
    for (size_t i = 0; i < sizeof base_edges / sizeof base_edges[0]; i++) {
        const char *const *e = base_edges[i];
        if (weft_graph_add_edge(g, e[0], strlen(e[0]), e[1], strlen(e[1]), e[2], strlen(e[2]),
                                &err) != WEFT_OK)
            fuzz_fail("%s", err.msg);
    }
}

static weft_graph *base_only;

static void free_base(void)
{
    weft_graph_free(base_only);
}

/* A graph of the base edges alone, kept until exit. */
static const weft_graph *base_graph(void)
{
    weft_error err;
    if (!base_only) {
        if (weft_graph_new(0, &base_only, &err) != WEFT_OK)
            fuzz_fail("%s", err.msg);
        add_base_edges(base_only);
        atexit(free_base);
    }
    return base_only;
}

struct counts {
    size_t nodes, relations, edges, input_edges;
};

static struct counts counts_of(const weft_graph *g)
{
    struct counts c = { g->nodes.n, g->relations.n, g->n_edges, g->n_input_edges };
    return c;
}

static void check_csr(const weft_csr *c, size_t n_rows, size_t n_edges, size_t n_relations)
{
    if (c->n_rows != n_rows || c->off[0] != 0 || c->off[n_rows] != n_edges)
        fuzz_fail("CSR has %zu rows and %llu entries, expected %zu and %zu", c->n_rows,
                  (unsigned long long)c->off[c->n_rows], n_rows, n_edges);
    for (size_t v = 0; v < n_rows; v++) {
        if (c->off[v] > c->off[v + 1])
            fuzz_fail("CSR offsets fall at row %zu", v);
        for (uint64_t k = c->off[v]; k < c->off[v + 1]; k++)
            if (c->nbr[k] >= n_rows || c->rel[k] >= n_relations)
                fuzz_fail("CSR row %zu holds an id out of range", v);
    }
}

/* The file loaded: read it back against the graph's tables, then finalize both. */
static void check_loaded(weft_graph *g, weft_graph_part *part, const char *path,
                         struct counts before)
{
    weft_error err;
    /* Against the tables of the base edges alone: a name the file added must be refused,
     * and a file naming only base nodes and relations read. */
    const weft_graph *base = base_graph();
    weft_names_view nv = weft_names_as_view(&base->nodes);
    weft_names_view rv = weft_names_as_view(&base->relations);
    weft_triple *t = NULL;
    size_t n = 0;
    weft_err rc = weft_graph_read_triples(path, &nv, &rv, &t, &n, &err);
    bool is_base_only = g->nodes.n == before.nodes && g->relations.n == before.relations;
    if (rc == WEFT_OK)
        free(t);
    if ((rc == WEFT_OK) != is_base_only || (rc != WEFT_OK && rc != WEFT_ERR_NOT_FOUND))
        fuzz_fail("read against the base tables: %s", rc == WEFT_OK ? "read" : err.msg);
    nv = weft_names_as_view(&g->nodes);
    rv = weft_names_as_view(&g->relations);
    t = NULL;
    if (weft_graph_read_triples(path, &nv, &rv, &t, &n, &err) != WEFT_OK)
        fuzz_fail("a file that loaded does not read back: %s", err.msg);
    size_t added = g->n_edges - before.edges;
    if (n != added || part->n_edges != added)
        fuzz_fail("read back %zu edges, loaded %zu, part %zu", n, added, part->n_edges);
    for (size_t i = 0; i < n; i++) {
        const weft_triple *e = &g->edges[before.edges + i];
        if (t[i].s != e->s || t[i].r != e->r || t[i].t != e->t)
            fuzz_fail("edge %zu reads back as another", i);
    }
    free(t);
    if (weft_graph_finalize(g, &err) != WEFT_OK)
        fuzz_fail("finalize: %s", err.msg);
    check_csr(&g->out, g->nodes.n, g->n_edges, g->relations.n);
    check_csr(&g->in, g->nodes.n, g->n_edges, g->relations.n);
    weft_graph_stats st;
    if (weft_graph_stats_compute(g, &st, &err) != WEFT_OK)
        fuzz_fail("stats: %s", err.msg);
    if (st.n_nodes != g->nodes.n || st.largest_component > st.n_nodes)
        fuzz_fail("statistics disagree with the graph");
    if (weft_graph_part_finalize(g, part, &err) != WEFT_OK)
        fuzz_fail("part finalize: %s", err.msg);
    if (part->n_unique + part->n_duplicates != part->n_input_edges)
        fuzz_fail("part counts %zu unique + %zu repeats of %zu", part->n_unique,
                  part->n_duplicates, part->n_input_edges);
    weft_graph_part_overlap o;
    if (weft_graph_part_compare(g, part, part, &o, &err) != WEFT_OK)
        fuzz_fail("part compare: %s", err.msg);
    if (o.n_unseen_node || o.n_unseen_relation)
        fuzz_fail("a part has edges unseen by itself");
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    fuzz_table_file f = fuzz_write_table(data, size);
    weft_graph *g = NULL;
    weft_error err;
    if (weft_graph_new(f.is_switched ? WEFT_GRAPH_UNDIRECTED : 0, &g, &err) != WEFT_OK)
        fuzz_fail("%s", err.msg);
    add_base_edges(g);
    struct counts before = counts_of(g);
    weft_graph_part part;
    memset(&part, 0, sizeof part);
    if (weft_graph_load_part(g, f.path, &part, &err) == WEFT_OK) {
        check_loaded(g, &part, f.path, before);
    } else {
        struct counts after = counts_of(g);
        if (memcmp(&before, &after, sizeof before) != 0 || part.n_edges != 0)
            fuzz_fail("a file that failed to load changed the graph (%s)", err.msg);
        if (strncmp(err.msg, f.path, strlen(f.path)) != 0)
            fuzz_fail("the message does not name the file: %s", err.msg);
    }
    weft_graph_part_fini(&part);
    weft_graph_free(g);
    return 0;
}
