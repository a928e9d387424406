/* weft snapshots: list, show, promote, roll back, prune, verify, export and import the
 * versions of a store. Everything it changes goes through include/weft/store.h. */
#include <jansson.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "cmd.h"
#include "weft/store.h"

#define SUB "snapshots"

static const char usage_text[] =
    "usage: weft snapshots ACTION [ARGS] --store DIR [--json]\n"
    "\n"
    "Look after the versioned snapshots of a store.\n"
    "\n"
    "actions:\n"
    "  list              every version: state, created, model kinds, key metric, size\n"
    "  show V            one version: manifest summary, history, blobs\n"
    "  promote V         verify V, then make it live; the live one becomes previous\n"
    "  rollback          verify the previous version, then make it live again\n"
    "  prune --keep N    delete the oldest versions so that at most N remain besides\n"
    "                    live and previous (which are never deleted)\n"
    "  verify [V]        check every blob's header and CRC-32 (all versions without V)\n"
    "  export V FILE     write V to one snapshot file (FILE.tmp, then renamed)\n"
    "  import FILE       add a snapshot file as the next version, staged (never live)\n"
    "V is a version number; show, verify and export also take 'live' or 'previous'.\n"
    "\n"
    "options:\n"
    "  --store DIR       the store (required)\n"
    "  --json            print JSON instead of a table or text\n"
    "  --force           promote: promote a rejected version anyway (recorded as forced)\n"
    "  --reason TEXT     promote, rollback: why, kept in the version's history\n"
    "                    (default: none)\n"
    "  --keep N          prune: versions to keep besides live and previous, 0 to 1000000\n"
    "                    (required with prune)\n"
    "  --help            print this help\n"
    "\n"
    "Exit status: 0 done, 1 failed (verify: a problem was found), 2 bad arguments.\n";

enum action { LIST, SHOW, PROMOTE, ROLLBACK, PRUNE, VERIFY, EXPORT, IMPORT };

static const struct {
    const char *name;
    int min_args, max_args;   /* positional arguments after the action */
} actions[] = {
    [LIST] = { "list", 0, 0 },       [SHOW] = { "show", 1, 1 },
    [PROMOTE] = { "promote", 1, 1 }, [ROLLBACK] = { "rollback", 0, 0 },
    [PRUNE] = { "prune", 0, 0 },     [VERIFY] = { "verify", 0, 1 },
    [EXPORT] = { "export", 2, 2 },   [IMPORT] = { "import", 1, 1 },
};

/* Which version a V argument names: a number, or the head's live / previous. */
struct version_arg {
    uint64_t number;     /* 0 when a head word */
    const char *head;    /* "live", "previous" or NULL */
};

struct snap_opts {
    enum action action;
    struct version_arg version;   /* the V argument of show, promote, verify, export */
    const char *store;
    const char *args[2];
    int n_args;
    bool is_json, is_force, has_keep;
    const char *reason;
    uint64_t keep;
};

static bool parse_version(const char *text, bool allow_head, struct version_arg *out)
{
    out->number = 0;
    out->head = NULL;
    if (allow_head && (!strcmp(text, "live") || !strcmp(text, "previous"))) {
        out->head = text;
        return true;
    }
    return cmd_parse_u64(SUB, "version", text, 1, INT64_MAX, &out->number);
}

/* One option at argv[*i]; returns CMD_OK, or CMD_USAGE after printing the problem. */
static int parse_option(int argc, char **argv, int *i, struct snap_opts *o)
{
    bool bad = false;
    const char *v;
    if (!strcmp(argv[*i], "--json"))
        o->is_json = true;
    else if (!strcmp(argv[*i], "--force"))
        o->is_force = true;
    else if ((v = cmd_opt_value(SUB, argc, argv, i, "--store", &bad)))
        o->store = v;
    else if ((v = cmd_opt_value(SUB, argc, argv, i, "--reason", &bad)))
        o->reason = v;
    else if ((v = cmd_opt_value(SUB, argc, argv, i, "--keep", &bad))) {
        if (!cmd_parse_u64(SUB, "--keep", v, 0, 1000000, &o->keep))
            return CMD_USAGE;
        o->has_keep = true;
    } else if (!bad)
        return cmd_usage_error(SUB, "unknown option '%s'", argv[*i]);
    return bad ? CMD_USAGE : CMD_OK;
}

