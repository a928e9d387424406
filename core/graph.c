/* The graph (include/weft/graph.h): names interned as edges arrive, then one finalize that
 * sorts, deduplicates and builds CSR adjacency in both directions. */
#include "weft/graph.h"

#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/io.h"

weft_err weft_graph_new(unsigned flags, weft_graph **out, weft_error *err)
{
    weft_graph *g = calloc(1, sizeof *g);
    if (!g)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a graph");
    g->flags = flags;
    weft_err rc = weft_names_init(&g->nodes, err);
    if (rc == WEFT_OK)
        rc = weft_names_init(&g->relations, err);
    if (rc != WEFT_OK) {
        weft_graph_free(g);
        return rc;
    }
    *out = g;
    return WEFT_OK;
}

void weft_graph_free(weft_graph *g)
{
    if (!g)
        return;
    weft_names_fini(&g->nodes);
    weft_names_fini(&g->relations);
    free(g->edges);
    weft_csr_fini(&g->out);
    weft_csr_fini(&g->in);
    free(g);
}

/* What an all-or-nothing change must restore. Name tables only grow, so their sizes
 * suffice (weft_names_truncate undoes the rest). */
typedef struct graph_mark {
    size_t n_nodes, n_relations, n_edges, n_input_edges;
} graph_mark;

static graph_mark graph_mark_take(const weft_graph *g)
{
    graph_mark m = { g->nodes.n, g->relations.n, g->n_edges, g->n_input_edges };
    return m;
}

static void graph_mark_restore(weft_graph *g, const graph_mark *m)
{
    weft_names_truncate(&g->nodes, m->n_nodes);
    weft_names_truncate(&g->relations, m->n_relations);
    g->n_edges = m->n_edges;
    g->n_input_edges = m->n_input_edges;
}

static weft_err not_final(const weft_graph *g, const char *what, weft_error *err)
{
    if (!g->is_final)
        return WEFT_OK;
    return weft_error_set(err, WEFT_ERR_INVALID, "%s: the graph is already final", what);
}

/* Append one input edge. On failure names may have been added: the caller restores. */
static weft_err append_edge(weft_graph *g, const char *s, size_t s_len, const char *r,
                            size_t r_len, const char *t, size_t t_len, weft_error *err)
{
    if (weft_grow_array((void **)&g->edges, &g->edges_cap, g->n_edges + 1, sizeof *g->edges))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for edges");
    weft_triple e;
    weft_err rc = weft_names_intern(&g->nodes, s, s_len, &e.s, NULL, err);
    if (rc == WEFT_OK)
        rc = weft_names_intern(&g->relations, r, r_len, &e.r, NULL, err);
    if (rc == WEFT_OK)
        rc = weft_names_intern(&g->nodes, t, t_len, &e.t, NULL, err);
    if (rc != WEFT_OK)
        return rc;
    g->edges[g->n_edges++] = e;
    g->n_input_edges++;
    return WEFT_OK;
}

weft_err weft_graph_add_edge(weft_graph *g, const char *s, size_t s_len, const char *r,
                             size_t r_len, const char *t, size_t t_len, weft_error *err)
{
    weft_err rc = not_final(g, "add edge", err);
    if (rc != WEFT_OK)
        return rc;
    graph_mark mark = graph_mark_take(g);
    rc = append_edge(g, s, s_len, r, r_len, t, t_len, err);
    if (rc != WEFT_OK)
        graph_mark_restore(g, &mark);
    return rc;
}

/* Column count of a file, fixed by its first data line (@p first_line, 0 before it). */
static weft_err check_columns(const weft_io_reader *rd, const weft_io_record *rec,
                              size_t *n_cols, size_t *first_line, weft_error *err)
{
    if (*first_line == 0) {
        if (rec->n_fields != 2 && rec->n_fields != 3)
            return weft_io_fail(rd, rec->lineno, 0, NULL, err,
                                "expected 2 fields (source, target) or 3 (source, relation, "
                                "target), found %zu%s", rec->n_fields,
                                weft_io_fields_note(rd, rec));
        *n_cols = rec->n_fields;
        *first_line = rec->lineno;
        return WEFT_OK;
    }
    if (rec->n_fields != *n_cols)
        return weft_io_fail(rd, rec->lineno, 0, NULL, err, "expected %zu fields like line %zu, "
                            "found %zu%s", *n_cols, *first_line, rec->n_fields,
                            weft_io_fields_note(rd, rec));
    return WEFT_OK;
}

