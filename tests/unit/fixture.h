/* Shared by the unit tests: a fresh temporary directory per test, and files in it.
 * Use as TestSuite(x, .init = fixture_dir_create, .fini = fixture_dir_remove). */
#ifndef WEFT_TESTS_FIXTURE_H
#define WEFT_TESTS_FIXTURE_H

#include <stddef.h>
#include <stdio.h>

/** The current test's directory (set by fixture_dir_create). */
extern char fixture_dir[64];

/** Create fixture_dir with mkdtemp; fails the test when it cannot. */
void fixture_dir_create(void);

/** Remove fixture_dir and the files in it (the tests create no subdirectories). */
void fixture_dir_remove(void);

/** Path of @p name inside fixture_dir, in a static buffer (one at a time). */
const char *fixture_path(const char *name);

/** Write @p len bytes to @p name inside fixture_dir; returns its path (static buffer). */
const char *fixture_write(const char *name, const void *data, size_t len);

/** fixture_write of a NUL-terminated text. */
const char *fixture_write_text(const char *name, const char *text);

/** Path of @p rel beside the source file @p file (pass __FILE__), in a static buffer. */
const char *fixture_beside(const char *file, const char *rel);

/**
 * Run shell command @p cmd with its output going to the fixture file reference.txt, and open
 * that file once the command has finished (so a failed comparison never leaves a script
 * writing into a removed directory). Fails the test when the command fails.
 */
FILE *fixture_run_script(const char *cmd);

#endif