/* Options that make sense only with some actions are refused with the others. */
static int check_combination(const struct snap_opts *o)
{
    const char *name = actions[o->action].name;
    if (o->is_force && o->action != PROMOTE)
        return cmd_usage_error(SUB, "--force goes with promote, not %s", name);
    if (o->reason && o->action != PROMOTE && o->action != ROLLBACK)
        return cmd_usage_error(SUB, "--reason goes with promote or rollback, not %s", name);
    if (o->has_keep != (o->action == PRUNE))
        return o->has_keep ? cmd_usage_error(SUB, "--keep goes with prune, not %s", name)
                           : cmd_usage_error(SUB, "prune needs --keep N");
    if (o->n_args < actions[o->action].min_args || o->n_args > actions[o->action].max_args)
        return cmd_usage_error(SUB, "%s takes %s", name,
                               o->action == SHOW || o->action == PROMOTE ? "one version V"
                               : o->action == VERIFY                   ? "at most one version V"
                               : o->action == EXPORT                   ? "a version V and a FILE"
                               : o->action == IMPORT                   ? "one FILE"
                                                                       : "no arguments");
    if (!o->store)
        return cmd_usage_error(SUB, "--store DIR is required");
    return CMD_OK;
}

/* Returns CMD_OK (with o filled), -1 after printing the help, or CMD_USAGE. */
static int parse_args(int argc, char **argv, struct snap_opts *o)
{
    memset(o, 0, sizeof *o);
    if (argc < 2)
        return cmd_usage_error(SUB, "no action (list, show, promote, rollback, prune, verify, "
                                    "export, import)");
    for (int i = 1; i < argc; i++)
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            fputs(usage_text, stdout);
            return -1;
        }
    size_t a = 0;
    while (a < sizeof actions / sizeof actions[0] && strcmp(argv[1], actions[a].name))
        a++;
    if (a == sizeof actions / sizeof actions[0])
        return cmd_usage_error(SUB, "unknown action '%s'", argv[1]);
    o->action = (enum action)a;
    bool is_after_dashes = false;
    for (int i = 2; i < argc; i++) {
        if (!is_after_dashes && !strcmp(argv[i], "--")) {
            is_after_dashes = true;
        } else if (!is_after_dashes && argv[i][0] == '-' && argv[i][1] != '\0') {
            int rc = parse_option(argc, argv, &i, o);
            if (rc != CMD_OK)
                return rc;
        } else if (o->n_args < 2) {
            o->args[o->n_args++] = argv[i];
        } else {
            return cmd_usage_error(SUB, "unexpected argument '%s'", argv[i]);
        }
    }
    return check_combination(o);
}

/* ---- reading manifests ---- */

static const char *str_of(const json_t *m, const char *key)
{
    const char *s = json_string_value(json_object_get(m, key));
    return s ? s : "";
}

/* One model part of a manifest: its kind and its test metrics. Manifests hold "models"
 * ({"link": {...}, "labels": {...}}, each with "model" and "metrics"); older ones describe
 * their one model at the top level (kind "gcn" for labels, any other for links). */
struct part {
    const char *kind;       /* NULL: no such model */
    const json_t *test;     /* metrics.test, or NULL */
    const json_t *record;   /* models.<part>, or the manifest itself */
};

static struct part find_part(const json_t *m, bool is_labels)
{
    struct part p = { NULL, NULL, NULL };
    const json_t *rec = json_object_get(json_object_get(m, "models"), is_labels ? "labels"
                                                                               : "link");
    if (!rec && !json_object_get(m, "models")) {
        const char *kind = json_string_value(json_object_get(json_object_get(m, "model"),
                                                             "kind"));
        if (kind && (!strcmp(kind, "gcn")) == is_labels)
            rec = m;
    }
    if (!rec)
        return p;
    p.record = rec;
    p.kind = json_string_value(json_object_get(json_object_get(rec, "model"), "kind"));
    if (!p.kind)
        p.kind = "?";
    p.test = json_object_get(json_object_get(rec, "metrics"), "test");
    return p;
}