static weft_err add_record(weft_graph *g, const weft_io_reader *rd, const weft_io_record *rec,
                           weft_error *err)
{
    size_t tf = rec->n_fields;   /* the target is the last field */
    weft_err rc = weft_io_check_name(rd, rec, 1, "source", err);
    if (rc == WEFT_OK && tf == 3)
        rc = weft_io_check_name(rd, rec, 2, "relation", err);
    if (rc == WEFT_OK)
        rc = weft_io_check_name(rd, rec, tf, "target", err);
    if (rc != WEFT_OK)
        return rc;
    const char *r = WEFT_GRAPH_DEFAULT_RELATION;
    size_t r_len = strlen(r);
    if (tf == 3) {
        r = rec->field[1];
        r_len = rec->len[1];
    }
    return append_edge(g, rec->field[0], rec->len[0], r, r_len, rec->field[tf - 1],
                       rec->len[tf - 1], err);
}

/* Open @p path and hand each data line, its column count checked against the first, to
 * @p fn; stops at the first failure. */
static weft_err for_each_record(const char *path,
                                weft_err (*fn)(void *ctx, const weft_io_reader *rd,
                                               const weft_io_record *rec, weft_error *err),
                                void *ctx, weft_error *err)
{
    weft_io_reader *rd = NULL;
    weft_err rc = weft_io_open(path, &rd, err);
    if (rc != WEFT_OK)
        return rc;
    size_t n_cols = 0, first_line = 0;
    for (;;) {
        weft_io_record rec;
        bool eof = false;
        rc = weft_io_next(rd, &rec, &eof, err);
        if (rc != WEFT_OK || eof)
            break;
        rc = check_columns(rd, &rec, &n_cols, &first_line, err);
        if (rc == WEFT_OK)
            rc = fn(ctx, rd, &rec, err);
        if (rc != WEFT_OK)
            break;
    }
    weft_io_close(rd);
    return rc;
}

static weft_err add_record_cb(void *ctx, const weft_io_reader *rd, const weft_io_record *rec,
                              weft_error *err)
{
    return add_record(ctx, rd, rec, err);
}

/* Edges go straight into the graph as lines are read; any failure rolls the graph back to
 * its mark, so the file is added whole or not at all. */
weft_err weft_graph_load_edges(weft_graph *g, const char *path, weft_error *err)
{
    weft_err rc = not_final(g, path, err);
    if (rc != WEFT_OK)
        return rc;
    graph_mark mark = graph_mark_take(g);
    rc = for_each_record(path, add_record_cb, g, err);
    if (rc != WEFT_OK)
        graph_mark_restore(g, &mark);
    return rc;
}

static int cmp_triple(const void *a, const void *b)
{
    const weft_triple *x = a, *y = b;
    if (x->s != y->s)
        return x->s < y->s ? -1 : 1;
    if (x->r != y->r)
        return x->r < y->r ? -1 : 1;
    if (x->t != y->t)
        return x->t < y->t ? -1 : 1;
    return 0;
}

static int cmp_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

/* Sort e[0..m) and squeeze out repeats; returns the number kept. */
static size_t sort_unique(weft_triple *e, size_t m)
{
    qsort(e, m, sizeof *e, cmp_triple);
    size_t u = 0;
    for (size_t i = 0; i < m; i++)
        if (u == 0 || cmp_triple(&e[u - 1], &e[i]) != 0)
            e[u++] = e[i];
    return u;
}

