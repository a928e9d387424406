/* Node types (core/types.c, and their blobs in core/snapshot.c): loading `node<TAB>type` with
 * its rejections (file and line in every message), and a snapshot giving back the types put
 * into it, checked against the node table. */
#include <criterion/criterion.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fixture.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/names.h"
#include "weft/snapshot.h"
#include "weft/store.h"
#include "weft/types.h"

TestSuite(types, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* Node table "a" .. "e" (ids 0 .. 4). */
static weft_names letters;

static weft_names_view letter_nodes(void)
{
    cr_assert_eq(weft_names_init(&letters, NULL), WEFT_OK);
    for (char c = 'a'; c <= 'e'; c++)
        cr_assert_eq(weft_names_intern(&letters, &c, 1, &(uint32_t){ 0 }, NULL, NULL), WEFT_OK);
    return weft_names_as_view(&letters);
}

static const char *type_of(const weft_types *t, uint32_t node)
{
    weft_names_view v = weft_names_as_view(&t->names);
    return t->of_node[node] == WEFT_TYPES_NONE ? "-" : weft_names_get(&v, t->of_node[node], NULL);
}

Test(types, load_gives_each_listed_node_its_type_and_the_rest_none)
{
    const char *path = fixture_write_text("types.tsv", "# node type\na\tpaper\nc\tauthor\n"
                                                       "e\tpaper\na\tpaper\n");
    weft_names_view nodes = letter_nodes();
    weft_types t;
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_types_load(path, &nodes, &t, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(t.n_nodes, 5);
    cr_assert_eq(t.n_typed, 3);
    cr_assert_eq(t.names.n, 2);
    const char *want[5] = { "paper", "-", "author", "-", "paper" };
    for (uint32_t v = 0; v < 5; v++)
        cr_assert_str_eq(type_of(&t, v), want[v], "node %u", v);
    weft_types_fini(&t);
    weft_names_fini(&letters);
}

Test(types, one_type_for_every_node_is_allowed)
{
    const char *path = fixture_write_text("types.csv", "a,x\nb,x\nc,x\nd,x\ne,x\n");
    weft_names_view nodes = letter_nodes();
    weft_types t;
    cr_assert_eq(weft_types_load(path, &nodes, &t, NULL), WEFT_OK);
    cr_assert_eq(t.n_typed, 5);
    cr_assert_eq(t.names.n, 1);
    weft_types_fini(&t);
    weft_names_fini(&letters);
}

/* Loading @p text fails with @p code and exactly the message "<path><suffix>". */
static void expect_failure(const char *text, weft_err code, const char *suffix)
{
    const char *path = fixture_write_text("types.tsv", text);
    char want[512];
    snprintf(want, sizeof want, "%s%s", path, suffix);
    weft_names_view nodes = letter_nodes();
    weft_types t = { .n_nodes = 777 };
    weft_error err = { WEFT_OK, "" };
    weft_err rc = weft_types_load(path, &nodes, &t, &err);
    cr_assert_eq(rc, code, "code %s, message: %s", weft_err_name(rc), err.msg);
    cr_assert_str_eq(err.msg, want);
    cr_assert_eq(t.n_nodes, 777, "output written on failure");
    weft_names_fini(&letters);
}

Test(types, unknown_node_is_named_with_file_and_line)
{
    expect_failure("a\tx\n\nzz\ty\n", WEFT_ERR_NOT_FOUND, ":3: field 1 (node): unknown node 'zz'");
}

Test(types, a_second_type_for_a_node_is_refused_with_the_first_line)
{
    expect_failure("b\tx\nc\ty\nb\ty\n", WEFT_ERR_PARSE,
                   ":3: field 2 (type): 'b' was given type 'x' on line 1");
}

Test(types, wrong_column_count_is_refused)
{
    expect_failure("a\tx\textra\n", WEFT_ERR_PARSE,
                   ":1: expected 2 fields (node, type), found 3");
}

Test(types, a_file_without_data_lines_is_refused)
{
    expect_failure("# nothing\n", WEFT_ERR_INVALID, ": no node type");
}

/* ---- in a snapshot ---- */

Test(types, snapshot_gives_back_the_types_put_with_a_link_model)
{
    weft_error err = { WEFT_OK, "" };
    weft_graph *g = NULL;
    cr_assert_eq(weft_graph_new(WEFT_GRAPH_UNDIRECTED, &g, &err), WEFT_OK);
    const char *pairs[][2] = { { "a", "b" }, { "b", "c" }, { "c", "d" }, { "d", "e" } };
    for (size_t i = 0; i < 4; i++)
        cr_assert_eq(weft_graph_add_edge(g, pairs[i][0], 1, "link", 4, pairs[i][1], 1, &err),
                     WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK, "%s", err.msg);
    const char *path = fixture_write_text("types.tsv", "e\tq\nb\tp\nc\tq\n");
    weft_names_view nodes = weft_names_as_view(&g->nodes);
    weft_types t;
    cr_assert_eq(weft_types_load(path, &nodes, &t, &err), WEFT_OK, "%s", err.msg);

    float entity[5 * 2] = { 1, 0, 0, 1, 1, 1, -1, 0, 0, -1 };
    weft_link_model m = { .kind = WEFT_LINK_DOT, .n_entities = 5, .n_relations = 1, .dim = 2,
                          .entity = entity };
    weft_store *s = NULL;
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK,
                 "%s", err.msg);
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK, "%s", err.msg);
    json_t *manifest = json_object();
    cr_assert_eq(weft_snapshot_put_link(w, manifest, g, &m, false, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_snapshot_put_types(w, manifest, &t, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_writer_commit(w, manifest, true, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(manifest);

    weft_snapshot *snap = NULL;
    weft_types_view v;
    cr_assert_eq(weft_snapshot_open(s, version, &snap, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_snapshot_types_view(snap, &v, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(v.n_nodes, 5);
    cr_assert_eq(v.n_types, 2);
    for (uint32_t node = 0; node < 5; node++) {
        const char *name = weft_names_get(&nodes, node, NULL);
        const char *want = !strcmp(name, "b") ? "p" : !strcmp(name, "c") || !strcmp(name, "e")
                                                          ? "q" : NULL;
        if (!want) {
            cr_assert_eq(v.of_node[node], WEFT_TYPES_NONE, "node %s", name);
            continue;
        }
        cr_assert_str_eq(weft_names_get(&v.names, v.of_node[node], NULL), want, "node %s", name);
    }
    const json_t *jt = json_object_get(weft_snapshot_manifest(snap), "types");
    cr_assert_eq(json_integer_value(json_object_get(jt, "count")), 2);
    cr_assert_eq(json_integer_value(json_object_get(jt, "typed")), 3);
    weft_snapshot_release(snap);
    weft_store_close(s);
    weft_types_fini(&t);
    weft_graph_free(g);
}

Test(types, snapshot_without_types_says_not_found)
{
    weft_error err = { WEFT_OK, "" };
    weft_graph *g = NULL;
    cr_assert_eq(weft_graph_new(0, &g, &err), WEFT_OK);
    cr_assert_eq(weft_graph_add_edge(g, "a", 1, "link", 4, "b", 1, &err), WEFT_OK);
    cr_assert_eq(weft_graph_finalize(g, &err), WEFT_OK);
    float entity[2 * 2] = { 1, 0, 0, 1 };
    weft_link_model m = { .kind = WEFT_LINK_DOT, .n_entities = 2, .n_relations = 1, .dim = 2,
                          .entity = entity };
    weft_store *s = NULL;
    weft_store_writer *w = NULL;
    uint64_t version = 0;
    cr_assert_eq(weft_store_open(fixture_dir, WEFT_STORE_CREATE, 1 << 26, &s, &err), WEFT_OK);
    cr_assert_eq(weft_store_writer_open(s, &w, &version, &err), WEFT_OK);
    json_t *manifest = json_object();
    cr_assert_eq(weft_snapshot_put_link(w, manifest, g, &m, false, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_store_writer_commit(w, manifest, true, NULL, &err), WEFT_OK, "%s", err.msg);
    json_decref(manifest);
    weft_snapshot *snap = NULL;
    weft_types_view v;
    cr_assert_eq(weft_snapshot_open(s, version, &snap, &err), WEFT_OK, "%s", err.msg);
    cr_assert_eq(weft_snapshot_types_view(snap, &v, &err), WEFT_ERR_NOT_FOUND);
    weft_snapshot_release(snap);
    weft_store_close(s);
    weft_graph_free(g);
}
