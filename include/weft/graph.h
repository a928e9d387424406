/* weft: a typed directed graph built from edge files, with CSR adjacency by direction. */
#ifndef WEFT_GRAPH_H
#define WEFT_GRAPH_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/names.h"

/** Relation name given to the edges of 2-column files. */
#define WEFT_GRAPH_DEFAULT_RELATION "link"

/** Flags for weft_graph_new(). */
enum {
    /** Each edge a-b also stands for b-a: both directions are materialised by finalize, and
     *  a-b and b-a in the input count as one edge (the second as a duplicate). */
    WEFT_GRAPH_UNDIRECTED = 1u << 0
};

/** One edge: source, relation, target ids. */
typedef struct weft_triple {
    uint32_t s, r, t;
} weft_triple;

/**
 * Compressed sparse rows over nodes. Row v holds v's neighbours in one direction, sorted by
 * (relation, neighbour): entries off[v] .. off[v+1]-1 of rel[] and nbr[].
 */
typedef struct weft_csr {
    size_t n_rows;
    uint64_t *off; /**< n_rows + 1 */
    uint32_t *rel; /**< off[n_rows] */
    uint32_t *nbr; /**< off[n_rows] */
} weft_csr;

/**
 * The graph. Fields are readable by callers; change it only through the functions.
 * Before weft_graph_finalize() only the name tables and the raw edge list are meaningful.
 */
typedef struct weft_graph {
    unsigned flags;
    weft_names nodes;
    weft_names relations;
    weft_triple *edges;   /**< after finalize: unique, sorted by (s, r, t); both directions
                               when undirected */
    size_t n_edges;
    size_t edges_cap;
    size_t n_input_edges; /**< edges handed in: data lines of all files, plus
                               weft_graph_add_edge() calls */
    size_t n_duplicates;  /**< input edges dropped as duplicates */
    size_t n_self_loops;  /**< unique edges with s == t */
    bool is_final;
    weft_csr out;         /**< after finalize: rows by source, neighbours are targets */
    weft_csr in;          /**< after finalize: rows by target, neighbours are sources */
} weft_graph;

/**
 * New empty graph. @param flags 0 or WEFT_GRAPH_UNDIRECTED
 * @return WEFT_OK, WEFT_ERR_NOMEM; free with weft_graph_free()
 */
weft_err weft_graph_new(unsigned flags, weft_graph **out, weft_error *err);
/** Free @p g; NULL does nothing. */
void weft_graph_free(weft_graph *g);

/**
 * Add the edges of file @p path: TSV or CSV (weft_io_open), 2 columns (source, target; the
 * relation is WEFT_GRAPH_DEFAULT_RELATION) or 3 (source, relation, target). Every data line
 * of a file must have the column count of its first data line.
 * All or nothing: on any error the graph is exactly as before the call.
 * @return WEFT_OK; WEFT_ERR_IO (unreadable, corrupt gzip); WEFT_ERR_PARSE "path:line: field N
 *         (source): reason" for an empty field or a name over WEFT_IO_MAX_NAME bytes, and
 *         "path:line: reason" for a wrong column count, invalid UTF-8 or a NUL byte;
 *         WEFT_ERR_INVALID if @p g is already final; WEFT_ERR_NOMEM, WEFT_ERR_LIMIT
 */
weft_err weft_graph_load_edges(weft_graph *g, const char *path, weft_error *err);

/**
 * Add one edge by names (copied). Used by loaders and tests.
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_LIMIT, WEFT_ERR_INVALID (graph already final)
 */
weft_err weft_graph_add_edge(weft_graph *g, const char *s, size_t s_len, const char *r,
                             size_t r_len, const char *t, size_t t_len, weft_error *err);

/**
 * Sort, drop and count duplicates, add reverse edges when undirected, count self-loops,
 * and build the out and in CSR. Call once after loading.
 * @return WEFT_OK, WEFT_ERR_INVALID ("empty graph: no edges" / already final), WEFT_ERR_NOMEM
 */
weft_err weft_graph_finalize(weft_graph *g, weft_error *err);

/**
 * Build CSR rows over @p n_rows nodes from @p m triples, keyed by source (@p by_target false)
 * or by target (true), each row sorted by (relation, neighbour). Duplicates are kept.
 * @param out  filled on success; release with weft_csr_fini()
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (an id >= n_rows)
 * Cost: O(m log(max degree) + n_rows).
 */
weft_err weft_graph_build_csr(weft_csr *out, const weft_triple *e, size_t m, size_t n_rows,
                              bool by_target, weft_error *err);

/** Release the arrays of @p c (the struct itself is the caller's); NULL does nothing. */
void weft_csr_fini(weft_csr *c);

/**
 * Neighbours of row @p v under relation @p r in @p c: sets *@p first and *@p count so that
 * c->nbr[*first .. *first + *count) are they, sorted ascending. Binary search, O(log degree).
 */
void weft_csr_range(const weft_csr *c, uint32_t v, uint32_t r, uint64_t *first, size_t *count);

/** True when @p c holds (v, r, u). O(log degree). */
bool weft_csr_has(const weft_csr *c, uint32_t v, uint32_t r, uint32_t u);

/**
 * Unique triples of @p e[0..m) in a new array sorted by (s, r, t): repeats are dropped; when
 * @p is_undirected, a-b and b-a are one edge and both directions are returned (a self-loop
 * once), the form weft_graph_finalize() gives a graph's edges.
 * @param out    on success, the new array (caller frees) of *@p n_out triples
 * @param n_dup  out, may be NULL: input triples dropped as repeats
 * @return WEFT_OK, WEFT_ERR_NOMEM. Cost: O(m log m).
 */