/* Bytes the blobs of manifest @p m take in the store (headers included). */
static double stored_bytes(const json_t *m)
{
    double sum = 0;
    const char *name;
    const json_t *desc;
    json_object_foreach(json_object_get(m, "blobs"), name, desc)
        sum += (double)json_integer_value(json_object_get(desc, "bytes")) +
               WEFT_BLOB_HEADER_BYTES;
    return sum;
}

/* "dot", "distmult+gcn", "-" */
static void kinds_text(const json_t *m, char *out, size_t cap)
{
    struct part link = find_part(m, false), labels = find_part(m, true);
    snprintf(out, cap, "%s%s%s", link.kind ? link.kind : "", link.kind && labels.kind ? "+" : "",
             labels.kind ? labels.kind : (link.kind ? "" : "-"));
}

/* "MRR 0.1862", "acc 0.8140", both, or "-". */
static void metric_text(const json_t *m, char *out, size_t cap)
{
    struct part link = find_part(m, false), labels = find_part(m, true);
    const json_t *mrr = json_object_get(link.test, "mrr");
    const json_t *acc = json_object_get(labels.test, "accuracy");
    char a[32] = "", b[32] = "";
    if (json_is_number(mrr))
        snprintf(a, sizeof a, "MRR %.4f", json_number_value(mrr));
    if (json_is_number(acc))
        snprintf(b, sizeof b, "acc %.4f", json_number_value(acc));
    snprintf(out, cap, "%s%s%s", a, a[0] && b[0] ? ", " : "", a[0] || b[0] ? b : "-");
}

/* A short note: why rejected, forced, imported. */
static void note_text(const json_t *m, char *out, size_t cap)
{
    out[0] = '\0';
    if (json_is_true(json_object_get(m, "forced")))
        snprintf(out, cap, "forced past the gate");
    else if (!strcmp(str_of(m, "state"), "rejected"))
        snprintf(out, cap, "%s", json_object_get(m, "reason") ? str_of(m, "reason")
                                                               : "rejected");
    if (json_object_get(m, "origin") && !out[0])
        snprintf(out, cap, "imported");
}

/* Write @p j to stdout as indented JSON and a newline. */
static weft_err print_json(const json_t *j, weft_error *err)
{
    if (!j)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for JSON output");
    if (json_dumpf(j, stdout, JSON_INDENT(2) | JSON_REAL_PRECISION(10)) ||
        fputc('\n', stdout) == EOF)
        return weft_error_set(err, WEFT_ERR_IO, "stdout: write failed");
    return WEFT_OK;
}

/* Print @p j (a new reference, consumed) as JSON. */
static weft_err print_json_new(json_t *j, weft_error *err)
{
    weft_err e = print_json(j, err);
    json_decref(j);
    return e;
}

static void note_stale_readers(const weft_store *s, const struct snap_opts *o)
{
    size_t n = weft_store_stale_readers(s);
    if (n && !o->is_json)
        fprintf(stderr, "weft: note: cleared %zu reader slot%s left by crashed processes\n", n,
                n == 1 ? "" : "s");
}

/* ---- list ---- */

json_t *cmd_snapshots_summary_json(const json_t *m, uint64_t previous)
{
    json_t *j = json_pack("{s:O?, s:O?, s:O?, s:b, s:I}", "version", json_object_get(m, "version"),
                          "state", json_object_get(m, "state"), "created",
                          json_object_get(m, "created"), "is_previous",
                          (uint64_t)json_integer_value(json_object_get(m, "version")) ==
                              previous,
                          "bytes", (json_int_t)stored_bytes(m));
    for (int is_labels = 0; j && is_labels <= 1; is_labels++) {
        struct part p = find_part(m, is_labels);
        const char *metric = is_labels ? "accuracy" : "mrr";
        if (!p.kind)
            continue;
        json_t *part = json_pack("{s:s}", "kind", p.kind);
        if (part && json_object_get(p.test, metric))
            json_object_set(part, is_labels ? "test_accuracy" : "test_mrr",
                            json_object_get(p.test, metric));
        json_object_set_new(j, is_labels ? "labels" : "link", part);
    }
    const char *keys[] = { "reason", "forced", "origin" };
    for (size_t i = 0; j && i < sizeof keys / sizeof keys[0]; i++)
        if (json_object_get(m, keys[i]))
            json_object_set(j, keys[i], json_object_get(m, keys[i]));
    return j;
}

