/* weft: node labels (one class per node, many nodes unlabelled) and their split into
 * training, validation and test nodes. */
#ifndef WEFT_LABELS_H
#define WEFT_LABELS_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"
#include "weft/names.h"

/** Which part a node's label belongs to. */
typedef enum weft_label_part {
    WEFT_LABEL_NONE = 0,    /**< unlabelled, or labelled but left out of the split */
    WEFT_LABEL_TRAIN = 1,
    WEFT_LABEL_VALID = 2,
    WEFT_LABEL_TEST = 3
} weft_label_part;

/** "train", "valid", "test" ("none" for WEFT_LABEL_NONE). */
const char *weft_labels_part_name(weft_label_part p);

/** The labels of the nodes of one name table. Release with weft_labels_fini(). */
typedef struct weft_labels {
    size_t n_nodes;
    weft_names classes;     /**< class names in order of first appearance */
    int32_t *y;             /**< (n_nodes): class id, or -1 when unlabelled */
    size_t n_labelled;
} weft_labels;

/**
 * Read `node<TAB>class` lines from @p path (TSV or CSV, gzip, `#` comments) for the nodes of
 * @p nodes. A node may be labelled once; repeating the same class is allowed.
 * @return WEFT_OK; WEFT_ERR_NOT_FOUND "path:line: field 1 (node): unknown node 'x'";
 *         WEFT_ERR_PARSE "path:line: ..." (wrong column count, empty name, "field 2 (class):
 *         'x' was labelled 'a' on line L"); WEFT_ERR_INVALID (no label, or one class only);
 *         the codes of weft_io_next(); WEFT_ERR_NOMEM
 */
weft_err weft_labels_load(const char *path, const weft_names_view *nodes, weft_labels *out,
                          weft_error *err);

/** Release @p l and zero it; NULL does nothing. */
void weft_labels_fini(weft_labels *l);

/**
 * Read a split, `node<TAB>train|valid|test`, from @p path into @p part (n_nodes entries,
 * first set to WEFT_LABEL_NONE). Every node listed must be labelled in @p l; labelled nodes
 * not listed take no part.
 * @return WEFT_OK; WEFT_ERR_NOT_FOUND (unknown node, with file and line); WEFT_ERR_PARSE
 *         (a part other than train|valid|test, a node listed twice, "node 'x' has no
 *         label"); WEFT_ERR_INVALID (no training node); the codes of weft_io_next()
 */
weft_err weft_labels_read_split(const char *path, const weft_names_view *nodes,
                                const weft_labels *l, uint8_t *part, weft_error *err);

/**
 * A seeded split stratified by class: in each class, a shuffled share @p frac_valid of the
 * labelled nodes goes to validation and @p frac_test to testing (rounded to the nearest
 * count), keeping at least one training node per class.
 * @param part  out, n_nodes entries (weft_label_part)
 * @return WEFT_OK, WEFT_ERR_INVALID (fractions out of range), WEFT_ERR_NOMEM
 */
weft_err weft_labels_split(const weft_labels *l, double frac_valid, double frac_test,
                           uint64_t seed, uint8_t *part, weft_error *err);

#endif
