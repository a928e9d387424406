/* weft sync: keeps a local store in step with a directory of snapshot files written by
 * `weft snapshots export`, for replicas of `weft serve` that each serve their own store.
 *
 * Every --interval it lists the directory, imports each new file (weft_store_import, which
 * checks the whole file before it writes anything), makes the newest export live and prunes
 * to --keep. The files:
 *   - Only names ending in ".snap" and not starting with '.' are read; anything else (a
 *     "NAME.snap.tmp" still being written, lost+found, hidden files) is left alone. A writer
 *     writes under another name in the same directory and renames, so a ".snap" name always
 *     holds a complete file; `weft snapshots export V DIR/NAME.snap` does so by itself.
 *   - A file is looked at again only when its size, time or inode change. One that fails to
 *     import (not a snapshot, truncated, checksum or CRC mismatch) is reported once, never
 *     promoted, and skipped until it changes; the store is untouched by it.
 *   - A file that a stored version was imported from (its "origin" names the same path and
 *     the file's trailing SHA-256, DEVELOPERS.md "Snapshot files") is that version: it is not
 *     imported again after a restart. A copy under another name is imported (and so checked)
 *     like any new file.
 * Which version is live: of the files now in the directory that imported, the one whose
 * manifest was "created" last (set where it was trained; exports keep it), a tie going to the
 * name that sorts last. It is promoted when that choice changes, so the arrival order of
 * files does not matter, a version promoted by hand stays until the directory changes, and
 * removing the newest file makes the next newest live again (it is imported again if it had
 * been pruned).
 * SIGTERM or SIGINT stops it between steps: an import in progress is finished first. */
#include <dirent.h>
#include <errno.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <time.h>
#include <unistd.h>

#include <jansson.h>

#include "cmd.h"
#include "weft/store.h"

#define SUB "sync"
#define SUFFIX ".snap"
#define SHA256_BYTES 32
#define DEFAULT_INTERVAL 10.0
#define DEFAULT_KEEP 2

static const char usage_text[] =
    "usage: weft sync --from DIR --store DIR [--interval DURATION] [--keep N] [--once]\n"
    "\n"
    "Keeps a local store in step with a directory of snapshot files written by\n"
    "'weft snapshots export': imports each new file, makes the newest export live and\n"
    "prunes old versions. Run one beside each 'weft serve' that has its own store.\n"
    "\n"
    "  --from DIR           the directory of snapshot files (required); only names that\n"
    "                       end in .snap and do not start with '.' are read\n"
    "  --store DIR          the local store (required; created when missing)\n"
    "  --interval DURATION  how often DIR is looked at: seconds, or a number with s, m, h\n"
    "                       or d (default 10s)\n"
    "  --keep N             versions kept besides live and previous; older ones are pruned\n"
    "                       (default 2; 0 keeps all)\n"
    "  --once               look once, then exit\n"
    "  --help               print this help\n"
    "\n"
    "Writers write under another name in DIR and rename: 'weft snapshots export V\n"
    "DIR/NAME.snap' writes NAME.snap.tmp and renames it. A file that does not import (not\n"
    "a snapshot, truncated, damaged) is reported once and skipped until its size or time\n"
    "change; it is never made live and the store is left as it was.\n"
    "\n"
    "The live version: of the files now in DIR that imported, the one created last (the\n"
    "'created' time in its manifest, kept from the store it was exported from; a tie goes\n"
    "to the file name that sorts last). It is promoted when that choice changes: removing\n"
    "the newest file from DIR makes the next newest live again.\n"
    "\n"
    "Logs each step on stderr. SIGTERM or SIGINT stops it between steps (an import in\n"
    "progress is finished first). Exit status: 0 done or stopped; 1 the store cannot be\n"
    "opened, or with --once DIR or the store failed; 2 bad arguments.\n";

struct sync_opts {
    const char *from, *store;
    double interval;
    uint64_t keep;
    bool is_once;
};

/* One ".snap" file of the directory, as it was when last looked at. */
enum export_state { EXPORT_STORED, EXPORT_BAD };

struct export_file {
    char *name;                 /* owned; within --from */
    dev_t dev;
    ino_t ino;
    off_t size;
    struct timespec mtime;
    enum export_state state;
    uint64_t version;           /* STORED: its local version; 0 once pruned */
    char created[40];           /* STORED: the manifest's "created" (ISO 8601, UTC) */
    bool is_seen;               /* found by the current look */
};

