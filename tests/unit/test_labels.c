/* Tests of node labels (core/labels.c): loading with its rejections, reading a split file,
 * and the seeded split stratified by class. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fixture.h"
#include "weft/labels.h"
#include "weft/names.h"

TestSuite(labels, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* Node table "a" .. "h" (ids 0 .. 7), kept in one static table per test process. */
static weft_names letters;

static const weft_names_view *letter_nodes(void)
{
    static weft_names_view v;
    cr_assert_eq(weft_names_init(&letters, NULL), WEFT_OK);
    for (char c = 'a'; c <= 'h'; c++)
        cr_assert_eq(weft_names_intern(&letters, &c, 1, &(uint32_t){ 0 }, NULL, NULL), WEFT_OK);
    v = weft_names_as_view(&letters);
    return &v;
}

static weft_labels load_ok(const char *path, const weft_names_view *nodes)
{
    weft_labels l;
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_labels_load(path, nodes, &l, &err), WEFT_OK, "%s", err.msg);
    return l;
}

/* Expects loading @p text as labels to fail with @p code and the message "<path><suffix>";
 * a NULL suffix checks only that the message starts with "<path><prefix>". */
static void expect_load_failure(const char *text, weft_err code, const char *suffix,
                                const char *prefix)
{
    const char *path = fixture_write_text("labels.tsv", text);
    char want[512];
    snprintf(want, sizeof want, "%s%s", path, suffix ? suffix : prefix);
    weft_error err = { WEFT_OK, "" };
    weft_labels l = { .n_nodes = 12345 };
    weft_err rc = weft_labels_load(path, letter_nodes(), &l, &err);
    cr_assert_eq(rc, code, "code %s, message: %s", weft_err_name(rc), err.msg);
    if (suffix)
        cr_assert_str_eq(err.msg, want);
    else
        cr_assert(!strncmp(err.msg, want, strlen(want)), "message '%s' does not start '%s'",
                  err.msg, want);
    cr_assert_eq(l.n_nodes, 12345, "output written on failure");
    cr_assert_null(l.y, "output written on failure");
    weft_names_fini(&letters);
}

static const char *class_name(const weft_labels *l, int32_t id)
{
    weft_names_view v = weft_names_as_view(&l->classes);
    cr_assert(id >= 0 && (size_t)id < v.n, "class id %d", id);
    return weft_names_get(&v, (uint32_t)id, NULL);
}

Test(labels, loads_a_tiny_file)
{
    const char *path = fixture_write_text("labels.tsv", "# node\tclass\n"
                                                        "a\tred\n"
                                                        "b\tblue\n"
                                                        "\n"
                                                        "c\tred\n"
                                                        "e\tgreen\n");
    const weft_names_view *nodes = letter_nodes();
    weft_labels l = load_ok(path, nodes);
    /* Classes in order of first appearance: red 0, blue 1, green 2. */
    static const int32_t want[8] = { 0, 1, 0, -1, 2, -1, -1, -1 };
    cr_assert_eq(l.n_nodes, 8);
    cr_assert_eq(l.n_labelled, 4);
    cr_assert_eq(l.classes.n, 3);
    cr_assert_str_eq(class_name(&l, 0), "red");
    cr_assert_str_eq(class_name(&l, 1), "blue");
    cr_assert_str_eq(class_name(&l, 2), "green");
    for (size_t v = 0; v < 8; v++)
        cr_assert_eq(l.y[v], want[v], "node %c: class %d, expected %d", (char)('a' + v), l.y[v],
                     want[v]);
    weft_labels_fini(&l);
    weft_names_fini(&letters);
}

Test(labels, loads_csv)
{
    const char *path = fixture_write_text("labels.csv", "h,x\ng,y\n");
    weft_labels l = load_ok(path, letter_nodes());
    cr_assert_eq(l.n_labelled, 2);
    cr_assert_eq(l.y[7], 0);   /* h: x, the first class */
    cr_assert_eq(l.y[6], 1);   /* g: y */
    weft_labels_fini(&l);
    weft_names_fini(&letters);
}

