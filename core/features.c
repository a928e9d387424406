/* Node features (include/weft/features.h). Lines are parsed into a growing list of
 * (node, index, value) entries, then laid out as rows sorted by index. */
#include "weft/features.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/io.h"

struct entry {
    uint32_t node, index;
    float value;
};

struct reading {
    struct entry *e;
    size_t n, cap;
    uint32_t *line_of;   /* per node: the line that gave its features, 0 when none */
    size_t max_index;
    bool has_any;
};

static int cmp_index(const void *pa, const void *pb)
{
    const struct entry *a = pa, *b = pb;
    return a->index < b->index ? -1 : a->index > b->index;
}

/* One token "index" or "index:value" of field @p f. */
static weft_err parse_token(const weft_io_reader *rd, size_t lineno, size_t f, const char *tok,
                            size_t len, uint32_t *index, float *value, weft_error *err)
{
    char buf[64];
    if (len >= sizeof buf)
        return weft_io_fail(rd, lineno, f, "feature", err, "'%.20s...' is not index[:value]",
                            tok);
    memcpy(buf, tok, len);
    buf[len] = '\0';
    char *colon = strchr(buf, ':');
    if (colon)
        *colon = '\0';
    char *end;
    errno = 0;
    if (buf[0] < '0' || buf[0] > '9')
        return weft_io_fail(rd, lineno, f, "feature", err, "'%s' is not an index", buf);
    unsigned long long i = strtoull(buf, &end, 10);
    if (*end)
        return weft_io_fail(rd, lineno, f, "feature", err, "'%s' is not an index", buf);
    if (errno || i > WEFT_FEATURES_MAX_INDEX)
        return weft_io_fail(rd, lineno, f, "feature", err, "index %s is over the limit %u", buf,
                            (unsigned)WEFT_FEATURES_MAX_INDEX);
    double v = 1.0;
    if (colon) {
        errno = 0;
        v = strtod(colon + 1, &end);
        if (end == colon + 1 || *end || errno || !isfinite(v) || fabs(v) > 3.4e38)
            return weft_io_fail(rd, lineno, f, "feature", err,
                                "value '%s' of index %llu is not a finite number", colon + 1, i);
    }
    *index = (uint32_t)i;
    *value = (float)v;
    return WEFT_OK;
}

static weft_err read_line(const weft_io_reader *rd, const weft_io_record *rec,
                          const weft_names_view *nodes, struct reading *st, weft_error *err)
{
    uint32_t node;
    weft_err rc = weft_io_find_name(rd, rec, 1, "node", "node", nodes, &node, err);
    if (rc != WEFT_OK)
        return rc;
    if (st->line_of[node])
        return weft_io_fail(rd, rec->lineno, 1, "node", err, "'%.80s' already has features on "
                            "line %u", rec->field[0], st->line_of[node]);
    st->line_of[node] = rec->lineno > UINT32_MAX ? UINT32_MAX : (uint32_t)rec->lineno;
    size_t first = st->n;
    for (size_t f = 2; f <= rec->n_fields; f++) {
        const char *s = rec->field[f - 1];
        size_t len = rec->len[f - 1], at = 0;
        while (at < len) {
            while (at < len && (s[at] == ' ' || s[at] == '\t'))
                at++;
            size_t start = at;
            while (at < len && s[at] != ' ' && s[at] != '\t')
                at++;
            if (at == start)
                break;
            struct entry e = { node, 0, 0.0f };
            if ((rc = parse_token(rd, rec->lineno, f, s + start, at - start, &e.index,
                                  &e.value, err)) != WEFT_OK)
                return rc;
            if (weft_grow_array((void **)&st->e, &st->cap, st->n + 1, sizeof *st->e))
                return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory reading features");
            st->e[st->n++] = e;
        }
    }
    /* Sort this line's entries by index and refuse repeats. A line without features may
     * come before any entry, while st->e is still NULL: qsort must not see it. */
    if (st->n - first > 1)
        qsort(st->e + first, st->n - first, sizeof *st->e, cmp_index);
    for (size_t k = first; k < st->n; k++) {
        if (k > first && st->e[k].index == st->e[k - 1].index)
            return weft_io_fail(rd, rec->lineno, 2, "feature", err, "index %u appears twice",
                                st->e[k].index);
        if (st->e[k].index + (size_t)1 > st->max_index)
            st->max_index = st->e[k].index + (size_t)1;
    }
    st->has_any = true;
    return WEFT_OK;
}

