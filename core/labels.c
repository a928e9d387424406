/* Node labels and their split (include/weft/labels.h). */
#include "weft/labels.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/io.h"
#include "weft/rng.h"

static const char *const part_names[] = { "none", "train", "valid", "test" };

const char *weft_labels_part_name(weft_label_part p)
{
    return (unsigned)p < 4 ? part_names[p] : NULL;
}

void weft_labels_fini(weft_labels *l)
{
    if (!l)
        return;
    weft_names_fini(&l->classes);
    free(l->y);
    memset(l, 0, sizeof *l);
}

static weft_err two_fields(const weft_io_reader *rd, const weft_io_record *rec, const char *what,
                           weft_error *err)
{
    if (rec->n_fields != 2)
        return weft_io_fail(rd, rec->lineno, 0, NULL, err, "expected 2 fields (node, %s), "
                            "found %zu%s", what, rec->n_fields,
                            weft_io_fields_note(rd, rec));
    return weft_io_check_name(rd, rec, 2, what, err);
}

weft_err weft_labels_load(const char *path, const weft_names_view *nodes, weft_labels *out,
                          weft_error *err)
{
    weft_labels l = { 0 };
    weft_io_reader *rd = NULL;
    uint32_t *line_of = NULL;
    weft_err rc = weft_names_init(&l.classes, err);
    if (rc != WEFT_OK)
        return rc;
    l.n_nodes = nodes->n;
    l.y = weft_alloc_array(nodes->n ? nodes->n : 1, sizeof *l.y);
    line_of = weft_calloc_array(nodes->n ? nodes->n : 1, sizeof *line_of);
    if (!l.y || !line_of) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for labels");
        goto done;
    }
    for (size_t v = 0; v < nodes->n; v++)
        l.y[v] = -1;
    if ((rc = weft_io_open(path, &rd, err)) != WEFT_OK)
        goto done;
    for (;;) {
        weft_io_record rec;
        bool eof;
        uint32_t node, cls;
        if ((rc = weft_io_next(rd, &rec, &eof, err)) != WEFT_OK)
            goto done;
        if (eof)
            break;
        if ((rc = two_fields(rd, &rec, "class", err)) != WEFT_OK ||
            (rc = weft_io_find_name(rd, &rec, 1, "node", "node", nodes, &node, err)) != WEFT_OK ||
            (rc = weft_names_intern(&l.classes, rec.field[1], rec.len[1], &cls, NULL, err)) !=
                WEFT_OK)
            goto done;
        if (cls > INT32_MAX) {
            rc = weft_io_fail(rd, rec.lineno, 2, "class", err, "too many classes");
            goto done;
        }
        if (l.y[node] >= 0 && l.y[node] != (int32_t)cls) {
            weft_names_view cv = weft_names_as_view(&l.classes);
            rc = weft_io_fail(rd, rec.lineno, 2, "class", err, "'%.80s' was labelled '%.80s' on "
                              "line %u", rec.field[0], weft_names_get(&cv, (uint32_t)l.y[node],
                                                                      NULL), line_of[node]);
            goto done;
        }
        if (l.y[node] < 0) {
            l.y[node] = (int32_t)cls;
            line_of[node] = rec.lineno > UINT32_MAX ? UINT32_MAX : (uint32_t)rec.lineno;
            l.n_labelled++;
        }
    }
    if (l.n_labelled == 0)
        rc = weft_error_set(err, WEFT_ERR_INVALID, "%s: no label", path);
    else if (l.classes.n < 2)
        rc = weft_error_set(err, WEFT_ERR_INVALID, "%s: every label is the same class: there is "
                            "nothing to learn", path);
done:
    free(line_of);
    weft_io_close(rd);
    if (rc == WEFT_OK)
        *out = l;
    else
        weft_labels_fini(&l);
    return rc;
}