Test(labels, same_class_twice_is_one_label)
{
    const char *path = fixture_write_text("labels.tsv", "a\tred\nb\tblue\na\tred\n");
    weft_labels l = load_ok(path, letter_nodes());
    cr_assert_eq(l.n_labelled, 2);
    cr_assert_eq(l.y[0], 0);
    cr_assert_eq(l.classes.n, 2);
    weft_labels_fini(&l);
    weft_names_fini(&letters);
}

Test(labels, unknown_node_is_not_found)
{
    expect_load_failure("a\tred\nzz\tblue\n", WEFT_ERR_NOT_FOUND,
                        ":2: field 1 (node): unknown node 'zz'", NULL);
}

Test(labels, conflicting_relabel_names_the_earlier_line)
{
    /* a is red on line 2 (line 1 is a comment) and blue on line 5. */
    expect_load_failure("# labels\na\tred\nb\tblue\nc\tred\na\tblue\n", WEFT_ERR_PARSE,
                        ":5: field 2 (class): 'a' was labelled 'red' on line 2", NULL);
}

Test(labels, one_class_only_is_invalid)
{
    expect_load_failure("a\tred\nb\tred\nc\tred\n", WEFT_ERR_INVALID, NULL, ": ");
}

Test(labels, no_label_is_invalid)
{
    expect_load_failure("# nothing but a comment\n\n", WEFT_ERR_INVALID, NULL, ": ");
}

Test(labels, wrong_column_count_is_a_parse_error)
{
    expect_load_failure("a\tred\nb\tblue\textra\n", WEFT_ERR_PARSE, NULL, ":2: ");
}

Test(labels, empty_class_is_a_parse_error)
{
    expect_load_failure("a\tred\nb\t\n", WEFT_ERR_PARSE, NULL, ":2: field 2 (class): ");
}

Test(labels, part_names)
{
    cr_assert_str_eq(weft_labels_part_name(WEFT_LABEL_NONE), "none");
    cr_assert_str_eq(weft_labels_part_name(WEFT_LABEL_TRAIN), "train");
    cr_assert_str_eq(weft_labels_part_name(WEFT_LABEL_VALID), "valid");
    cr_assert_str_eq(weft_labels_part_name(WEFT_LABEL_TEST), "test");
}

/* ---- split files ---- */

/* Labels a..f (red, blue, red, blue, green, green); g and h unlabelled. */
static weft_labels six_labels(const weft_names_view *nodes)
{
    const char *path = fixture_write_text("labels.tsv", "a\tred\nb\tblue\nc\tred\nd\tblue\n"
                                                        "e\tgreen\nf\tgreen\n");
    return load_ok(path, nodes);
}

static void expect_split_failure(const char *text, weft_err code, const char *suffix,
                                 const char *prefix)
{
    const weft_names_view *nodes = letter_nodes();
    weft_labels l = six_labels(nodes);
    const char *path = fixture_write_text("split.tsv", text);
    char want[512];
    snprintf(want, sizeof want, "%s%s", path, suffix ? suffix : prefix);
    uint8_t part[8];
    weft_error err = { WEFT_OK, "" };
    weft_err rc = weft_labels_read_split(path, nodes, &l, part, &err);
    cr_assert_eq(rc, code, "code %s, message: %s", weft_err_name(rc), err.msg);
    if (suffix)
        cr_assert_str_eq(err.msg, want);
    else
        cr_assert(!strncmp(err.msg, want, strlen(want)), "message '%s' does not start '%s'",
                  err.msg, want);
    weft_labels_fini(&l);
    weft_names_fini(&letters);
}

Test(labels, reads_a_split_file)
{
    const weft_names_view *nodes = letter_nodes();
    weft_labels l = six_labels(nodes);
    const char *path = fixture_write_text("split.tsv", "# node\tpart\na\ttrain\nb\ttrain\n"
                                                       "c\tvalid\nd\ttest\ne\ttrain\n");
    uint8_t part[8];
    memset(part, 0xee, sizeof part);   /* every entry must be written */
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_labels_read_split(path, nodes, &l, part, &err), WEFT_OK, "%s", err.msg);
    /* f is labelled but not listed; g and h are unlabelled: none of them takes part. */
    static const uint8_t want[8] = { WEFT_LABEL_TRAIN, WEFT_LABEL_TRAIN, WEFT_LABEL_VALID,
                                     WEFT_LABEL_TEST,  WEFT_LABEL_TRAIN, WEFT_LABEL_NONE,
                                     WEFT_LABEL_NONE,  WEFT_LABEL_NONE };
    for (size_t v = 0; v < 8; v++)
        cr_assert_eq(part[v], want[v], "node %c: part %u, expected %u", (char)('a' + v),
                     part[v], want[v]);
    weft_labels_fini(&l);
    weft_names_fini(&letters);
}

