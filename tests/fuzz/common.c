/* The helpers of tests/fuzz/fuzz.h: a private directory for the files the parsers read, the
 * first-byte convention of the tabular targets, and the shared node table. */
#include "fuzz.h"

#include <dirent.h>
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <zlib.h>

void fuzz_fail(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fputs("fuzz: ", stderr);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    abort();
}

/* ---- the directory ---- */

static char dir_path[4096];

/* Remove @p path and, when it is a directory, everything below it. Best effort: this runs
 * at exit, where nothing is left to report to. */
static void remove_tree(const char *path)
{
    struct stat st;
    if (lstat(path, &st) != 0)
        return;
    if (S_ISDIR(st.st_mode)) {
        DIR *d = opendir(path);
        struct dirent *e;
        while (d && (e = readdir(d))) {
            if (!strcmp(e->d_name, ".") || !strcmp(e->d_name, ".."))
                continue;
            char child[4096];
            if ((size_t)snprintf(child, sizeof child, "%s/%s", path, e->d_name) < sizeof child)
                remove_tree(child);
        }
        if (d)
            closedir(d);
        rmdir(path);
    } else {
        unlink(path);
    }
}

static void remove_dir(void)
{
    if (dir_path[0])
        remove_tree(dir_path);
}

const char *fuzz_dir(void)
{
    if (dir_path[0])
        return dir_path;
    const char *tmp = getenv("TMPDIR");
    if (!tmp || !tmp[0])
        tmp = "/tmp";
    if ((size_t)snprintf(dir_path, sizeof dir_path, "%s/weft-fuzz.XXXXXX", tmp) >=
        sizeof dir_path)
        fuzz_fail("TMPDIR is too long");
    if (!mkdtemp(dir_path))
        fuzz_fail("cannot make a directory under %s: %s", tmp, strerror(errno));
    atexit(remove_dir);
    return dir_path;
}

/* ---- writing inputs ---- */

/* Paths handed out by fuzz_write(), one per name. */
enum { MAX_NAMES = 16 };
static struct {
    char name[64];
    char path[4200];
} written[MAX_NAMES];

static const char *path_of(const char *name)
{
    for (size_t i = 0; i < MAX_NAMES; i++) {
        if (!written[i].name[0]) {
            if (strlen(name) >= sizeof written[i].name)
                fuzz_fail("file name '%s' is too long", name);
            strcpy(written[i].name, name);
            snprintf(written[i].path, sizeof written[i].path, "%s/%s", fuzz_dir(), name);
        }
        if (!strcmp(written[i].name, name))
            return written[i].path;
    }
    fuzz_fail("more than %d file names", MAX_NAMES);
}

const char *fuzz_write(const char *name, const uint8_t *data, size_t size, bool is_gzip)
{
    const char *path = path_of(name);
    if (is_gzip) {
        gzFile gz = gzopen(path, "wb");
        if (!gz)
            fuzz_fail("%s: cannot write", path);
        bool ok = size == 0 || (size <= (size_t)INT32_MAX &&
                                gzwrite(gz, data, (unsigned)size) == (int)size);
        if (gzclose(gz) != Z_OK || !ok)
            fuzz_fail("%s: cannot write", path);
        return path;
    }
    FILE *f = fopen(path, "wb");
    if (!f)
        fuzz_fail("%s: %s", path, strerror(errno));
    bool ok = size == 0 || fwrite(data, 1, size, f) == size;
    if (fclose(f) != 0 || !ok)
        fuzz_fail("%s: cannot write", path);
    return path;
}

fuzz_table_file fuzz_write_table(const uint8_t *data, size_t size)
{
    static const char *const names[] = { "input.tsv", "input.csv", "input.txt", "input.tsv.gz" };
    unsigned mode = size ? data[0] : 0;
    const uint8_t *rest = size ? data + 1 : data;
    size_t n = size ? size - 1 : 0;
    fuzz_table_file f = { fuzz_write(names[mode & 3], rest, n, (mode & 4) != 0),
                          (mode & 8) != 0 };
    return f;
}

/* ---- the node table ---- */

static weft_names nodes;
static weft_names_view nodes_view;

static void free_nodes(void)
{
    weft_names_fini(&nodes);
}

const weft_names_view *fuzz_nodes(void)
{
    static bool is_built;
    if (is_built)
        return &nodes_view;
    static const char *const names[] = { "a", "b", "c", "d", "e", "f", "g", "h", "node 1",
                                         "x/y", "\xc3\xa9", "n,1", "\"q\"" };
    weft_error err;
    if (weft_names_init(&nodes, &err) != WEFT_OK)
        fuzz_fail("%s", err.msg);
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++) {
        uint32_t id;
        if (weft_names_intern(&nodes, names[i], strlen(names[i]), &id, NULL, &err) != WEFT_OK)
            fuzz_fail("%s", err.msg);
    }
    atexit(free_nodes);
    nodes_view = weft_names_as_view(&nodes);
    is_built = true;
    return &nodes_view;
}