weft_err weft_graph_build_csr(weft_csr *out, const weft_triple *e, size_t m, size_t n_rows,
                              bool by_target, weft_error *err)
{
    for (size_t i = 0; i < m; i++)
        if (e[i].s >= n_rows || e[i].t >= n_rows)
            return weft_error_set(err, WEFT_ERR_INVALID,
                                  "edge %zu (%lu, %lu): node id beyond %zu nodes", i,
                                  (unsigned long)e[i].s, (unsigned long)e[i].t, n_rows);
    if (n_rows == SIZE_MAX)
        return weft_error_set(err, WEFT_ERR_NOMEM, "too many CSR rows");
    weft_csr c = { n_rows, NULL, NULL, NULL };
    c.off = weft_calloc_array(n_rows + 1, sizeof *c.off);
    c.rel = weft_alloc_array(m, sizeof *c.rel);
    c.nbr = weft_alloc_array(m, sizeof *c.nbr);
    uint64_t *keys = weft_alloc_array(m, sizeof *keys);   /* (relation << 32) | neighbour */
    if (!c.off || !c.rel || !c.nbr || !keys) {
        free(keys);
        weft_csr_fini(&c);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for adjacency of %zu edges", m);
    }
    for (size_t i = 0; i < m; i++)
        c.off[(by_target ? e[i].t : e[i].s) + 1]++;
    for (size_t v = 0; v < n_rows; v++)
        c.off[v + 1] += c.off[v];
    /* Fill with off[v] as row v's cursor; afterwards off[v] = end of v, shifted back below. */
    for (size_t i = 0; i < m; i++) {
        uint32_t row = by_target ? e[i].t : e[i].s, other = by_target ? e[i].s : e[i].t;
        keys[c.off[row]++] = ((uint64_t)e[i].r << 32) | other;
    }
    for (size_t v = n_rows; v > 0; v--)
        c.off[v] = c.off[v - 1];
    c.off[0] = 0;
    for (size_t v = 0; v < n_rows; v++)
        if (c.off[v + 1] - c.off[v] > 1)
            qsort(keys + c.off[v], c.off[v + 1] - c.off[v], sizeof *keys, cmp_u64);
    for (size_t i = 0; i < m; i++) {
        c.rel[i] = (uint32_t)(keys[i] >> 32);
        c.nbr[i] = (uint32_t)keys[i];
    }
    free(keys);
    *out = c;
    return WEFT_OK;
}

void weft_csr_fini(weft_csr *c)
{
    if (!c)
        return;
    free(c->off);
    free(c->rel);
    free(c->nbr);
    memset(c, 0, sizeof *c);
}

/*
 * Undirected input is first put in (min, r, max) form so that a-b and b-a meet as
 * duplicates; the reverses of the unique non-loop edges are then appended and the whole
 * re-sorted.
 */
weft_err weft_graph_unique_triples(const weft_triple *in, size_t m, bool is_undirected,
                                   weft_triple **out, size_t *n_out, size_t *n_dup,
                                   weft_error *err)
{
    if (is_undirected && m > SIZE_MAX / 2)
        return weft_error_set(err, WEFT_ERR_NOMEM, "too many edges");
    weft_triple *e = weft_alloc_array(is_undirected ? 2 * m : m, sizeof *e);
    if (!e)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu edges", m);
    if (m)
        memcpy(e, in, m * sizeof *e);
    if (is_undirected)
        for (size_t i = 0; i < m; i++)
            if (e[i].s > e[i].t)
                e[i] = (weft_triple){ e[i].t, e[i].r, e[i].s };
    size_t u = sort_unique(e, m), total = u;
    if (is_undirected)
        for (size_t i = 0; i < u; i++)
            if (e[i].s != e[i].t)
                e[total++] = (weft_triple){ e[i].t, e[i].r, e[i].s };
    if (total != u)
        qsort(e, total, sizeof *e, cmp_triple);
    *out = e;
    *n_out = total;
    if (n_dup)
        *n_dup = m - u;
    return WEFT_OK;
}

/* Everything is built on the side and swapped in at the end, so a failure leaves g as it was. */
weft_err weft_graph_finalize(weft_graph *g, weft_error *err)
{
    weft_err rc = not_final(g, "finalize", err);
    if (rc != WEFT_OK)
        return rc;
    if (g->n_edges == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "empty graph: no edges");
    weft_triple *e = NULL;
    size_t n = 0, n_dup = 0, n_loops = 0;
    rc = weft_graph_unique_triples(g->edges, g->n_edges, (g->flags & WEFT_GRAPH_UNDIRECTED) != 0,
                                   &e, &n, &n_dup, err);
    if (rc != WEFT_OK)
        return rc;
    for (size_t i = 0; i < n; i++)
        n_loops += e[i].s == e[i].t;
    weft_csr out = { 0 }, in = { 0 };
    rc = weft_graph_build_csr(&out, e, n, g->nodes.n, false, err);
    if (rc == WEFT_OK)
        rc = weft_graph_build_csr(&in, e, n, g->nodes.n, true, err);
    if (rc != WEFT_OK) {
        weft_csr_fini(&out);
        free(e);
        return rc;
    }
    free(g->edges);
    g->edges = e;
    g->n_edges = n;
    g->edges_cap = n;
    g->n_duplicates = n_dup;
    g->n_self_loops = n_loops;
    g->out = out;
    g->in = in;
    g->is_final = true;
    return WEFT_OK;
}

