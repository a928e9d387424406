/* Seeded holdout splits (include/weft/split.h).
 * A "unit" is one edge, or in an undirected graph one edge with its reverse. Units are
 * visited in the order of a seeded hash of their names; a unit is held out when every node
 * it touches keeps at least one incident edge in train and its relation keeps at least one
 * edge.
 * The order comes from the names, not from the edges' places in the graph, so an edge keeps
 * its place when the graph around it changes (edges added or dropped, nodes in another
 * order): with the same seed, the split of a grown graph holds out nearly the same old
 * edges, and a model warm-started from the earlier split has not trained on them. (A few
 * move: units added ahead of the last one held out push it out, and a node that gains edges
 * may let one of its edges be held out that could not be before.) */
#include "weft/split.h"

#include <math.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/names.h"

enum { PART_TRAIN = 0, PART_VALID = 1, PART_TEST = 2 };

/* Index of the reverse of edge i (t, r, s) in the sorted edge list, or SIZE_MAX. */
static size_t find_reverse(const weft_graph *g, size_t i)
{
    weft_triple key = { g->edges[i].t, g->edges[i].r, g->edges[i].s };
    size_t lo = 0, hi = g->n_edges;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        const weft_triple *m = &g->edges[mid];
        bool less = m->s != key.s ? m->s < key.s : m->r != key.r ? m->r < key.r : m->t < key.t;
        if (less)
            lo = mid + 1;
        else
            hi = mid;
    }
    if (lo < g->n_edges && !memcmp(&g->edges[lo], &key, sizeof key))
        return lo;
    return SIZE_MAX;
}

static weft_err collect(const weft_graph *g, const unsigned char *part, weft_split *out,
                        weft_error *err)
{
    size_t n[3] = { 0, 0, 0 };
    for (size_t i = 0; i < g->n_edges; i++)
        n[part[i]]++;
    weft_triple *arr[3] = { weft_alloc_array(n[0], sizeof(weft_triple)),
                            weft_alloc_array(n[1], sizeof(weft_triple)),
                            weft_alloc_array(n[2], sizeof(weft_triple)) };
    if (!arr[0] || !arr[1] || !arr[2]) {
        free(arr[0]);
        free(arr[1]);
        free(arr[2]);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory splitting %zu edges",
                              g->n_edges);
    }
    size_t fill[3] = { 0, 0, 0 };
    for (size_t i = 0; i < g->n_edges; i++)
        arr[part[i]][fill[part[i]]++] = g->edges[i];
    out->train = arr[0];
    out->valid = arr[1];
    out->test = arr[2];
    out->n_train = n[0];
    out->n_valid = n[1];
    out->n_test = n[2];
    return WEFT_OK;
}

/* The splitmix64 finaliser: every bit of @p x reaches every bit of the result. */
static uint64_t mix64(uint64_t x)
{
    x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ull;
    x = (x ^ (x >> 27)) * 0x94d049bb133111ebull;
    return x ^ (x >> 31);
}

/* A unit's place in the order: a hash of @p seed and the unit's names (source, relation,
 * target; undirected, the two ends in byte order), each name followed by a 0 byte. */
static uint64_t unit_key(const weft_names_view *nodes, const weft_names_view *rels,
                         const weft_triple *e, bool undirected, uint64_t seed)
{
    size_t ls, lr, lt;
    const char *s = weft_names_get(nodes, e->s, &ls), *t = weft_names_get(nodes, e->t, &lt);
    const char *r = weft_names_get(rels, e->r, &lr);
    if (undirected) {
        int c = memcmp(s, t, ls < lt ? ls : lt);
        if (c > 0 || (c == 0 && ls > lt)) {
            const char *x = s;
            size_t lx = ls;
            s = t;
            ls = lt;
            t = x;
            lt = lx;
        }
    }
    uint64_t h = weft_names_hash_more(weft_names_hash(s, ls), "", 1);   /* "": its 0 byte */
    h = weft_names_hash_more(weft_names_hash_more(h, r, lr), "", 1);
    h = weft_names_hash_more(weft_names_hash_more(h, t, lt), "", 1);
    return mix64(h ^ mix64(seed));
}