Test(labels, split_rejects_an_unknown_part)
{
    expect_split_failure("a\ttrain\nb\ttraining\n", WEFT_ERR_PARSE, NULL,
                         ":2: field 2 (part): ");
}

Test(labels, split_rejects_a_node_listed_twice)
{
    expect_split_failure("a\ttrain\nb\ttest\na\tvalid\n", WEFT_ERR_PARSE, NULL,
                         ":3: field 1 (node): ");
}

Test(labels, split_rejects_a_node_without_label)
{
    expect_split_failure("a\ttrain\ng\ttest\n", WEFT_ERR_PARSE,
                         ":2: field 1 (node): node 'g' has no label", NULL);
}

Test(labels, split_rejects_an_unknown_node)
{
    expect_split_failure("a\ttrain\nzz\ttest\n", WEFT_ERR_NOT_FOUND,
                         ":2: field 1 (node): unknown node 'zz'", NULL);
}

Test(labels, split_needs_a_training_node)
{
    expect_split_failure("a\tvalid\nb\ttest\n", WEFT_ERR_INVALID, NULL, ": ");
}

/* ---- stratified split ---- */

enum { S_NODES = 30, S_CLASSES = 5 };

/* Nodes n0 .. n29; n0 .. n24 labelled, classes interleaved so that no class is a run of ids
 * and first seen in the order A .. E (so class id = letter - 'A'): class sizes A 12, B 7,
 * C 1, D 3, E 2; n25 .. n29 unlabelled. */
static const char class_of[S_NODES + 1] = "ABCDEABADABAEBAABAADAABAB.....";
static const size_t class_size[S_CLASSES] = { 12, 7, 1, 3, 2 };

static weft_names many;

static weft_labels strata(void)
{
    cr_assert_eq(weft_names_init(&many, NULL), WEFT_OK);
    char text[1024] = "", line[32];
    for (size_t v = 0; v < S_NODES; v++) {
        int len = snprintf(line, sizeof line, "n%zu", v);
        cr_assert_eq(weft_names_intern(&many, line, (size_t)len, &(uint32_t){ 0 }, NULL, NULL),
                     WEFT_OK);
        if (class_of[v] != '.') {
            snprintf(line, sizeof line, "n%zu\t%c\n", v, class_of[v]);
            strcat(text, line);
        }
    }
    size_t count[S_CLASSES] = { 0 };
    for (size_t v = 0; v < S_NODES; v++)
        if (class_of[v] != '.')
            count[class_of[v] - 'A']++;
    for (size_t c = 0; c < S_CLASSES; c++)
        cr_assert_eq(count[c], class_size[c], "fixture: class %c", (char)('A' + c));
    const char *path = fixture_write_text("strata.tsv", text);
    weft_names_view v = weft_names_as_view(&many);
    return load_ok(path, &v);
}

/* Per class (by its letter), how many nodes went to each part. */
static void tally(const weft_labels *l, const uint8_t *part, size_t n[S_CLASSES][4])
{
    memset(n, 0, sizeof(size_t) * S_CLASSES * 4);
    for (size_t v = 0; v < S_NODES; v++) {
        cr_assert_leq(part[v], WEFT_LABEL_TEST, "node %zu: part %u", v, part[v]);
        if (class_of[v] == '.') {
            cr_assert_eq(part[v], WEFT_LABEL_NONE, "unlabelled node %zu in part %u", v,
                         part[v]);
            continue;
        }
        cr_assert_eq(l->y[v], class_of[v] - 'A', "fixture: classes in order of appearance");
        cr_assert_neq(part[v], WEFT_LABEL_NONE, "labelled node %zu left out", v);
        n[class_of[v] - 'A'][part[v]]++;
    }
}

