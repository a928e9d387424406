/* weft: node types (`node<TAB>type`), given at training with `weft train --types FILE` and
 * stored with the node table, so that serving can limit candidates to one type. */
#ifndef WEFT_TYPES_H
#define WEFT_TYPES_H

#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/names.h"

/** of_node[] value of a node without a type. */
#define WEFT_TYPES_NONE UINT32_MAX

/** The types of the nodes of one name table. Release with weft_types_fini(). */
typedef struct weft_types {
    size_t n_nodes;
    weft_names names;    /**< type names in order of first appearance */
    uint32_t *of_node;   /**< (n_nodes): type id, or WEFT_TYPES_NONE */
    size_t n_typed;      /**< nodes with a type */
} weft_types;

/**
 * Read `node<TAB>type` lines from @p path (TSV or CSV, gzip, `#` comments) for the nodes of
 * @p nodes. A node may be given a type once; repeating the same type is allowed. Nodes not
 * listed have none. One type for every node is allowed (unlike labels).
 * @param out  on success, filled; release with weft_types_fini()
 * @return WEFT_OK; WEFT_ERR_NOT_FOUND "path:line: field 1 (node): unknown node 'x'";
 *         WEFT_ERR_PARSE "path:line: ..." (wrong column count, empty or too long name,
 *         "field 2 (type): 'x' was given type 'a' on line L"); WEFT_ERR_INVALID (no line);
 *         WEFT_ERR_LIMIT (more than UINT32_MAX - 1 types); the codes of weft_io_next();
 *         WEFT_ERR_NOMEM. On failure @p out is untouched.
 */
weft_err weft_types_load(const char *path, const weft_names_view *nodes, weft_types *out,
                         weft_error *err);

/** Release @p t and zero it; NULL does nothing. */
void weft_types_fini(weft_types *t);

#endif
