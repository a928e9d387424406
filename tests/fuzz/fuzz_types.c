/* Fuzz target: node type files, `node<TAB>type` (core/types.c: weft_types_load), read
 * through core/io.c against the node table of tests/fuzz/fuzz.h. The first byte chooses how
 * the file is stored.
 *
 * Checks beside "no crash, no leak": every type id is in range and counted, a loaded file
 * types a node at least, and an error names the file. */
#include <stdlib.h>
#include <string.h>

#include "fuzz.h"
#include "weft/types.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const weft_names_view *nodes = fuzz_nodes();
    fuzz_table_file f = fuzz_write_table(data, size);
    weft_types t;
    memset(&t, 0, sizeof t);
    weft_error err;
    if (weft_types_load(f.path, nodes, &t, &err) != WEFT_OK) {
        if (strncmp(err.msg, f.path, strlen(f.path)) != 0)
            fuzz_fail("the message does not name the file: %s", err.msg);
        return 0;
    }
    size_t n_typed = 0;
    for (size_t v = 0; v < t.n_nodes; v++) {
        if (t.of_node[v] != WEFT_TYPES_NONE && t.of_node[v] >= t.names.n)
            fuzz_fail("node %zu has type %u of %zu", v, (unsigned)t.of_node[v], t.names.n);
        n_typed += t.of_node[v] != WEFT_TYPES_NONE;
    }
    if (t.n_nodes != nodes->n || n_typed != t.n_typed || n_typed == 0)
        fuzz_fail("%zu of %zu nodes typed, %zu counted", n_typed, t.n_nodes, t.n_typed);
    weft_types_fini(&t);
    return 0;
}