struct sync_state {
    const struct sync_opts *o;
    char from[4096];            /* --from as an absolute path: what "origin" records */
    weft_store *store;
    struct export_file *files;
    size_t n_files, cap_files;
    uint64_t last_target;       /* the version this process last made (or found) live */
    char dir_problem[256];      /* the last problem reading --from, logged once */
    bool has_changed;           /* this look imported or promoted something */
};

/* Set by SIGTERM / SIGINT; read between steps. */
static volatile sig_atomic_t stop_requested;

static void on_stop(int sig)
{
    (void)sig;
    stop_requested = 1;
}

/* ---- options ---- */

/* Returns CMD_OK (with o filled), -1 after printing the help, or CMD_USAGE. */
static int parse_args(int argc, char **argv, struct sync_opts *o)
{
    memset(o, 0, sizeof *o);
    o->interval = DEFAULT_INTERVAL;
    o->keep = DEFAULT_KEEP;
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            fputs(usage_text, stdout);
            return -1;
        } else if (!strcmp(argv[i], "--once")) {
            o->is_once = true;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--from", &bad))) {
            o->from = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--store", &bad))) {
            o->store = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--interval", &bad))) {
            if (!cmd_parse_duration(v, &o->interval) || o->interval < 0.1 || o->interval > 86400)
                return cmd_usage_error(SUB, "--interval: '%s' is not a duration from 0.1s to "
                                       "1d (for example 10s, 5m)", v);
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--keep", &bad))) {
            if (!cmd_parse_u64(SUB, "--keep", v, 0, 1000000, &o->keep))
                return CMD_USAGE;
        } else {
            return bad ? CMD_USAGE : cmd_usage_error(SUB, "unknown argument '%s'", argv[i]);
        }
    }
    if (!o->from)
        return cmd_usage_error(SUB, "--from DIR is required");
    if (!o->store)
        return cmd_usage_error(SUB, "--store DIR is required");
    return CMD_OK;
}

/* ---- the files ---- */

static bool is_export_name(const char *name)
{
    size_t n = strlen(name), k = strlen(SUFFIX);
    return name[0] != '.' && n > k && !strcmp(name + n - k, SUFFIX);
}