weft_err weft_labels_read_split(const char *path, const weft_names_view *nodes,
                                const weft_labels *l, uint8_t *part, weft_error *err)
{
    weft_io_reader *rd = NULL;
    uint32_t *line_of = weft_calloc_array(nodes->n ? nodes->n : 1, sizeof *line_of);
    if (!line_of)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory reading a split");
    memset(part, WEFT_LABEL_NONE, nodes->n);
    size_t n_train = 0;
    weft_err rc = weft_io_open(path, &rd, err);
    while (rc == WEFT_OK) {
        weft_io_record rec;
        bool eof;
        uint32_t node;
        if ((rc = weft_io_next(rd, &rec, &eof, err)) != WEFT_OK || eof)
            break;
        if ((rc = two_fields(rd, &rec, "part", err)) != WEFT_OK ||
            (rc = weft_io_find_name(rd, &rec, 1, "node", "node", nodes, &node, err)) != WEFT_OK)
            break;
        int p = 0;
        for (int k = WEFT_LABEL_TRAIN; k <= WEFT_LABEL_TEST; k++)
            if (!strcmp(rec.field[1], part_names[k]))
                p = k;
        if (!p)
            rc = weft_io_fail(rd, rec.lineno, 2, "part", err, "'%.40s' is not train, valid or "
                              "test", rec.field[1]);
        else if (line_of[node])
            rc = weft_io_fail(rd, rec.lineno, 1, "node", err, "'%.80s' is already in the split "
                              "on line %u", rec.field[0], line_of[node]);
        else if (node >= l->n_nodes || l->y[node] < 0)
            rc = weft_io_fail(rd, rec.lineno, 1, "node", err, "node '%.80s' has no label",
                              rec.field[0]);
        if (rc != WEFT_OK)
            break;
        line_of[node] = rec.lineno > UINT32_MAX ? UINT32_MAX : (uint32_t)rec.lineno;
        part[node] = (uint8_t)p;
        n_train += p == WEFT_LABEL_TRAIN;
    }
    if (rc == WEFT_OK && n_train == 0)
        rc = weft_error_set(err, WEFT_ERR_INVALID, "%s: no training node", path);
    free(line_of);
    weft_io_close(rd);
    return rc;
}

weft_err weft_labels_split(const weft_labels *l, double frac_valid, double frac_test,
                           uint64_t seed, uint8_t *part, weft_error *err)
{
    if (!(frac_valid >= 0.0 && frac_test >= 0.0 && frac_valid + frac_test < 1.0))
        return weft_error_set(err, WEFT_ERR_INVALID, "label split: shares %g and %g must be at "
                              "least 0 and sum below 1", frac_valid, frac_test);
    size_t n_classes = l->classes.n;
    uint32_t *order = weft_alloc_array(l->n_labelled ? l->n_labelled : 1, sizeof *order);
    size_t *start = weft_calloc_array(n_classes + 1, sizeof *start);
    if (!order || !start) {
        free(order);
        free(start);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory splitting labels");
    }
    /* Nodes grouped by class in id order (counting sort), then each group shuffled. */
    for (size_t v = 0; v < l->n_nodes; v++)
        if (l->y[v] >= 0)
            start[l->y[v] + 1]++;
    for (size_t c = 0; c < n_classes; c++)
        start[c + 1] += start[c];
    size_t *fill = weft_alloc_array(n_classes ? n_classes : 1, sizeof *fill);
    if (!fill) {
        free(order);
        free(start);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory splitting labels");
    }
    memcpy(fill, start, n_classes * sizeof *fill);
    for (size_t v = 0; v < l->n_nodes; v++)
        if (l->y[v] >= 0)
            order[fill[l->y[v]]++] = (uint32_t)v;
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    memset(part, WEFT_LABEL_NONE, l->n_nodes);
    for (size_t c = 0; c < n_classes; c++) {
        uint32_t *g = order + start[c];
        size_t n = start[c + 1] - start[c];
        for (size_t i = n; i > 1; i--) {   /* Fisher-Yates */
            size_t j = weft_rng_below(&rng, (uint32_t)i);
            uint32_t t = g[i - 1];
            g[i - 1] = g[j];
            g[j] = t;
        }
        size_t n_test = (size_t)llround(frac_test * (double)n);
        size_t n_valid = (size_t)llround(frac_valid * (double)n);
        while (n_test + n_valid >= n && n_test + n_valid > 0) {   /* keep one for training */
            if (n_valid >= n_test && n_valid > 0)
                n_valid--;
            else
                n_test--;
        }
        for (size_t i = 0; i < n; i++)
            part[g[i]] = i < n_test ? WEFT_LABEL_TEST
                       : i < n_test + n_valid ? WEFT_LABEL_VALID : WEFT_LABEL_TRAIN;
    }
    free(fill);
    free(order);
    free(start);
    return WEFT_OK;
}