weft_err weft_graph_unique_triples(const weft_triple *e, size_t m, bool is_undirected,
                                   weft_triple **out, size_t *n_out, size_t *n_dup,
                                   weft_error *err);

/**
 * The edges of some input files kept apart as one part (train, valid or test) while they
 * are also loaded into a graph, so that one graph holds every name and every known edge and
 * the parts stay separate lists of its ids. Start from a zeroed struct, add files with
 * weft_graph_load_part(), then weft_graph_part_finalize(); release with
 * weft_graph_part_fini().
 */
typedef struct weft_graph_part {
    weft_triple *edges;    /**< as read until finalized; then unique, sorted by (s, r, t), both
                                directions when the graph is undirected */
    size_t n_edges;
    size_t edges_cap;
    size_t n_input_edges;  /**< data lines read into the part */
    size_t n_duplicates;   /**< after finalize: input edges that repeat an earlier one of the
                                same part (a-b and b-a are one edge when undirected) */
    size_t n_unique;       /**< after finalize: distinct edges (pairs when undirected) */
    bool is_undirected;    /**< after finalize: copied from the graph */
    bool is_final;
} weft_graph_part;

/**
 * weft_graph_load_edges() of @p path into @p g, also appending the file's edges to @p part.
 * All or nothing: on any error @p g and @p part are exactly as before the call.
 * @return the codes of weft_graph_load_edges(); WEFT_ERR_INVALID when @p part is final
 */
weft_err weft_graph_load_part(weft_graph *g, const char *path, weft_graph_part *part,
                              weft_error *err);

/**
 * Sort @p part, drop and count its repeats and, when final graph @p g is undirected, add the
 * reverse edges (weft_graph_unique_triples()). Call once, after weft_graph_finalize(g).
 * @return WEFT_OK, WEFT_ERR_INVALID (graph not final, part already final), WEFT_ERR_NOMEM
 */
weft_err weft_graph_part_finalize(const weft_graph *g, weft_graph_part *part, weft_error *err);

/** Release @p part's array and zero it; NULL does nothing. */
void weft_graph_part_fini(weft_graph_part *part);

/** How a held-out part relates to the training part (common practice: check for leaks). */
typedef struct weft_graph_part_overlap {
    size_t n_shared;             /**< edges of held also in train (a leak); pairs when undirected */
    size_t n_unseen_node;        /**< edges of held with an end no train edge touches */
    size_t n_unseen_relation;    /**< edges of held whose relation no train edge has */
} weft_graph_part_overlap;

/**
 * Compare final parts @p held and @p train of final graph @p g. Undirected edges count once
 * per pair.
 * @return WEFT_OK, WEFT_ERR_INVALID (a part not final), WEFT_ERR_NOMEM.
 * Cost: O(n_nodes + n_relations + train + held * log train).
 */
weft_err weft_graph_part_compare(const weft_graph *g, const weft_graph_part *train,
                                 const weft_graph_part *held, weft_graph_part_overlap *out,
                                 weft_error *err);

/**
 * Read the edges of file @p path (the format of weft_graph_load_edges(); a 2-column file
 * means relation WEFT_GRAPH_DEFAULT_RELATION) as ids of the existing name tables @p nodes and
 * @p relations, adding no name: for example a test file against a stored snapshot.
 * @param out  on success, a new array (caller frees) of *@p n_out triples in file order
 * @return WEFT_OK; WEFT_ERR_NOT_FOUND "path:line: field N (source|relation|target): unknown
 *         node|relation 'name'"; the WEFT_ERR_IO and WEFT_ERR_PARSE of
 *         weft_graph_load_edges(); WEFT_ERR_NOMEM
 */
weft_err weft_graph_read_triples(const char *path, const weft_names_view *nodes,
                                 const weft_names_view *relations, weft_triple **out,
                                 size_t *n_out, weft_error *err);

/**
 * Every triple of @p c (rows keyed by source, as a graph's out CSR) that is not in @p drop
 * (@p n_drop triples sorted by (s, r, t), unique), in (s, r, t) order.
 * @param out  on success, a new array (caller frees) of *@p n_out triples
 * @return WEFT_OK, WEFT_ERR_NOMEM. Cost: O(edges + n_drop).
 */
weft_err weft_csr_triples_except(const weft_csr *c, const weft_triple *drop, size_t n_drop,
                                 weft_triple **out, size_t *n_out, weft_error *err);

/** Summary statistics of a final graph, as `weft inspect` prints them. */
typedef struct weft_graph_stats {
    size_t n_nodes, n_edges, n_relations;
    size_t n_input_edges, n_duplicates, n_self_loops;
    size_t degree_min, degree_max;
    double degree_median;   /**< degree = distinct neighbours in either direction, self excluded */
    size_t n_isolated;      /**< nodes whose only edges are self-loops */
    size_t n_components;    /**< weakly connected components */
    size_t largest_component;
} weft_graph_stats;

/**
 * Compute @p out for final graph @p g. For an undirected graph n_edges counts each edge once.
 * @return WEFT_OK, WEFT_ERR_INVALID (not final), WEFT_ERR_NOMEM. Cost: O(n + m log m).
 */
weft_err weft_graph_stats_compute(const weft_graph *g, weft_graph_stats *out, weft_error *err);

#endif
