/* weft inspect: load edge files into one graph and print its statistics. */
#include <jansson.h>
#include <stdio.h>
#include <string.h>

#include "cmd.h"
#include "weft/graph.h"

static const char inspect_usage[] =
    "usage: weft inspect [--undirected] [--json] FILE...\n"
    "\n"
    "Load every edge file (TSV or CSV, gzip allowed; 2 columns source, target or 3 columns\n"
    "source, relation, target) into one graph and print its statistics.\n"
    "\n"
    "  --undirected  a-b also stands for b-a (b-a in the input counts as a duplicate)\n"
    "  --json        print one JSON object instead of a table\n"
    "  --help        print this help\n"
    "\n"
    "Exit status: 0 done, 1 failed (an unreadable or malformed file), 2 bad arguments.\n";

typedef struct inspect_opts {
    bool is_undirected;
    bool is_json;
    bool is_help;
    int first_file;   /* index in argv of the first file */
} inspect_opts;

/* Returns CMD_OK (then see o->is_help) or CMD_USAGE after printing the problem. */
static int parse_args(int argc, char **argv, inspect_opts *o)
{
    int i = 1;
    for (; i < argc && argv[i][0] == '-' && argv[i][1] != '\0'; i++) {
        if (!strcmp(argv[i], "--")) {
            i++;
            break;
        }
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            o->is_help = true;
            return CMD_OK;
        }
        if (!strcmp(argv[i], "--undirected"))
            o->is_undirected = true;
        else if (!strcmp(argv[i], "--json"))
            o->is_json = true;
        else
            return cmd_usage_error("inspect", "unknown option '%s'", argv[i]);
    }
    if (i >= argc)
        return cmd_usage_error("inspect", "no input files");
    o->first_file = i;
    return CMD_OK;
}

static weft_err load_all(int argc, char **argv, const inspect_opts *o, weft_graph_stats *st,
                         weft_error *err)
{
    weft_graph *g = NULL;
    weft_err rc = weft_graph_new(o->is_undirected ? WEFT_GRAPH_UNDIRECTED : 0, &g, err);
    for (int i = o->first_file; rc == WEFT_OK && i < argc; i++)
        rc = weft_graph_load_edges(g, argv[i], err);
    if (rc == WEFT_OK)
        rc = weft_graph_finalize(g, err);
    if (rc == WEFT_OK)
        rc = weft_graph_stats_compute(g, st, err);
    weft_graph_free(g);
    return rc;
}

static void print_table(const weft_graph_stats *st)
{
    const char *fmt = "%-24s %zu\n";
    printf(fmt, "nodes", st->n_nodes);
    printf(fmt, "edges", st->n_edges);
    printf(fmt, "relations", st->n_relations);
    printf(fmt, "input lines", st->n_input_edges);
    printf(fmt, "duplicates dropped", st->n_duplicates);
    printf(fmt, "self-loops", st->n_self_loops);
    printf("%-24s %zu / %g / %zu\n", "degree min/median/max", st->degree_min, st->degree_median,
           st->degree_max);
    printf(fmt, "isolated nodes", st->n_isolated);
    printf(fmt, "components", st->n_components);
    printf(fmt, "largest component", st->largest_component);
}

static weft_err print_json(const weft_graph_stats *st, weft_error *err)
{
    json_t *j = json_pack("{s:I, s:I, s:I, s:I, s:I, s:I, s:{s:I, s:f, s:I}, s:I, s:{s:I, s:I}}",
                          "nodes", (json_int_t)st->n_nodes,
                          "edges", (json_int_t)st->n_edges,
                          "relations", (json_int_t)st->n_relations,
                          "input_edges", (json_int_t)st->n_input_edges,
                          "duplicates", (json_int_t)st->n_duplicates,
                          "self_loops", (json_int_t)st->n_self_loops,
                          "degree", "min", (json_int_t)st->degree_min,
                          "median", st->degree_median,
                          "max", (json_int_t)st->degree_max,
                          "isolated", (json_int_t)st->n_isolated,
                          "components", "count", (json_int_t)st->n_components,
                          "largest", (json_int_t)st->largest_component);
    if (!j)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for JSON output");
    int bad = json_dumpf(j, stdout, JSON_INDENT(2) | JSON_PRESERVE_ORDER);
    json_decref(j);
    if (bad || fputc('\n', stdout) == EOF)
        return weft_error_set(err, WEFT_ERR_IO, "stdout: write failed");
    return WEFT_OK;
}

int cmd_inspect_main(int argc, char **argv)
{
    inspect_opts o = { false, false, false, 0 };
    int status = parse_args(argc, argv, &o);
    if (status != CMD_OK)
        return status;
    if (o.is_help) {
        fputs(inspect_usage, stdout);
        return CMD_OK;
    }
    weft_error err = { WEFT_OK, "" };
    weft_graph_stats st;
    weft_err rc = load_all(argc, argv, &o, &st, &err);
    if (rc == WEFT_OK && o.is_json)
        rc = print_json(&st, &err);
    else if (rc == WEFT_OK)
        print_table(&st);
    if (rc == WEFT_OK && fflush(stdout) != 0)
        rc = weft_error_set(&err, WEFT_ERR_IO, "stdout: write failed");
    return rc == WEFT_OK ? CMD_OK : cmd_report_error(&err);
}