static void split_ok(const weft_labels *l, double frac_valid, double frac_test, uint64_t seed,
                     uint8_t *part)
{
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_labels_split(l, frac_valid, frac_test, seed, part, &err), WEFT_OK, "%s",
                 err.msg);
}

Test(labels, stratified_split_rounds_each_class_share)
{
    weft_labels l = strata();
    uint8_t part[S_NODES];
    split_ok(&l, 0.2, 0.3, 11, part);
    size_t n[S_CLASSES][4];
    tally(&l, part, n);
    /* Per class, test = round(0.3 n), valid = round(0.2 n), the rest train (no half ties):
     *   A 12: test round(3.6) 4, valid round(2.4) 2, train 6
     *   B  7: test round(2.1) 2, valid round(1.4) 1, train 4
     *   C  1: test round(0.3) 0, valid round(0.2) 0, train 1
     *   D  3: test round(0.9) 1, valid round(0.6) 1, train 1
     *   E  2: test round(0.6) 1, valid round(0.4) 0, train 1 */
    static const size_t want[S_CLASSES][3] = { { 6, 2, 4 }, { 4, 1, 2 }, { 1, 0, 0 },
                                               { 1, 1, 1 }, { 1, 0, 1 } };
    for (size_t c = 0; c < S_CLASSES; c++)
        for (size_t p = 0; p < 3; p++)
            cr_assert_eq(n[c][p + 1], want[c][p], "class %c, %s: %zu nodes, expected %zu",
                         (char)('A' + c), weft_labels_part_name((weft_label_part)(p + 1)),
                         n[c][p + 1], want[c][p]);
    weft_labels_fini(&l);
    weft_names_fini(&many);
}

Test(labels, stratified_split_keeps_a_training_node_per_class)
{
    /* valid 0.6 and test 0.35 would take every node of C (round(0.6) = 1 of 1), E (1 + 1 of
     * 2) and D (2 + 1 of 3): each must still keep one training node. */
    weft_labels l = strata();
    uint8_t part[S_NODES];
    for (uint64_t seed = 1; seed <= 5; seed++) {
        split_ok(&l, 0.6, 0.35, seed, part);
        size_t n[S_CLASSES][4];
        tally(&l, part, n);
        for (size_t c = 0; c < S_CLASSES; c++)
            cr_assert_geq(n[c][WEFT_LABEL_TRAIN], 1, "seed %llu: class %c has no training node",
                          (unsigned long long)seed, (char)('A' + c));
    }
    weft_labels_fini(&l);
    weft_names_fini(&many);
}

Test(labels, stratified_split_same_seed_same_split)
{
    weft_labels l = strata();
    uint8_t first[S_NODES], again[S_NODES];
    split_ok(&l, 0.2, 0.3, 99, first);
    split_ok(&l, 0.2, 0.3, 99, again);
    cr_assert_eq(memcmp(first, again, S_NODES), 0);
    weft_labels_fini(&l);
    weft_names_fini(&many);
}

Test(labels, stratified_split_other_seed_other_split)
{
    /* Class A alone can be split C(12,4) * C(8,2) = 13860 ways: two seeds giving the same
     * split would mean the seed is ignored. */
    weft_labels l = strata();
    uint8_t first[S_NODES], other[S_NODES];
    split_ok(&l, 0.2, 0.3, 99, first);
    split_ok(&l, 0.2, 0.3, 100, other);
    cr_assert_neq(memcmp(first, other, S_NODES), 0, "seeds 99 and 100 give the same split");
    weft_labels_fini(&l);
    weft_names_fini(&many);
}

Test(labels, stratified_split_rejects_bad_fractions)
{
    weft_labels l = strata();
    uint8_t part[S_NODES];
    static const double bad[][2] = { { -0.1, 0.2 }, { 0.2, -0.1 }, { 0.6, 0.4 }, { 1.0, 0.0 } };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++)
        cr_assert_eq(weft_labels_split(&l, bad[i][0], bad[i][1], 1, part, NULL),
                     WEFT_ERR_INVALID, "valid %g, test %g", bad[i][0], bad[i][1]);
    cr_assert_eq(weft_labels_split(&l, NAN, 0.2, 1, part, NULL), WEFT_ERR_INVALID, "NaN");
    weft_labels_fini(&l);
    weft_names_fini(&many);
}