struct keyed_unit {
    uint64_t key;
    size_t edge;
};

static int cmp_keyed(const void *a, const void *b)
{
    const struct keyed_unit *x = a, *y = b;
    if (x->key != y->key)
        return x->key < y->key ? -1 : 1;
    return (x->edge > y->edge) - (x->edge < y->edge);
}

weft_err weft_split_holdout(const weft_graph *g, double frac_valid, double frac_test,
                            uint64_t seed, weft_split *out, weft_error *err)
{
    if (!(frac_valid >= 0) || !(frac_test >= 0) || frac_valid + frac_test >= 1.0)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "holdout fractions %g and %g: each >= 0, together below 1",
                              frac_valid, frac_test);
    bool undirected = g->flags & WEFT_GRAPH_UNDIRECTED;
    size_t n_nodes = g->nodes.n, n_rel = g->relations.n, m = g->n_edges;
    size_t *deg = weft_calloc_array(n_nodes, sizeof *deg);
    size_t *rel_count = weft_calloc_array(n_rel, sizeof *rel_count);
    struct keyed_unit *units = weft_alloc_array(m ? m : 1, sizeof *units);
    size_t *partner = weft_alloc_array(m, sizeof *partner);
    unsigned char *part = weft_calloc_array(m, 1);
    weft_err rc = WEFT_OK;
    if (!deg || !rel_count || !units || !partner || !part) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory splitting %zu edges", m);
        goto done;
    }
    /* Units: every edge, or in an undirected graph the edges with s <= t (the reverse rides
     * along). Degrees count incident edge entries, so a self-loop counts twice. */
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_names_view rels = weft_names_as_view(&g->relations);
    size_t n_units = 0;
    for (size_t i = 0; i < m; i++) {
        const weft_triple *e = &g->edges[i];
        deg[e->s]++;
        deg[e->t]++;
        rel_count[e->r]++;
        partner[i] = SIZE_MAX;
        if (!undirected || e->s <= e->t) {
            if (undirected && e->s != e->t)
                partner[i] = find_reverse(g, i);
            uint64_t key = unit_key(&nodes, &rels, e, undirected, seed);
            units[n_units++] = (struct keyed_unit){ key, i };
        }
    }
    qsort(units, n_units, sizeof *units, cmp_keyed);
    size_t want[3] = { 0, (size_t)llround(frac_valid * (double)n_units),
                       (size_t)llround(frac_test * (double)n_units) };
    out->n_wanted = want[PART_VALID] + want[PART_TEST];
    size_t got[3] = { 0, 0, 0 };
    int target = want[PART_TEST] ? PART_TEST : PART_VALID;
    for (size_t u = 0; u < n_units && (got[1] < want[1] || got[2] < want[2]); u++) {
        size_t i = units[u].edge, j = partner[i];
        const weft_triple *e = &g->edges[i];
        size_t copies = j == SIZE_MAX ? 1 : 2;   /* entries removed per endpoint */
        size_t need_s = e->s == e->t ? 2 * copies : copies;
        if (deg[e->s] <= need_s || deg[e->t] <= need_s || rel_count[e->r] <= copies)
            continue;
        deg[e->s] -= copies;
        deg[e->t] -= copies;
        rel_count[e->r] -= copies;
        part[i] = (unsigned char)target;
        if (j != SIZE_MAX)
            part[j] = (unsigned char)target;
        got[target]++;
        /* Fill test first, then valid, so a shortfall lands on validation. */
        if (got[target] >= want[target])
            target = got[PART_TEST] < want[PART_TEST] ? PART_TEST : PART_VALID;
    }
    rc = collect(g, part, out, err);
done:
    free(deg);
    free(rel_count);
    free(units);
    free(partner);
    free(part);
    return rc;
}

void weft_split_fini(weft_split *s)
{
    if (!s)
        return;
    free(s->train);
    free(s->valid);
    free(s->test);
    memset(s, 0, sizeof *s);
}
