/* The replay driver: runs fuzz inputs through a target's LLVMFuzzerTestOneInput without
 * libFuzzer, so that `make test` (and `make check-asan`, with the sanitizers) replays every
 * corpus and crash file on any C compiler.
 *
 *   replay_<target> PATH...    each PATH a file or a directory (its files, in name order;
 *                              dot files and subdirectories skipped)
 *
 * Prints "replay: running FILE" on stderr before each input, so that the last such line
 * names the input of a finding (which ends the process: an abort or a sanitizer report),
 * and "<program>: N inputs" on stdout at the end; exits 0 when every input ran. */
#include <dirent.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "fuzz.h"

/* The whole of file @p path (caller frees), or NULL with a message. */
static uint8_t *read_all(const char *path, size_t *size)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        fprintf(stderr, "replay: %s: %s\n", path, strerror(errno));
        return NULL;
    }
    uint8_t *buf = NULL;
    size_t len = 0, cap = 0, n;
    do {
        if (len == cap) {
            size_t grown = cap ? 2 * cap : 4096;
            uint8_t *p = realloc(buf, grown);
            if (!p) {
                free(buf);
                fclose(f);
                fprintf(stderr, "replay: %s: out of memory\n", path);
                return NULL;
            }
            buf = p;
            cap = grown;
        }
        n = fread(buf + len, 1, cap - len, f);
        len += n;
    } while (n > 0);
    bool is_bad = ferror(f) != 0;
    fclose(f);
    if (is_bad) {
        free(buf);
        fprintf(stderr, "replay: %s: read error\n", path);
        return NULL;
    }
    *size = len;
    return buf;
}

/* Run one file. @return false when it could not be read. */
static bool run_file(const char *path)
{
    size_t size = 0;
    uint8_t *data = read_all(path, &size);
    if (!data)
        return false;
    /* Named before it runs: a finding ends the process, and replay.sh reports the last. */
    fprintf(stderr, "replay: running %s\n", path);
    /* A copy of exactly the input's length, so that reading past it is caught. */
    uint8_t *exact = malloc(size ? size : 1);
    if (!exact) {
        free(data);
        fprintf(stderr, "replay: %s: out of memory\n", path);
        return false;
    }
    memcpy(exact, data, size);
    free(data);
    LLVMFuzzerTestOneInput(exact, size);
    free(exact);
    return true;
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* Run every regular file of directory @p dir in name order; *@p n counts them.
 * @return false when the directory or a file could not be read. */
static bool run_dir(const char *dir, size_t *n)
{
    DIR *d = opendir(dir);
    if (!d) {
        fprintf(stderr, "replay: %s: %s\n", dir, strerror(errno));
        return false;
    }
    char **names = NULL;
    size_t count = 0, cap = 0;
    bool ok = true;
    struct dirent *e;
    while (ok && (e = readdir(d))) {
        if (e->d_name[0] == '.')
            continue;
        if (count == cap) {
            size_t grown = cap ? 2 * cap : 64;
            char **p = realloc(names, grown * sizeof *names);
            ok = p != NULL;
            if (ok) {
                names = p;
                cap = grown;
            }
        }
        if (ok && !(names[count] = strdup(e->d_name)))
            ok = false;
        count += ok;
    }
    closedir(d);
    if (!ok)
        fprintf(stderr, "replay: %s: out of memory\n", dir);
    if (count)
        qsort(names, count, sizeof *names, by_name);
    for (size_t i = 0; i < count; i++) {
        char path[4096];
        struct stat st;
        if ((size_t)snprintf(path, sizeof path, "%s/%s", dir, names[i]) >= sizeof path) {
            fprintf(stderr, "replay: %s/%s: path too long\n", dir, names[i]);
            ok = false;
        } else if (stat(path, &st) == 0 && S_ISREG(st.st_mode)) {
            ok = run_file(path) && ok;
            *n += 1;
        }
        free(names[i]);
    }
    free(names);
    return ok;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: %s FILE|DIR...\n", argv[0]);
        return 2;
    }
    size_t n = 0;
    bool ok = true;
    for (int i = 1; i < argc; i++) {
        struct stat st;
        if (stat(argv[i], &st) != 0) {
            fprintf(stderr, "replay: %s: %s\n", argv[i], strerror(errno));
            ok = false;
        } else if (S_ISDIR(st.st_mode)) {
            ok = run_dir(argv[i], &n) && ok;
        } else {
            ok = run_file(argv[i]) && ok;
            n++;
        }
    }
    const char *name = strrchr(argv[0], '/');
    printf("%s: %zu inputs\n", name ? name + 1 : argv[0], n);
    return ok ? 0 : 1;
}