static void print_list_row(const json_t *m, uint64_t previous)
{
    char kinds[64], metric[64], note[96], size[16], state[32];
    uint64_t v = (uint64_t)json_integer_value(json_object_get(m, "version"));
    kinds_text(m, kinds, sizeof kinds);
    metric_text(m, metric, sizeof metric);
    note_text(m, note, sizeof note);
    snprintf(state, sizeof state, "%s%s", str_of(m, "state"), v == previous ? ", previous" : "");
    printf("%7llu  %-17s  %-20s  %-14s  %-24s  %10s%s%s\n", (unsigned long long)v, state,
           str_of(m, "created"), kinds, metric, weft_store_format_bytes(stored_bytes(m), size),
           note[0] ? "  " : "", note);
}

static weft_err do_list(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    json_t *all = NULL;
    uint64_t live = 0, previous = 0;
    weft_err e = weft_store_head(s, &live, &previous, err);
    if (e == WEFT_OK)
        e = weft_store_list(s, &all, err);
    if (e != WEFT_OK)
        return e;
    size_t i;
    json_t *m;
    if (o->is_json) {
        json_t *rows = json_array();
        json_array_foreach(all, i, m)
            json_array_append_new(rows, cmd_snapshots_summary_json(m, previous));
        e = print_json_new(json_pack("{s:s, s:I, s:I, s:I, s:o}", "store", o->store, "live",
                                     (json_int_t)live, "previous", (json_int_t)previous,
                                     "stale_readers_cleared",
                                     (json_int_t)weft_store_stale_readers(s), "snapshots", rows),
                           err);
    } else if (json_array_size(all) == 0) {
        printf("no snapshots in %s\n", o->store);
    } else {
        printf("%7s  %-17s  %-20s  %-14s  %-24s  %10s  %s\n", "version", "state", "created",
               "model", "key metric (test)", "size", "note");
        json_array_foreach(all, i, m)
            print_list_row(m, previous);
    }
    json_decref(all);
    return e;
}

/* ---- show ---- */

static weft_err resolve(weft_store *s, const struct version_arg *a, uint64_t *out,
                        weft_error *err)
{
    uint64_t live = 0, previous = 0;
    if (!a->head) {
        *out = a->number;
        return WEFT_OK;
    }
    weft_err e = weft_store_head(s, &live, &previous, err);
    if (e != WEFT_OK)
        return e;
    *out = !strcmp(a->head, "live") ? live : previous;
    if (!*out)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: no %s version", weft_store_dir(s),
                              a->head);
    return WEFT_OK;
}

static void print_history(const json_t *m)
{
    size_t i;
    const json_t *h;
    printf("history:\n");
    json_array_foreach(json_object_get(m, "history"), i, h) {
        json_int_t prev = json_integer_value(json_object_get(h, "previous"));
        printf("  %-20s  %-8s  %s%s", str_of(h, "at"), str_of(h, "state"), str_of(h, "reason"),
               json_is_true(json_object_get(h, "forced")) ? " (forced)" : "");
        if (prev)
            printf(" (previous: %lld)", (long long)prev);
        printf("\n");
    }
    if (!json_array_size(json_object_get(m, "history")))
        printf("  (not recorded)\n");
}

static void print_blobs(const json_t *m)
{
    const char *name;
    const json_t *desc;
    char size[16];
    printf("blobs (%zu, %s):\n", json_object_size(json_object_get(m, "blobs")),
           weft_store_format_bytes(stored_bytes(m), size));
    printf("  %-24s  %-5s  %-20s  %12s  %s\n", "name", "dtype", "shape", "bytes", "crc32");
    json_object_foreach(json_object_get(m, "blobs"), name, desc) {
        char shape[64] = "";
        size_t i, at = 0;
        const json_t *d;
        json_array_foreach(json_object_get(desc, "shape"), i, d)
            if (at < sizeof shape)
                at += (size_t)snprintf(shape + at, sizeof shape - at, "%s%lld", i ? " x " : "",
                                       (long long)json_integer_value(d));
        printf("  %-24s  %-5s  %-20s  %12lld  %08llx\n", name, str_of(desc, "dtype"), shape,
               (long long)json_integer_value(json_object_get(desc, "bytes")),
               (unsigned long long)json_integer_value(json_object_get(desc, "crc32")));
    }
}