static int compare_names(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* The export names in --from, sorted (caller frees each and the array). False when the
 * directory cannot be read (logged once per distinct problem). */
static bool list_exports(struct sync_state *st, char ***out, size_t *n_out)
{
    DIR *d = opendir(st->o->from);
    if (!d) {
        char problem[sizeof st->dir_problem];
        snprintf(problem, sizeof problem, "%s: %s", st->o->from, strerror(errno));
        if (strcmp(problem, st->dir_problem))
            cmd_log(SUB, "cannot read %s%s", problem, st->o->is_once ? "" : " (will retry)");
        snprintf(st->dir_problem, sizeof st->dir_problem, "%s", problem);
        return false;
    }
    if (st->dir_problem[0])
        cmd_log(SUB, "%s is readable again", st->o->from);
    st->dir_problem[0] = '\0';
    char **names = NULL;
    size_t n = 0, cap = 0;
    bool ok = true;
    const struct dirent *de;
    while (ok && (de = readdir(d))) {
        if (!is_export_name(de->d_name))
            continue;
        if (n == cap) {
            size_t grown = cap ? 2 * cap : 16;
            char **more = realloc(names, grown * sizeof *names);
            ok = more != NULL;
            names = ok ? more : names;
            cap = ok ? grown : cap;
        }
        if (ok && !(names[n] = strdup(de->d_name)))
            ok = false;
        n += ok;
    }
    closedir(d);
    if (!ok) {
        cmd_log(SUB, "out of memory listing %s", st->o->from);
        for (size_t i = 0; i < n; i++)
            free(names[i]);
        free(names);
        return false;
    }
    if (n)
        qsort(names, n, sizeof *names, compare_names);
    *out = names;
    *n_out = n;
    return true;
}

static struct export_file *find_file(struct sync_state *st, const char *name)
{
    for (size_t i = 0; i < st->n_files; i++)
        if (!strcmp(st->files[i].name, name))
            return &st->files[i];
    return NULL;
}

static bool same_stat(const struct export_file *f, const struct stat *sb)
{
    return f->dev == sb->st_dev && f->ino == sb->st_ino && f->size == sb->st_size &&
           f->mtime.tv_sec == sb->st_mtim.tv_sec && f->mtime.tv_nsec == sb->st_mtim.tv_nsec;
}

/* A new entry for @p name, or NULL when out of memory. */
static struct export_file *add_file(struct sync_state *st, const char *name)
{
    if (st->n_files == st->cap_files) {
        size_t grown = st->cap_files ? 2 * st->cap_files : 16;
        struct export_file *more = realloc(st->files, grown * sizeof *more);
        if (!more)
            return NULL;
        st->files = more;
        st->cap_files = grown;
    }
    struct export_file *f = &st->files[st->n_files];
    memset(f, 0, sizeof *f);
    if (!(f->name = strdup(name)))
        return NULL;
    st->n_files++;
    return f;
}

static void remove_file(struct sync_state *st, struct export_file *f)
{
    free(f->name);
    *f = st->files[--st->n_files];
}

/* The trailing SHA-256 of snapshot file @p path as 64 hex digits; false when the file is
 * too short or unreadable (importing it then says why). */
static bool read_trailer(const char *path, char hex[65])
{
    unsigned char sha[SHA256_BYTES];
    FILE *f = fopen(path, "rb");
    if (!f)
        return false;
    bool ok = fseek(f, -(long)SHA256_BYTES, SEEK_END) == 0 &&
              fread(sha, 1, sizeof sha, f) == sizeof sha;
    fclose(f);
    for (size_t i = 0; ok && i < sizeof sha; i++)
        snprintf(hex + 2 * i, 3, "%02x", sha[i]);
    return ok;
}

/* The stored version imported from file @p path with SHA-256 @p hex, with its "created";
 * 0 when none. */
static uint64_t stored_from(struct sync_state *st, const char *path, const char *hex,
                            char created[40], weft_error *err)
{
    json_t *all = NULL;
    uint64_t found = 0;
    if (weft_store_list(st->store, &all, err) != WEFT_OK)
        return 0;
    size_t i;
    const json_t *m;
    json_array_foreach(all, i, m) {
        const json_t *origin = json_object_get(m, "origin");
        const char *sha = json_string_value(json_object_get(origin, "sha256"));
        const char *file = json_string_value(json_object_get(origin, "file"));
        if (sha && file && !strcmp(sha, hex) && !strcmp(file, path)) {
            found = (uint64_t)json_integer_value(json_object_get(m, "version"));
            const char *c = json_string_value(json_object_get(m, "created"));
            snprintf(created, 40, "%s", c ? c : "");
        }
    }
    json_decref(all);
    return found;
}

/* Import @p f (at @p path), or find it already stored. A file at fault (unreadable, not a
 * snapshot, damaged) becomes EXPORT_BAD, reported once; WEFT_OK then. Any other failure is
 * the store's: returned, and the file is tried again at the next look. */
static weft_err take_file(struct sync_state *st, struct export_file *f, const char *path,
                          weft_error *err)
{
    char hex[65];
    weft_error_clear(err);
    bool has_trailer = read_trailer(path, hex);
    if (has_trailer) {
        uint64_t v = stored_from(st, path, hex, f->created, err);
        if (err->code != WEFT_OK)
            return err->code;
        if (v) {
            f->state = EXPORT_STORED;
            f->version = v;
            cmd_log(SUB, "%s: already stored as version %llu (created %s)", f->name,
                    (unsigned long long)v, f->created);
            return WEFT_OK;
        }
    }
    uint64_t v = 0;
    json_t *m = NULL;
    weft_err e = weft_store_import(st->store, path, &v, err);
    /* An I/O error on a file whose end could be read is the store's (a full disk): tried
     * again at the next look. */
    if (e == WEFT_ERR_CORRUPT || (e == WEFT_ERR_IO && !has_trailer)) {
        f->state = EXPORT_BAD;
        cmd_log(SUB, "skipping %s: %s (not looked at again until it changes)", f->name,
                err->msg);
        weft_error_clear(err);
        return WEFT_OK;
    }
    if (e == WEFT_OK)
        e = weft_store_manifest(st->store, v, &m, err);
    if (e != WEFT_OK)
        return e;
    const char *created = json_string_value(json_object_get(m, "created"));
    snprintf(f->created, sizeof f->created, "%s", created ? created : "");
    json_decref(m);
    f->state = EXPORT_STORED;
    f->version = v;
    st->has_changed = true;
    cmd_log(SUB, "imported %s as version %llu (created %s)", f->name, (unsigned long long)v,
            f->created);
    return WEFT_OK;
}

/* Look at export @p name: new or changed files are taken; unchanged ones are marked seen. */
static weft_err look_at(struct sync_state *st, const char *name, weft_error *err)
{
    char path[4096];
    struct stat sb;
    if ((size_t)snprintf(path, sizeof path, "%s/%s", st->from, name) >= sizeof path)
        return WEFT_OK;
    if (stat(path, &sb) != 0 || !S_ISREG(sb.st_mode))
        return WEFT_OK;   /* gone meanwhile, or not a file: nothing to take */
    struct export_file *f = find_file(st, name);
    if (f && same_stat(f, &sb)) {
        f->is_seen = true;
        return WEFT_OK;
    }
    if (f)
        cmd_log(SUB, "%s changed: looking at it again", name);
    else if (!(f = add_file(st, name)))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory listing %s", st->o->from);
    f->dev = sb.st_dev;
    f->ino = sb.st_ino;
    f->size = sb.st_size;
    f->mtime = sb.st_mtim;
    f->is_seen = true;
    weft_err e = take_file(st, f, path, err);
    if (e != WEFT_OK)
        remove_file(st, f);
    return e;
}

/* ---- the live version and retention ---- */

/* The stored export created last (a tie: the name that sorts last); NULL when none. */
static struct export_file *newest(struct sync_state *st)
{
    struct export_file *best = NULL;
    for (size_t i = 0; i < st->n_files; i++) {
        struct export_file *f = &st->files[i];
        if (f->state != EXPORT_STORED)
            continue;
        int c = best ? strcmp(f->created, best->created) : 1;
        if (c > 0 || (c == 0 && strcmp(f->name, best->name) > 0))
            best = f;
    }
    return best;
}

/* Make sure @p f's version is still stored (import it again when it was pruned). */
static weft_err ensure_stored(struct sync_state *st, struct export_file *f, weft_error *err)
{
    json_t *m = NULL;
    weft_err e = f->version ? weft_store_manifest(st->store, f->version, &m, err)
                            : WEFT_ERR_NOT_FOUND;
    json_decref(m);
    if (e != WEFT_ERR_NOT_FOUND)
        return e;
    char path[4096];
    if ((size_t)snprintf(path, sizeof path, "%s/%s", st->from, f->name) >= sizeof path)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s/%s: the path is too long", st->from,
                              f->name);
    cmd_log(SUB, "%s is the newest export again but its version was pruned: importing it again",
            f->name);
    f->version = 0;
    return take_file(st, f, path, err);
}