static int cmp_node(const void *pa, const void *pb)
{
    const struct entry *a = pa, *b = pb;
    if (a->node != b->node)
        return a->node < b->node ? -1 : 1;
    return a->index < b->index ? -1 : a->index > b->index;
}

weft_err weft_features_load(const char *path, const weft_names_view *nodes, bool row_normalise,
                            weft_sparse *out, weft_features_stats *stats, weft_error *err)
{
    struct reading st = { 0 };
    weft_io_reader *rd = NULL;
    weft_sparse a = { 0 };
    weft_features_stats s = { 0 };
    weft_err rc = weft_io_open(path, &rd, err);
    if (rc != WEFT_OK)
        return rc;
    if (!(st.line_of = weft_calloc_array(nodes->n ? nodes->n : 1, sizeof *st.line_of))) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory reading features");
        goto done;
    }
    for (;;) {
        weft_io_record rec;
        bool eof;
        if ((rc = weft_io_next(rd, &rec, &eof, err)) != WEFT_OK)
            goto done;
        if (eof)
            break;
        if ((rc = read_line(rd, &rec, nodes, &st, err)) != WEFT_OK)
            goto done;
        s.n_lines++;
    }
    if (!st.has_any) {
        rc = weft_error_set(err, WEFT_ERR_INVALID, "%s: no feature line", path);
        goto done;
    }
    if (st.n > 1)   /* lines listing no feature leave st.e NULL */
        qsort(st.e, st.n, sizeof *st.e, cmp_node);
    a.n_rows = nodes->n;
    a.n_cols = st.max_index ? st.max_index : 1;
    a.off = weft_calloc_array(nodes->n + 1, sizeof *a.off);
    a.col = weft_alloc_array(st.n ? st.n : 1, sizeof *a.col);
    a.val = weft_alloc_array(st.n ? st.n : 1, sizeof *a.val);
    if (!a.off || !a.col || !a.val) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu features", st.n);
        goto done;
    }
    for (size_t k = 0; k < st.n; k++) {
        a.off[st.e[k].node + 1]++;
        a.col[k] = st.e[k].index;
        a.val[k] = st.e[k].value;
    }
    for (size_t v = 0; v < nodes->n; v++) {
        if (!st.line_of[v])
            s.n_missing++;
        else if (a.off[v + 1] == 0)
            s.n_empty++;
        a.off[v + 1] += a.off[v];
    }
    /* Values of both signs can sum to almost nothing (3e38, -3e38 and 1e-45 sum to 1e-45):
     * a quotient past the float range would be infinite, so such a row is refused. */
    if (row_normalise)
        for (size_t v = 0; v < nodes->n; v++) {
            double sum = 0.0;
            for (uint64_t k = a.off[v]; k < a.off[v + 1]; k++)
                sum += a.val[k];
            for (uint64_t k = a.off[v]; sum != 0.0 && k < a.off[v + 1]; k++) {
                double q = a.val[k] / sum;
                if (!(fabs(q) <= FLT_MAX)) {
                    rc = weft_error_set(err, WEFT_ERR_PARSE, "%s:%u: field 2 (feature): the "
                                        "values sum to %g, too near 0 to divide the row by",
                                        path, (unsigned)st.line_of[v], sum);
                    goto done;
                }
                a.val[k] = (float)q;
            }
        }
    *out = a;
    memset(&a, 0, sizeof a);
    if (stats)
        *stats = s;
done:
    weft_sparse_fini(&a);
    free(st.e);
    free(st.line_of);
    weft_io_close(rd);
    return rc;
}
