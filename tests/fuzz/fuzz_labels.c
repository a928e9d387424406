/* Fuzz target: label files, `node<TAB>class` (core/labels.c: weft_labels_load), read through
 * core/io.c against the node table of tests/fuzz/fuzz.h. The first byte chooses how the file
 * is stored. Labels that load are split (weft_labels_split) as weft train --holdout would.
 *
 * Checks beside "no crash, no leak": every class id is in range and counted, a loaded file
 * has two classes at least, an error names the file, and the split keeps a training node in
 * every class. */
#include <stdlib.h>
#include <string.h>

#include "fuzz.h"
#include "weft/labels.h"

static void check_labels(const weft_labels *l, const weft_names_view *nodes)
{
    if (l->n_nodes != nodes->n || l->classes.n < 2)
        fuzz_fail("labels of %zu nodes in %zu classes", l->n_nodes, l->classes.n);
    size_t n_labelled = 0;
    for (size_t v = 0; v < l->n_nodes; v++) {
        if (l->y[v] < -1 || l->y[v] >= (int32_t)l->classes.n)
            fuzz_fail("node %zu has class %d of %zu", v, (int)l->y[v], l->classes.n);
        n_labelled += l->y[v] >= 0;
    }
    if (n_labelled != l->n_labelled)
        fuzz_fail("%zu nodes labelled, %zu counted", n_labelled, l->n_labelled);
}

static void check_split(const weft_labels *l)
{
    uint8_t part[64];
    size_t trained[64] = { 0 };
    weft_error err;
    if (l->n_nodes > sizeof part || l->classes.n > sizeof trained / sizeof trained[0])
        fuzz_fail("the node table grew");
    if (weft_labels_split(l, 0.25, 0.25, 7, part, &err) != WEFT_OK)
        fuzz_fail("split: %s", err.msg);
    for (size_t v = 0; v < l->n_nodes; v++) {
        if (part[v] > WEFT_LABEL_TEST || (part[v] != WEFT_LABEL_NONE) != (l->y[v] >= 0))
            fuzz_fail("node %zu is in part %u with class %d", v, part[v], (int)l->y[v]);
        if (part[v] == WEFT_LABEL_TRAIN)
            trained[l->y[v]]++;
    }
    for (size_t c = 0; c < l->classes.n; c++)
        if (trained[c] == 0)
            fuzz_fail("class %zu has no training node", c);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const weft_names_view *nodes = fuzz_nodes();
    fuzz_table_file f = fuzz_write_table(data, size);
    weft_labels l;
    memset(&l, 0, sizeof l);
    weft_error err;
    if (weft_labels_load(f.path, nodes, &l, &err) == WEFT_OK) {
        check_labels(&l, nodes);
        check_split(&l);
        weft_labels_fini(&l);
    } else if (strncmp(err.msg, f.path, strlen(f.path)) != 0) {
        fuzz_fail("the message does not name the file: %s", err.msg);
    }
    return 0;
}
