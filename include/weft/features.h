/* weft: sparse node features read from a file, one row per node of a name table. */
#ifndef WEFT_FEATURES_H
#define WEFT_FEATURES_H

#include <stdbool.h>
#include <stddef.h>

#include "weft/error.h"
#include "weft/names.h"
#include "weft/sparse.h"

/** Largest feature index accepted (so a typo cannot ask for a huge weight matrix). */
#define WEFT_FEATURES_MAX_INDEX ((1u << 24) - 1)

/** What a features file held. */
typedef struct weft_features_stats {
    size_t n_lines;        /**< data lines, one per node */
    size_t n_missing;      /**< nodes of the table without a line: their rows are zero */
    size_t n_empty;        /**< lines listing no feature */
} weft_features_stats;

/**
 * Read node features from @p path: one line per node, `node<TAB>index[:value] index[:value]
 * ...` (indices 0-based, separated by spaces or further tabs, value 1 when absent), TSV or CSV,
 * gzip allowed, `#` comments. The result has one row per node of @p nodes (rows of nodes
 * without a line are zero) and max index + 1 columns. With @p row_normalise each row is
 * divided by its sum (a row summing to 0 stays as it is), as Kipf & Welling 2017 do.
 * @param out    on success, the matrix (release with weft_sparse_fini())
 * @param stats  may be NULL
 * @return WEFT_OK; WEFT_ERR_NOT_FOUND "path:line: field 1 (node): unknown node 'x'";
 *         WEFT_ERR_PARSE "path:line: field N (feature): reason" (not an index, index over
 *         WEFT_FEATURES_MAX_INDEX, value not finite, an index twice in a line, with
 *         @p row_normalise a row whose sum is too near 0 to divide by) or "path:line:
 *         field 1 (node): 'x' already has features on line L"; the codes of weft_io_next();
 *         WEFT_ERR_INVALID (no data line); WEFT_ERR_NOMEM
 */
weft_err weft_features_load(const char *path, const weft_names_view *nodes, bool row_normalise,
                            weft_sparse *out, weft_features_stats *stats, weft_error *err);

#endif
