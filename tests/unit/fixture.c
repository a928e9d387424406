/* Temporary directories for the unit tests (fixture.h). */
#include "fixture.h"

#include <criterion/criterion.h>
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

char fixture_dir[64];

void fixture_dir_create(void)
{
    strcpy(fixture_dir, "/tmp/weft-test-XXXXXX");
    cr_assert_not_null(mkdtemp(fixture_dir), "mkdtemp failed");
}

void fixture_dir_remove(void)
{
    DIR *d = opendir(fixture_dir);
    if (!d)
        return;
    struct dirent *ent;
    while ((ent = readdir(d)) != NULL) {
        if (!strcmp(ent->d_name, ".") || !strcmp(ent->d_name, ".."))
            continue;
        unlink(fixture_path(ent->d_name));
    }
    closedir(d);
    rmdir(fixture_dir);
}

const char *fixture_path(const char *name)
{
    static char path[512];
    snprintf(path, sizeof path, "%s/%s", fixture_dir, name);
    return path;
}

const char *fixture_write(const char *name, const void *data, size_t len)
{
    const char *path = fixture_path(name);
    FILE *f = fopen(path, "wb");
    cr_assert_not_null(f, "cannot write %s", path);
    cr_assert_eq(fwrite(data, 1, len, f), len);
    cr_assert_eq(fclose(f), 0);
    return path;
}

const char *fixture_write_text(const char *name, const char *text)
{
    return fixture_write(name, text, strlen(text));
}

const char *fixture_beside(const char *file, const char *rel)
{
    static char path[1024];
    const char *slash = strrchr(file, '/');
    int dir_len = slash ? (int)(slash - file) : 1;
    snprintf(path, sizeof path, "%.*s/%s", dir_len, slash ? file : ".", rel);
    return path;
}

FILE *fixture_run_script(const char *cmd)
{
    char full[4608];
    snprintf(full, sizeof full, "%s > %s", cmd, fixture_path("reference.txt"));
    int status = system(full);
    cr_assert_eq(status, 0, "%s failed (status %d)", full, status);
    FILE *f = fopen(fixture_path("reference.txt"), "r");
    cr_assert_not_null(f);
    return f;
}
