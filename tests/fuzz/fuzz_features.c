/* Fuzz target: feature files, `node<TAB>index[:value] ...` (core/features.c:
 * weft_features_load), read through core/io.c against the node table of tests/fuzz/fuzz.h.
 * The first byte chooses how the file is stored; its switch bit turns row normalisation off
 * (weft train --raw-features).
 *
 * Checks beside "no crash, no leak": the matrix that loads is well formed (a row per node,
 * columns rising and in range, below the index limit) and holds finite values only, since
 * the file's values must be; an error names the file. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "fuzz.h"
#include "weft/features.h"

static void check_matrix(const weft_sparse *x, const weft_features_stats *st,
                         const weft_names_view *nodes)
{
    if (x->n_rows != nodes->n || x->n_cols == 0 ||
        x->n_cols > (size_t)WEFT_FEATURES_MAX_INDEX + 1 || x->off[0] != 0)
        fuzz_fail("a %zu x %zu matrix for %zu nodes", x->n_rows, x->n_cols, nodes->n);
    for (size_t v = 0; v < x->n_rows; v++) {
        if (x->off[v] > x->off[v + 1])
            fuzz_fail("row offsets fall at row %zu", v);
        for (uint64_t k = x->off[v]; k < x->off[v + 1]; k++) {
            if (x->col[k] >= x->n_cols || (k > x->off[v] && x->col[k] <= x->col[k - 1]))
                fuzz_fail("row %zu: column %u out of order or range", v, (unsigned)x->col[k]);
            if (!isfinite(x->val[k]))
                fuzz_fail("row %zu, column %u: value %g is not finite", v, (unsigned)x->col[k],
                          (double)x->val[k]);
        }
    }
    if (st->n_lines == 0 || st->n_missing + st->n_lines != nodes->n ||
        st->n_empty > st->n_lines)
        fuzz_fail("%zu lines, %zu nodes missing, %zu empty, for %zu nodes", st->n_lines,
                  st->n_missing, st->n_empty, nodes->n);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const weft_names_view *nodes = fuzz_nodes();
    fuzz_table_file f = fuzz_write_table(data, size);
    weft_sparse x;
    memset(&x, 0, sizeof x);
    weft_features_stats st;
    weft_error err;
    if (weft_features_load(f.path, nodes, !f.is_switched, &x, &st, &err) == WEFT_OK) {
        check_matrix(&x, &st, nodes);
        weft_sparse_fini(&x);
    } else if (strncmp(err.msg, f.path, strlen(f.path)) != 0) {
        fuzz_fail("the message does not name the file: %s", err.msg);
    }
    return 0;
}