/* The part keeps a copy of what the graph gained from the file; if the copy cannot be made,
 * the graph goes back to its mark, so both change together or not at all. */
weft_err weft_graph_load_part(weft_graph *g, const char *path, weft_graph_part *part,
                              weft_error *err)
{
    if (part->is_final)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: the part is already final", path);
    graph_mark mark = graph_mark_take(g);
    weft_err rc = weft_graph_load_edges(g, path, err);
    if (rc != WEFT_OK)
        return rc;
    size_t added = g->n_edges - mark.n_edges;
    if (weft_grow_array((void **)&part->edges, &part->edges_cap, part->n_edges + added,
                        sizeof *part->edges)) {
        graph_mark_restore(g, &mark);
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory for %zu edges", path,
                              added);
    }
    if (added)
        memcpy(part->edges + part->n_edges, g->edges + mark.n_edges, added * sizeof *g->edges);
    part->n_edges += added;
    part->n_input_edges += added;
    return WEFT_OK;
}

weft_err weft_graph_part_finalize(const weft_graph *g, weft_graph_part *part, weft_error *err)
{
    if (!g->is_final || part->is_final)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "a part is finalized once, after its graph");
    bool is_undirected = (g->flags & WEFT_GRAPH_UNDIRECTED) != 0;
    weft_triple *e = NULL;
    size_t n = 0, n_dup = 0;
    weft_err rc = weft_graph_unique_triples(part->edges, part->n_edges, is_undirected, &e, &n,
                                            &n_dup, err);
    if (rc != WEFT_OK)
        return rc;
    free(part->edges);
    part->edges = e;
    part->n_edges = n;
    part->edges_cap = n;
    part->n_duplicates = n_dup;
    part->n_unique = part->n_input_edges - n_dup;
    part->is_undirected = is_undirected;
    part->is_final = true;
    return WEFT_OK;
}

void weft_graph_part_fini(weft_graph_part *part)
{
    if (!part)
        return;
    free(part->edges);
    memset(part, 0, sizeof *part);
}

weft_err weft_graph_part_compare(const weft_graph *g, const weft_graph_part *train,
                                 const weft_graph_part *held, weft_graph_part_overlap *out,
                                 weft_error *err)
{
    if (!train->is_final || !held->is_final)
        return weft_error_set(err, WEFT_ERR_INVALID, "parts are compared once final");
    size_t n_nodes = g->nodes.n, n_rel = g->relations.n;
    bool *node_seen = weft_calloc_array(n_nodes, sizeof *node_seen);
    bool *rel_seen = weft_calloc_array(n_rel, sizeof *rel_seen);
    if (!node_seen || !rel_seen) {
        free(node_seen);
        free(rel_seen);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory comparing parts");
    }
    for (size_t i = 0; i < train->n_edges; i++) {
        node_seen[train->edges[i].s] = node_seen[train->edges[i].t] = true;
        rel_seen[train->edges[i].r] = true;
    }
    weft_graph_part_overlap o = { 0, 0, 0 };
    for (size_t i = 0; i < held->n_edges; i++) {
        const weft_triple *e = &held->edges[i];
        if (held->is_undirected && e->s > e->t)
            continue;   /* the pair is counted at its (min, max) direction */
        if (train->n_edges &&
            bsearch(e, train->edges, train->n_edges, sizeof *e, cmp_triple) != NULL)
            o.n_shared++;
        if (!node_seen[e->s] || !node_seen[e->t])
            o.n_unseen_node++;
        if (!rel_seen[e->r])
            o.n_unseen_relation++;
    }
    free(node_seen);
    free(rel_seen);
    *out = o;
    return WEFT_OK;
}

