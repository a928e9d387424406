/* weft: seeded holdout splits of a graph's edges for validation and testing. */
#ifndef WEFT_SPLIT_H
#define WEFT_SPLIT_H

#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/graph.h"

/** Edges of a split; each array is the caller's to release with weft_split_fini(). */
typedef struct weft_split {
    weft_triple *train, *valid, *test;
    size_t n_train, n_valid, n_test;
    size_t n_wanted;   /**< held-out units asked for; more than given when too few were eligible */
} weft_split;

/**
 * Hold out about @p frac_valid and @p frac_test of the edges of final graph @p g, chosen
 * in the order of a hash of @p seed and each edge's names (as good as uniformly at random,
 * and stable: the same edge keeps its place when the graph changes around it, so a grown
 * graph's split holds out nearly the same old edges; see core/split.c), such that every
 * node and every relation of a held-out edge keeps at least one edge in train (so nothing is
 * judged on a node it never saw).
 * In an undirected graph an edge and its reverse are held out together (no leak through the
 * symmetric copy). Edges keep their sorted order within each part.
 * @return WEFT_OK, WEFT_ERR_INVALID (fractions < 0 or summing to >= 1), WEFT_ERR_NOMEM
 * Same graph and seed, same split.
 */
weft_err weft_split_holdout(const weft_graph *g, double frac_valid, double frac_test,
                            uint64_t seed, weft_split *out, weft_error *err);

/** Release @p s's arrays; NULL does nothing. */
void weft_split_fini(weft_split *s);

#endif
