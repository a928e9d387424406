/* Node types (include/weft/types.h). The reader mirrors weft_labels_load(): same file
 * rules, same messages, but any number of types (one included) is fine. */
#include "weft/types.h"

#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/io.h"

void weft_types_fini(weft_types *t)
{
    if (!t)
        return;
    weft_names_fini(&t->names);
    free(t->of_node);
    memset(t, 0, sizeof *t);
}

/* One data line: node id and type id, or a message naming the file, line and field. */
static weft_err read_line(weft_io_reader *rd, const weft_io_record *rec,
                          const weft_names_view *nodes, weft_types *t, uint32_t *line_of,
                          weft_error *err)
{
    uint32_t node, type;
    weft_err rc;
    if (rec->n_fields != 2)
        return weft_io_fail(rd, rec->lineno, 0, NULL, err, "expected 2 fields (node, type), "
                            "found %zu%s", rec->n_fields, weft_io_fields_note(rd, rec));
    if ((rc = weft_io_check_name(rd, rec, 2, "type", err)) != WEFT_OK ||
        (rc = weft_io_find_name(rd, rec, 1, "node", "node", nodes, &node, err)) != WEFT_OK ||
        (rc = weft_names_intern(&t->names, rec->field[1], rec->len[1], &type, NULL, err)) !=
            WEFT_OK)
        return rc;
    if (t->of_node[node] != WEFT_TYPES_NONE && t->of_node[node] != type) {
        weft_names_view tv = weft_names_as_view(&t->names);
        return weft_io_fail(rd, rec->lineno, 2, "type", err, "'%.80s' was given type '%.80s' "
                            "on line %u", rec->field[0],
                            weft_names_get(&tv, t->of_node[node], NULL), line_of[node]);
    }
    if (t->of_node[node] == WEFT_TYPES_NONE) {
        t->of_node[node] = type;
        line_of[node] = rec->lineno > UINT32_MAX ? UINT32_MAX : (uint32_t)rec->lineno;
        t->n_typed++;
    }
    return WEFT_OK;
}

weft_err weft_types_load(const char *path, const weft_names_view *nodes, weft_types *out,
                         weft_error *err)
{
    weft_types t = { 0 };
    weft_io_reader *rd = NULL;
    uint32_t *line_of = NULL;
    weft_err rc = weft_names_init(&t.names, err);
    if (rc != WEFT_OK)
        return rc;
    t.n_nodes = nodes->n;
    t.of_node = weft_alloc_array(nodes->n ? nodes->n : 1, sizeof *t.of_node);
    line_of = weft_calloc_array(nodes->n ? nodes->n : 1, sizeof *line_of);
    if (!t.of_node || !line_of) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for node types");
        goto done;
    }
    for (size_t v = 0; v < nodes->n; v++)
        t.of_node[v] = WEFT_TYPES_NONE;
    if ((rc = weft_io_open(path, &rd, err)) != WEFT_OK)
        goto done;
    for (;;) {
        weft_io_record rec;
        bool eof;
        if ((rc = weft_io_next(rd, &rec, &eof, err)) != WEFT_OK || eof)
            break;
        if ((rc = read_line(rd, &rec, nodes, &t, line_of, err)) != WEFT_OK)
            break;
    }
    if (rc == WEFT_OK && t.n_typed == 0)
        rc = weft_error_set(err, WEFT_ERR_INVALID, "%s: no node type", path);
done:
    free(line_of);
    weft_io_close(rd);
    if (rc == WEFT_OK)
        *out = t;
    else
        weft_types_fini(&t);
    return rc;
}