static weft_err read_record(const weft_io_reader *rd, const weft_io_record *rec,
                            const weft_names_view *nodes, const weft_names_view *relations,
                            weft_triple *out, weft_error *err)
{
    size_t tf = rec->n_fields;   /* the target is the last field */
    weft_triple e;
    weft_err rc = weft_io_find_name(rd, rec, 1, "source", "node", nodes, &e.s, err);
    if (rc == WEFT_OK && tf == 3)
        rc = weft_io_find_name(rd, rec, 2, "relation", "relation", relations, &e.r, err);
    if (rc == WEFT_OK && tf == 2 &&
        !weft_names_find(relations, WEFT_GRAPH_DEFAULT_RELATION,
                         strlen(WEFT_GRAPH_DEFAULT_RELATION), &e.r))
        rc = weft_error_set(err, WEFT_ERR_NOT_FOUND,
                            "%s:%zu: a 2-column line has relation '%s', which is unknown",
                            weft_io_path(rd), rec->lineno, WEFT_GRAPH_DEFAULT_RELATION);
    if (rc == WEFT_OK)
        rc = weft_io_find_name(rd, rec, tf, "target", "node", nodes, &e.t, err);
    if (rc == WEFT_OK)
        *out = e;
    return rc;
}

struct triple_reader {
    const char *path;
    const weft_names_view *nodes, *relations;
    weft_triple *e;
    size_t n, cap;
};

static weft_err read_record_cb(void *ctx, const weft_io_reader *rd, const weft_io_record *rec,
                               weft_error *err)
{
    struct triple_reader *tr = ctx;
    if (weft_grow_array((void **)&tr->e, &tr->cap, tr->n + 1, sizeof *tr->e))
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory for edges", tr->path);
    weft_err rc = read_record(rd, rec, tr->nodes, tr->relations, &tr->e[tr->n], err);
    if (rc == WEFT_OK)
        tr->n++;
    return rc;
}

weft_err weft_graph_read_triples(const char *path, const weft_names_view *nodes,
                                 const weft_names_view *relations, weft_triple **out,
                                 size_t *n_out, weft_error *err)
{
    struct triple_reader tr = { path, nodes, relations, NULL, 0, 0 };
    weft_err rc = for_each_record(path, read_record_cb, &tr, err);
    if (rc != WEFT_OK) {
        free(tr.e);
        return rc;
    }
    if (!tr.e && !(tr.e = weft_alloc_array(0, sizeof *tr.e)))
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", path);
    *out = tr.e;
    *n_out = tr.n;
    return WEFT_OK;
}

weft_err weft_csr_triples_except(const weft_csr *c, const weft_triple *drop, size_t n_drop,
                                 weft_triple **out, size_t *n_out, weft_error *err)
{
    size_t m = c->n_rows ? (size_t)c->off[c->n_rows] : 0;
    weft_triple *e = weft_alloc_array(m, sizeof *e);
    if (!e)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu edges", m);
    /* Rows ascend by source and each row by (relation, neighbour): the walk is in (s, r, t)
     * order, as is @p drop, so one merge finds every triple to leave out. */
    size_t n = 0, d = 0;
    for (size_t v = 0; v < c->n_rows; v++)
        for (uint64_t j = c->off[v]; j < c->off[v + 1]; j++) {
            weft_triple x = { (uint32_t)v, c->rel[j], c->nbr[j] };
            while (d < n_drop && cmp_triple(&drop[d], &x) < 0)
                d++;
            if (d < n_drop && cmp_triple(&drop[d], &x) == 0)
                continue;
            e[n++] = x;
        }
    *out = e;
    *n_out = n;
    return WEFT_OK;
}

