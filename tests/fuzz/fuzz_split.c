/* Fuzz target: split files, `node<TAB>train|valid|test` (core/labels.c:
 * weft_labels_read_split), read through core/io.c against the node table of
 * tests/fuzz/fuzz.h and fixed labels for some of its nodes. The first byte chooses how the
 * file is stored.
 *
 * Checks beside "no crash, no leak": a split that loads has a training node, puts only
 * labelled nodes in a part, and an error names the file. */
#include <stdlib.h>
#include <string.h>

#include "fuzz.h"
#include "weft/labels.h"

/* "f", "g", "h" and "n,1" stay unlabelled, so that "has no label" can be reached. */
static const char labels_text[] =
    "a\tx\nb\ty\nc\tx\nd\ty\ne\tx\nnode 1\ty\nx/y\tx\n\xc3\xa9\ty\n\"q\"\tx\n";

static weft_labels labels;

static void free_labels(void)
{
    weft_labels_fini(&labels);
}

static const weft_labels *fixed_labels(void)
{
    static bool is_loaded;
    if (is_loaded)
        return &labels;
    const char *path = fuzz_write("labels.tsv", (const uint8_t *)labels_text,
                                  sizeof labels_text - 1, false);
    weft_error err;
    if (weft_labels_load(path, fuzz_nodes(), &labels, &err) != WEFT_OK)
        fuzz_fail("%s", err.msg);
    atexit(free_labels);
    is_loaded = true;
    return &labels;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const weft_names_view *nodes = fuzz_nodes();
    const weft_labels *l = fixed_labels();
    fuzz_table_file f = fuzz_write_table(data, size);
    uint8_t part[64];
    if (nodes->n > sizeof part)
        fuzz_fail("the node table grew");
    weft_error err;
    if (weft_labels_read_split(f.path, nodes, l, part, &err) != WEFT_OK) {
        if (strncmp(err.msg, f.path, strlen(f.path)) != 0)
            fuzz_fail("the message does not name the file: %s", err.msg);
        return 0;
    }
    size_t n_train = 0;
    for (size_t v = 0; v < nodes->n; v++) {
        if (part[v] > WEFT_LABEL_TEST || (part[v] != WEFT_LABEL_NONE && l->y[v] < 0))
            fuzz_fail("node %zu is in part %u with class %d", v, part[v], (int)l->y[v]);
        n_train += part[v] == WEFT_LABEL_TRAIN;
    }
    if (n_train == 0)
        fuzz_fail("a split without a training node loaded");
    return 0;
}