static void print_manifest(const json_t *m, uint64_t previous)
{
    char kinds[64], metric[64];
    uint64_t v = (uint64_t)json_integer_value(json_object_get(m, "version"));
    kinds_text(m, kinds, sizeof kinds);
    metric_text(m, metric, sizeof metric);
    printf("version %llu: %s%s\n", (unsigned long long)v, str_of(m, "state"),
           v == previous ? " (previous)" : "");
    printf("  created     %s\n", str_of(m, "created"));
    if (json_is_integer(json_object_get(m, "parent")))
        printf("  parent      %lld\n", (long long)json_integer_value(json_object_get(m, "parent")));
    printf("  model       %s\n  key metric  %s (test)\n", kinds, metric);
    if (json_object_get(m, "reason"))
        printf("  rejected    %s\n", str_of(m, "reason"));
    if (json_is_true(json_object_get(m, "forced")))
        printf("  forced      %s\n", str_of(m, "forced_at"));
    const json_t *gate = json_object_get(m, "gate");
    if (gate)
        printf("  gate        %s%s%s\n", json_is_true(json_object_get(gate, "passed"))
                                              ? "passed" : "refused",
               json_object_get(gate, "reason") ? ": " : "", str_of(gate, "reason"));
    const json_t *origin = json_object_get(m, "origin");
    if (origin)
        printf("  imported    %s from %s (SHA-256 %s)\n", str_of(origin, "imported"),
               str_of(origin, "file"), str_of(origin, "sha256"));
    size_t i;
    const json_t *in;
    json_array_foreach(json_object_get(m, "inputs"), i, in)
        printf("  input       %s %s (SHA-256 %.16s...)\n", str_of(in, "role"), str_of(in, "path"),
               str_of(in, "sha256"));
    print_history(m);
    print_blobs(m);
}

static weft_err do_show(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    uint64_t v = 0, previous = 0;
    json_t *m = NULL;
    weft_err e = resolve(s, &o->version, &v, err);
    if (e == WEFT_OK)
        e = weft_store_head(s, NULL, &previous, err);
    if (e == WEFT_OK)
        e = weft_store_manifest(s, v, &m, err);
    if (e != WEFT_OK)
        return e;
    if (o->is_json)
        e = print_json(m, err);
    else
        print_manifest(m, previous);
    json_decref(m);
    return e;
}

/* ---- promote, rollback, prune ---- */

static weft_err do_promote(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    uint64_t live = 0, previous = 0;
    weft_store_change how = { o->reason, o->is_force };
    json_t *m = NULL;
    weft_err e = weft_store_promote_with(s, o->version.number, &how, err);
    if (e == WEFT_OK)
        e = weft_store_head(s, &live, &previous, err);
    if (e == WEFT_OK)
        e = weft_store_manifest(s, o->version.number, &m, err);
    if (e != WEFT_OK)
        return e;
    bool is_forced = json_is_true(json_object_get(m, "forced"));
    if (o->is_json)
        e = print_json_new(json_pack("{s:I, s:I, s:b}", "live", (json_int_t)live, "previous",
                                     (json_int_t)previous, "forced", is_forced), err);
    else
        printf("version %llu verified and live%s; previous: %llu\n", (unsigned long long)live,
               is_forced ? " (forced past its rejection)" : "", (unsigned long long)previous);
    json_decref(m);
    return e;
}

static weft_err do_rollback(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    uint64_t was = 0, live = 0, previous = 0;
    weft_store_change how = { o->reason, false };
    weft_err e = weft_store_head(s, &was, NULL, err);
    if (e == WEFT_OK)
        e = weft_store_rollback(s, &how, &live, err);
    if (e == WEFT_OK)
        e = weft_store_head(s, NULL, &previous, err);
    if (e != WEFT_OK)
        return e;
    if (o->is_json)
        return print_json_new(json_pack("{s:I, s:I, s:I}", "live", (json_int_t)live, "previous",
                                        (json_int_t)previous, "retired", (json_int_t)was),
                              err);
    printf("rolled back: version %llu verified and live, version %llu retired; previous: ",
           (unsigned long long)live, (unsigned long long)was);
    if (previous)
        printf("%llu\n", (unsigned long long)previous);
    else
        printf("none\n");
    return WEFT_OK;
}

