/* Tests of node features (core/features.c): index[:value] lists, row normalisation, the
 * statistics, and every rejection with its file, line and field. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "fixture.h"
#include "weft/features.h"
#include "weft/names.h"

TestSuite(features, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* Node table "a" .. "e" (ids 0 .. 4). */
static weft_names letters;
static weft_names_view nodes;

static void nodes_init(void)
{
    cr_assert_eq(weft_names_init(&letters, NULL), WEFT_OK);
    for (char c = 'a'; c <= 'e'; c++)
        cr_assert_eq(weft_names_intern(&letters, &c, 1, &(uint32_t){ 0 }, NULL, NULL), WEFT_OK);
    nodes = weft_names_as_view(&letters);
}

static weft_sparse load_ok(const char *name, const char *text, bool row_normalise,
                           weft_features_stats *stats)
{
    nodes_init();
    const char *path = fixture_write_text(name, text);
    weft_sparse x;
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_features_load(path, &nodes, row_normalise, &x, stats, &err), WEFT_OK,
                 "%s", err.msg);
    weft_names_fini(&letters);
    return x;
}

/* Expects row @p v of @p x to hold exactly the @p n (column, value) pairs given. */
static void expect_row(const weft_sparse *x, size_t v, size_t n, const uint32_t *col,
                       const double *val)
{
    size_t len = (size_t)(x->off[v + 1] - x->off[v]);
    cr_assert_eq(len, n, "row %zu: %zu entries, expected %zu", v, len, n);
    for (size_t i = 0; i < n; i++) {
        uint64_t k = x->off[v] + i;
        cr_assert_eq(x->col[k], col[i], "row %zu entry %zu: column %u, expected %u", v, i,
                     x->col[k], col[i]);
        cr_assert(fabs(x->val[k] - val[i]) <= 1e-6, "row %zu column %u: %.9g, expected %.9g", v,
                  col[i], (double)x->val[k], val[i]);
    }
}

/* a: 0, 3:0.5, 7;  b: 2:2, then 5 after a second tab;  c: listed out of order, 4:-1.5e0 and 1;
 * d and e have no line. */
static const char three_rows[] = "# node\tfeatures\n"
                                 "a\t0 3:0.5 7\n"
                                 "b\t2:2\t5\n"
                                 "c\t4:-1.5e0  1\n";

Test(features, parses_indices_and_values)
{
    weft_features_stats st;
    weft_sparse x = load_ok("x.tsv", three_rows, false, &st);
    cr_assert_eq(x.n_rows, 5);
    cr_assert_eq(x.n_cols, 8, "max index 7 + 1");
    expect_row(&x, 0, 3, (uint32_t[]){ 0, 3, 7 }, (double[]){ 1, 0.5, 1 });
    expect_row(&x, 1, 2, (uint32_t[]){ 2, 5 }, (double[]){ 2, 1 });
    expect_row(&x, 2, 2, (uint32_t[]){ 1, 4 }, (double[]){ 1, -1.5 });   /* sorted by index */
    expect_row(&x, 3, 0, NULL, NULL);
    expect_row(&x, 4, 0, NULL, NULL);
    cr_assert_eq(st.n_lines, 3);
    cr_assert_eq(st.n_missing, 2, "d and e");
    cr_assert_eq(st.n_empty, 0);
    weft_sparse_fini(&x);
}

Test(features, row_normalise_divides_by_the_row_sum)
{
    /* a: sum 1 + 0.5 + 1 = 2.5 -> 0.4, 0.2, 0.4;  b: sum 3 -> 2/3, 1/3;
     * c: sum 1 - 1.5 = -0.5 -> 1/-0.5 = -2 and -1.5/-0.5 = 3;
     * d: 1:2 2:-2 sums to 0 and stays as it is. */
    char text[256];
    snprintf(text, sizeof text, "%sd\t1:2 2:-2\n", three_rows);
    weft_sparse x = load_ok("x.tsv", text, true, NULL);
    expect_row(&x, 0, 3, (uint32_t[]){ 0, 3, 7 }, (double[]){ 0.4, 0.2, 0.4 });
    expect_row(&x, 1, 2, (uint32_t[]){ 2, 5 }, (double[]){ 2.0 / 3, 1.0 / 3 });
    expect_row(&x, 2, 2, (uint32_t[]){ 1, 4 }, (double[]){ -2, 3 });
    expect_row(&x, 3, 2, (uint32_t[]){ 1, 2 }, (double[]){ 2, -2 });
    expect_row(&x, 4, 0, NULL, NULL);
    weft_sparse_fini(&x);
}

Test(features, lines_without_features_are_counted)
{
    /* b lists nothing; c, d and e have no line. */
    weft_features_stats st;
    weft_sparse x = load_ok("x.tsv", "a\t1\nb\n", false, &st);
    cr_assert_eq(st.n_lines, 2);
    cr_assert_eq(st.n_empty, 1);
    cr_assert_eq(st.n_missing, 3);
    cr_assert_eq(x.n_cols, 2);
    expect_row(&x, 1, 0, NULL, NULL);
    weft_sparse_fini(&x);
}