/* Promote the newest export's version when the choice changed since the last look. */
static weft_err follow_newest(struct sync_state *st, weft_error *err)
{
    struct export_file *f;
    while ((f = newest(st))) {
        weft_err e = ensure_stored(st, f, err);
        if (e != WEFT_OK)
            return e;
        if (f->state == EXPORT_STORED)
            break;
    }
    if (!f || f->version == st->last_target)
        return WEFT_OK;
    uint64_t live = 0;
    weft_err e = weft_store_head(st->store, &live, NULL, err);
    if (e != WEFT_OK)
        return e;
    if (live != f->version) {
        char why[512];
        snprintf(why, sizeof why, "weft sync: the newest export in %s, %s (created %s)",
                 st->o->from, f->name, f->created);
        weft_store_change how = { why, false };
        if ((e = weft_store_promote_with(st->store, f->version, &how, err)) != WEFT_OK)
            return e;
        st->has_changed = true;
        cmd_log(SUB, "version %llu is live: %s (created %s)%s", (unsigned long long)f->version,
                f->name, f->created, live ? "" : ", the first one");
    } else {
        cmd_log(SUB, "version %llu (%s, created %s) is live already",
                (unsigned long long)f->version, f->name, f->created);
    }
    st->last_target = f->version;
    return WEFT_OK;
}