static weft_err do_prune(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    json_t *deleted = NULL;
    weft_err e = weft_store_prune(s, (size_t)o->keep, &deleted, err);
    if (e != WEFT_OK)
        return e;
    size_t i;
    const json_t *d;
    double total = 0;
    char size[16];
    json_array_foreach(deleted, i, d)
        total += (double)json_integer_value(json_object_get(d, "bytes"));
    if (o->is_json) {
        e = print_json_new(json_pack("{s:O, s:I}", "deleted", deleted, "keep",
                                     (json_int_t)o->keep), err);
    } else {
        json_array_foreach(deleted, i, d)
            printf("deleted version %lld (%s, %s)\n",
                   (long long)json_integer_value(json_object_get(d, "version")),
                   str_of(d, "state"),
                   weft_store_format_bytes((double)json_integer_value(json_object_get(d, "bytes")), size));
        printf("pruned %zu version%s (%s); live and previous kept, with at most %llu more\n",
               json_array_size(deleted), json_array_size(deleted) == 1 ? "" : "s",
               weft_store_format_bytes(total, size), (unsigned long long)o->keep);
    }
    json_decref(deleted);
    return e;
}

/* ---- verify ---- */

static void print_report(const json_t *report)
{
    size_t i, j;
    const json_t *row, *p;
    char size[16];
    json_array_foreach(json_object_get(report, "versions"), i, row) {
        json_int_t v = json_integer_value(json_object_get(row, "version"));
        printf("version %lld: %lld blobs, %s: %s\n", (long long)v,
               (long long)json_integer_value(json_object_get(row, "blobs")),
               weft_store_format_bytes((double)json_integer_value(json_object_get(row, "bytes")), size),
               json_is_true(json_object_get(row, "ok")) ? "ok" : "DAMAGED");
        json_array_foreach(json_object_get(report, "problems"), j, p)
            if (json_integer_value(json_object_get(p, "version")) == v)
                printf("  %s%s%s%s\n", json_object_get(p, "blob") && !json_is_null(
                           json_object_get(p, "blob")) ? "blob '" : "",
                       str_of(p, "blob"), json_is_string(json_object_get(p, "blob")) ? "': " : "",
                       str_of(p, "problem"));
    }
    /* Problems of versions not verified as such: head entries, orphan blobs. */
    json_array_foreach(json_object_get(report, "problems"), j, p) {
        bool is_listed = false;
        json_array_foreach(json_object_get(report, "versions"), i, row)
            is_listed |= json_integer_value(json_object_get(row, "version")) ==
                         json_integer_value(json_object_get(p, "version"));
        if (!is_listed)
            printf("version %lld: %s\n",
                   (long long)json_integer_value(json_object_get(p, "version")),
                   str_of(p, "problem"));
    }
}

static weft_err do_verify(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    uint64_t v = 0;
    json_t *report = NULL;
    size_t n = 0;
    weft_err e = o->n_args ? resolve(s, &o->version, &v, err) : WEFT_OK;
    if (e == WEFT_OK)
        e = weft_store_verify(s, v, &report, &n, err);
    if (e != WEFT_OK)
        return e;
    size_t n_versions = json_array_size(json_object_get(report, "versions"));
    if (o->is_json) {
        e = print_json(report, err);
    } else {
        print_report(report);
        if (!n)
            printf("verified %zu version%s: no problems\n", n_versions,
                   n_versions == 1 ? "" : "s");
    }
    json_decref(report);
    if (e == WEFT_OK && n)
        e = weft_error_set(err, WEFT_ERR_CORRUPT, "%s: verification failed: %zu problem%s",
                           o->store, n, n == 1 ? "" : "s");
    return e;
}

/* ---- export, import ---- */

static weft_err do_export(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    uint64_t v = 0;
    char sha[65], size[16];
    struct stat st;
    weft_err e = resolve(s, &o->version, &v, err);
    if (e == WEFT_OK)
        e = weft_store_export(s, v, o->args[1], sha, err);
    if (e != WEFT_OK)
        return e;
    double bytes = stat(o->args[1], &st) == 0 ? (double)st.st_size : 0;
    if (o->is_json)
        return print_json_new(json_pack("{s:I, s:s, s:I, s:s}", "version", (json_int_t)v,
                                        "file", o->args[1], "bytes", (json_int_t)bytes,
                                        "sha256", sha),
                              err);
    printf("exported version %llu to %s (%s, SHA-256 %s)\n", (unsigned long long)v, o->args[1],
           weft_store_format_bytes(bytes, size), sha);
    return WEFT_OK;
}