/* First index in a[lo..hi), sorted, whose value is >= x (or > x when @p after). */
static uint64_t bound_u32(const uint32_t *a, uint64_t lo, uint64_t hi, uint32_t x, bool after)
{
    while (lo < hi) {
        uint64_t mid = lo + (hi - lo) / 2;
        if (a[mid] < x || (after && a[mid] == x))
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

void weft_csr_range(const weft_csr *c, uint32_t v, uint32_t r, uint64_t *first, size_t *count)
{
    if (v >= c->n_rows) {
        *first = 0;
        *count = 0;
        return;
    }
    uint64_t lo = bound_u32(c->rel, c->off[v], c->off[v + 1], r, false);
    uint64_t hi = bound_u32(c->rel, lo, c->off[v + 1], r, true);
    *first = lo;
    *count = (size_t)(hi - lo);
}

bool weft_csr_has(const weft_csr *c, uint32_t v, uint32_t r, uint32_t u)
{
    uint64_t first = 0;
    size_t count = 0;
    weft_csr_range(c, v, r, &first, &count);
    uint64_t at = bound_u32(c->nbr, first, first + count, u, false);
    return at < first + count && c->nbr[at] == u;
}

static int cmp_size(const void *a, const void *b)
{
    size_t x = *(const size_t *)a, y = *(const size_t *)b;
    return x < y ? -1 : x > y;
}

/* deg[v] = distinct neighbours of v over both rows and all relations, v itself excluded.
 * mark[u] == v + 1 means u was already counted for v, so no clearing between rows. */
static void count_degrees(const weft_graph *g, size_t *deg, uint32_t *mark)
{
    size_t n = g->nodes.n;
    const weft_csr *rows[2] = { &g->out, &g->in };
    for (size_t v = 0; v < n; v++) {
        size_t d = 0;
        for (size_t k = 0; k < 2; k++)
            for (uint64_t j = rows[k]->off[v]; j < rows[k]->off[v + 1]; j++) {
                uint32_t u = rows[k]->nbr[j];
                if (u != v && mark[u] != v + 1) {
                    mark[u] = (uint32_t)v + 1;
                    d++;
                }
            }
        deg[v] = d;
    }
}

static uint32_t uf_find(uint32_t *parent, uint32_t x)
{
    while (parent[x] != x) {
        parent[x] = parent[parent[x]];   /* path halving */
        x = parent[x];
    }
    return x;
}

/* Weakly connected components by union-find (union by size, path halving). */
static void count_components(const weft_graph *g, uint32_t *parent, uint32_t *size,
                             weft_graph_stats *st)
{
    size_t n = g->nodes.n;
    for (size_t v = 0; v < n; v++) {
        parent[v] = (uint32_t)v;
        size[v] = 1;
    }
    for (size_t i = 0; i < g->n_edges; i++) {
        uint32_t a = uf_find(parent, g->edges[i].s), b = uf_find(parent, g->edges[i].t);
        if (a == b)
            continue;
        if (size[a] < size[b]) {
            uint32_t tmp = a;
            a = b;
            b = tmp;
        }
        parent[b] = a;
        size[a] += size[b];
    }
    st->n_components = 0;
    st->largest_component = 0;
    for (size_t v = 0; v < n; v++)
        if (parent[v] == v) {
            st->n_components++;
            if (size[v] > st->largest_component)
                st->largest_component = size[v];
        }
}

static void summarise_degrees(size_t *deg, size_t n, weft_graph_stats *st)
{
    st->n_isolated = 0;
    for (size_t v = 0; v < n; v++)
        st->n_isolated += deg[v] == 0;
    qsort(deg, n, sizeof *deg, cmp_size);
    st->degree_min = n ? deg[0] : 0;
    st->degree_max = n ? deg[n - 1] : 0;
    if (n == 0)
        st->degree_median = 0.0;
    else if (n % 2)
        st->degree_median = (double)deg[n / 2];
    else
        st->degree_median = ((double)deg[n / 2 - 1] + (double)deg[n / 2]) / 2.0;
}

weft_err weft_graph_stats_compute(const weft_graph *g, weft_graph_stats *out, weft_error *err)
{
    if (!g->is_final)
        return weft_error_set(err, WEFT_ERR_INVALID, "graph statistics need a final graph");
    size_t n = g->nodes.n;
    size_t *deg = weft_alloc_array(n, sizeof *deg);
    uint32_t *mark = weft_calloc_array(n, sizeof *mark);
    uint32_t *parent = weft_alloc_array(n, sizeof *parent);
    uint32_t *size = weft_alloc_array(n, sizeof *size);
    weft_graph_stats st = { 0 };
    weft_err rc = WEFT_OK;
    if (!deg || !mark || !parent || !size) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for statistics of %zu nodes", n);
        goto done;
    }
    st.n_nodes = n;
    st.n_relations = g->relations.n;
    /* Undirected: each non-loop edge is stored twice and each loop once. */
    st.n_edges = (g->flags & WEFT_GRAPH_UNDIRECTED) ? (g->n_edges + g->n_self_loops) / 2
                                                    : g->n_edges;
    st.n_input_edges = g->n_input_edges;
    st.n_duplicates = g->n_duplicates;
    st.n_self_loops = g->n_self_loops;
    count_degrees(g, deg, mark);
    summarise_degrees(deg, n, &st);
    count_components(g, parent, size, &st);
    *out = st;
done:
    free(deg);
    free(mark);
    free(parent);
    free(size);
    return rc;
}