static weft_err prune(struct sync_state *st, weft_error *err)
{
    json_t *deleted = NULL;
    weft_err e = weft_store_prune(st->store, (size_t)st->o->keep, &deleted, err);
    if (e != WEFT_OK)
        return e;
    size_t i;
    const json_t *d;
    json_array_foreach(deleted, i, d) {
        uint64_t v = (uint64_t)json_integer_value(json_object_get(d, "version"));
        char size[16];
        cmd_log(SUB, "pruned version %llu (%s, %s)", (unsigned long long)v,
                json_string_value(json_object_get(d, "state")),
                weft_store_format_bytes((double)json_integer_value(json_object_get(d, "bytes")),
                                        size));
        for (size_t k = 0; k < st->n_files; k++)
            if (st->files[k].version == v)
                st->files[k].version = 0;
    }
    json_decref(deleted);
    return WEFT_OK;
}

/* ---- one look ---- */

/* List --from, take new files, forget removed ones, promote, prune. Returns WEFT_ERR_IO when
 * the directory cannot be read, or the store's failure. */
static weft_err look(struct sync_state *st, weft_error *err)
{
    char **names = NULL;
    size_t n = 0;
    st->has_changed = false;
    if (!list_exports(st, &names, &n))
        return weft_error_set(err, WEFT_ERR_IO, "%s", st->dir_problem[0] ? st->dir_problem
                                                                          : "out of memory");
    for (size_t i = 0; i < st->n_files; i++)
        st->files[i].is_seen = false;
    weft_err e = WEFT_OK;
    for (size_t i = 0; i < n && e == WEFT_OK && !stop_requested; i++)
        e = look_at(st, names[i], err);
    for (size_t i = 0; i < n; i++)
        free(names[i]);
    free(names);
    if (e != WEFT_OK || stop_requested)
        return e;
    for (size_t i = st->n_files; i-- > 0;)
        if (!st->files[i].is_seen) {
            if (st->files[i].state == EXPORT_STORED)
                cmd_log(SUB, "%s is no longer in %s", st->files[i].name, st->o->from);
            remove_file(st, &st->files[i]);
        }
    if ((e = follow_newest(st, err)) != WEFT_OK)
        return e;
    if (st->o->keep && st->has_changed)
        e = prune(st, err);
    return e;
}

int cmd_sync_main(int argc, char **argv)
{
    struct sync_opts o;
    int status = parse_args(argc, argv, &o);
    if (status != CMD_OK)
        return status < 0 ? CMD_OK : status;
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_stop;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGTERM, &sa, NULL);
    sigaction(SIGINT, &sa, NULL);

    struct sync_state st;
    memset(&st, 0, sizeof st);
    st.o = &o;
    char cwd[2048];
    if (o.from[0] != '/' && !getcwd(cwd, sizeof cwd)) {
        fprintf(stderr, "weft: cannot read the current directory: %s\n", strerror(errno));
        return CMD_FAIL;
    }
    if ((size_t)snprintf(st.from, sizeof st.from, "%s%s%s", o.from[0] == '/' ? "" : cwd,
                         o.from[0] == '/' ? "" : "/", o.from) >= sizeof st.from)
        return cmd_usage_error(SUB, "--from: the path is too long");
    weft_error err;
    weft_error_clear(&err);
    if (weft_store_open(o.store, WEFT_STORE_CREATE, 0, &st.store, &err) != WEFT_OK)
        return cmd_report_error(&err);
    char keep[32] = "all";
    if (o.keep)
        snprintf(keep, sizeof keep, "%llu", (unsigned long long)o.keep);
    cmd_log(SUB, "started: from %s into store %s, looking every %gs, keeping %s besides live "
            "and previous", o.from, o.store, o.interval, keep);
    while (!stop_requested) {
        weft_err e = look(&st, &err);
        if (e != WEFT_OK && e != WEFT_ERR_IO) {
            cmd_log(SUB, "store %s: %s%s", o.store, err.msg, o.is_once ? "" : " (will retry)");
            status = CMD_FAIL;
        } else if (e == WEFT_ERR_IO) {
            status = CMD_FAIL;
        } else {
            status = CMD_OK;
        }
        if (o.is_once)
            break;
        cmd_nap(o.interval, &stop_requested);
    }
    if (stop_requested)
        status = CMD_OK;
    cmd_log(SUB, stop_requested ? "stopped on request" : "stopped");
    for (size_t i = 0; i < st.n_files; i++)
        free(st.files[i].name);
    free(st.files);
    weft_store_close(st.store);
    return status;
}