static weft_err do_import(weft_store *s, const struct snap_opts *o, weft_error *err)
{
    uint64_t v = 0;
    weft_err e = weft_store_import(s, o->args[0], &v, err);
    if (e != WEFT_OK)
        return e;
    if (o->is_json)
        return print_json_new(json_pack("{s:I, s:s, s:s}", "version", (json_int_t)v, "state",
                                        "staged", "file", o->args[0]),
                              err);
    printf("imported %s as version %llu (staged); make it live with: weft snapshots promote "
           "%llu --store %s\n", o->args[0], (unsigned long long)v, (unsigned long long)v,
           o->store);
    return WEFT_OK;
}

/* ---- main ---- */

/* Read-only actions open the store read-only; import may create it; the others need one. */
static weft_err open_store(const struct snap_opts *o, weft_store **out, weft_error *err)
{
    bool is_reader = o->action == LIST || o->action == SHOW || o->action == VERIFY ||
                     o->action == EXPORT;
    if (is_reader)
        return weft_store_open(o->store, WEFT_STORE_READONLY, 0, out, err);
    if (o->action == IMPORT)
        return weft_store_open(o->store, WEFT_STORE_CREATE, 0, out, err);
    char path[4096];
    struct stat st;
    snprintf(path, sizeof path, "%s/data.mdb", o->store);
    if (stat(path, &st) != 0)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s: no store here", o->store);
    return weft_store_open(o->store, 0, 0, out, err);
}

/* What import found before it opened (and so created) the store, so that a failed import
 * into a directory that held no store leaves none behind. */
struct store_before {
    bool had_dir, had_store;
};

static struct store_before look_before(const char *dir)
{
    char path[4096];
    struct stat st;
    struct store_before b = { stat(dir, &st) == 0, false };
    snprintf(path, sizeof path, "%s/data.mdb", dir);
    b.had_store = stat(path, &st) == 0;
    return b;
}

static void undo_new_store(const char *dir, const struct store_before *b)
{
    char path[4096];
    if (b->had_store)
        return;
    snprintf(path, sizeof path, "%s/data.mdb", dir);
    unlink(path);
    snprintf(path, sizeof path, "%s/lock.mdb", dir);
    unlink(path);
    if (!b->had_dir)
        rmdir(dir);
}

int cmd_snapshots_main(int argc, char **argv)
{
    struct snap_opts o;
    int status = parse_args(argc, argv, &o);
    if (status != CMD_OK)
        return status < 0 ? CMD_OK : status;
    /* Version arguments are checked before the store is touched: a usage error is exit 2. */
    bool allow_head = o.action != PROMOTE;
    if ((o.action == SHOW || o.action == PROMOTE || o.action == EXPORT ||
         (o.action == VERIFY && o.n_args)) && !parse_version(o.args[0], allow_head, &o.version))
        return CMD_USAGE;
    weft_error err;
    weft_error_clear(&err);
    weft_store *s = NULL;
    struct store_before before = look_before(o.store);
    weft_err e = open_store(&o, &s, &err);
    if (e == WEFT_OK) {
        static weft_err (*const run[])(weft_store *, const struct snap_opts *, weft_error *) = {
            [LIST] = do_list,       [SHOW] = do_show,     [PROMOTE] = do_promote,
            [ROLLBACK] = do_rollback, [PRUNE] = do_prune, [VERIFY] = do_verify,
            [EXPORT] = do_export,   [IMPORT] = do_import,
        };
        e = run[o.action](s, &o, &err);
        if (o.action == LIST || o.action == VERIFY)
            note_stale_readers(s, &o);
    }
    weft_store_close(s);
    if (e != WEFT_OK && o.action == IMPORT)
        undo_new_store(o.store, &before);
    if (e == WEFT_OK && fflush(stdout) != 0)
        e = weft_error_set(&err, WEFT_ERR_IO, "stdout: write failed");
    return e == WEFT_OK ? CMD_OK : cmd_report_error(&err);
}