Test(features, reads_csv)
{
    weft_sparse x = load_ok("x.csv", "a,0 2:0.5\ne,1\n", false, NULL);
    cr_assert_eq(x.n_cols, 3);
    expect_row(&x, 0, 2, (uint32_t[]){ 0, 2 }, (double[]){ 1, 0.5 });
    expect_row(&x, 4, 1, (uint32_t[]){ 1 }, (double[]){ 1 });
    weft_sparse_fini(&x);
}

Test(features, largest_index_sets_the_width)
{
    char text[64];
    snprintf(text, sizeof text, "a\t3\nb\t%u:2\n", (unsigned)WEFT_FEATURES_MAX_INDEX);
    weft_sparse x = load_ok("x.tsv", text, false, NULL);
    cr_assert_eq(x.n_cols, (size_t)WEFT_FEATURES_MAX_INDEX + 1);
    expect_row(&x, 1, 1, (uint32_t[]){ WEFT_FEATURES_MAX_INDEX }, (double[]){ 2 });
    weft_sparse_fini(&x);
}

/* Expects loading @p text to fail with @p code and the message "<path><suffix>"; a NULL
 * suffix checks only that the message starts with "<path><prefix>". */
static void expect_failure(const char *text, weft_err code, const char *suffix,
                           const char *prefix)
{
    nodes_init();
    const char *path = fixture_write_text("x.tsv", text);
    char want[512];
    snprintf(want, sizeof want, "%s%s", path, suffix ? suffix : prefix);
    weft_sparse x = { .n_rows = 12345 };
    weft_error err = { WEFT_OK, "" };
    weft_err rc = weft_features_load(path, &nodes, true, &x, NULL, &err);
    cr_assert_eq(rc, code, "input '%s': code %s, message: %s", text, weft_err_name(rc), err.msg);
    if (suffix)
        cr_assert_str_eq(err.msg, want);
    else
        cr_assert(!strncmp(err.msg, want, strlen(want)), "input '%s': message '%s' does not "
                  "start '%s'", text, err.msg, want);
    cr_assert_eq(x.n_rows, 12345, "output written on failure");
    cr_assert_null(x.off, "output written on failure");
    weft_names_fini(&letters);
}

Test(features, index_twice_in_a_line_is_a_parse_error)
{
    expect_failure("a\t1\nb\t4 1:2 4\n", WEFT_ERR_PARSE, NULL, ":2: field 2 (feature): ");
}

Test(features, bad_index_text_is_a_parse_error)
{
    static const char *const bad[] = { "a\tx\n", "a\t-1\n", "a\t1.5\n", "a\t+2\n", "a\t3x\n",
                                       "a\t0x10\n", "a\t:1\n" };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++)
        expect_failure(bad[i], WEFT_ERR_PARSE, NULL, ":1: field 2 (feature): ");
    /* In a later tab-separated field, that field is named. */
    expect_failure("a\t1\t2 zz\n", WEFT_ERR_PARSE, NULL, ":1: field 3 (feature): ");
}

Test(features, index_over_the_limit_is_a_parse_error)
{
    char text[64];
    snprintf(text, sizeof text, "a\t1 %u\n", (unsigned)WEFT_FEATURES_MAX_INDEX + 1);
    expect_failure(text, WEFT_ERR_PARSE, NULL, ":1: field 2 (feature): ");
    /* Far over, past what 64 bits hold. */
    expect_failure("a\t99999999999999999999999\n", WEFT_ERR_PARSE, NULL,
                   ":1: field 2 (feature): ");
}

Test(features, value_not_finite_is_a_parse_error)
{
    /* 1e39 is finite as a double but over the largest float (about 3.4e38). */
    static const char *const bad[] = { "a\t1:nan\n", "a\t1:inf\n", "a\t1:-inf\n",
                                       "a\t1:1e39\n", "a\t1:\n", "a\t1:abc\n", "a\t1:2x\n" };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++)
        expect_failure(bad[i], WEFT_ERR_PARSE, NULL, ":1: field 2 (feature): ");
}

Test(features, unknown_node_is_not_found)
{
    expect_failure("a\t1\nzz\t2\n", WEFT_ERR_NOT_FOUND, ":2: field 1 (node): unknown node 'zz'",
                   NULL);
}

Test(features, node_twice_names_the_earlier_line)
{
    expect_failure("a\t1\nb\t2\n# comment\na\t3\n", WEFT_ERR_PARSE,
                   ":4: field 1 (node): 'a' already has features on line 1", NULL);
}

Test(features, no_data_line_is_invalid)
{
    expect_failure("# only a comment\n\n", WEFT_ERR_INVALID, NULL, "");
}
