/* What the fuzz targets (tests/fuzz/fuzz_<input>.c) and the replay driver share. Each target
 * is linked twice: with libFuzzer by `make fuzz` (clang), and with replay.c by `make test`
 * (any C compiler), which runs every file of its corpus and crash directories through it.
 * Not part of libweft. */
#ifndef WEFT_TESTS_FUZZ_H
#define WEFT_TESTS_FUZZ_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/names.h"

/**
 * libFuzzer's entry point, defined once per target: run one input. A finding (a broken
 * invariant, a wrong answer) calls fuzz_fail(), which aborts; bad input itself must only
 * give an error. @return 0
 */
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

/** Print "fuzz: <message>" on stderr and abort(): the sanitizers and libFuzzer report it. */
void fuzz_fail(const char *fmt, ...) __attribute__((format(printf, 1, 2), noreturn));

/**
 * The directory the process keeps its files in: made on first use under $TMPDIR (else
 * /tmp), removed with everything in it at exit. Never NULL (fails when it cannot be made).
 */
const char *fuzz_dir(void);

/**
 * Write @p data[0..size) to the file @p name in fuzz_dir(), replacing it; with @p is_gzip,
 * gzip-compressed. @return its path, valid until the next call with the same name.
 */
const char *fuzz_write(const char *name, const uint8_t *data, size_t size, bool is_gzip);

/**
 * A tabular input file as the file parsers read one. The first byte of a fuzz input chooses
 * how the rest is stored: bits 0-1 the file name's ending (0 ".tsv", 1 ".csv", 2 ".txt" so
 * the separator is sniffed, 3 ".tsv.gz"), bit 2 gzip-compressed, bit 3 a switch the target
 * gives its own meaning (say, undirected). An empty input is an empty ".tsv" file.
 */
typedef struct fuzz_table_file {
    const char *path;   /**< as fuzz_write() returns it */
    bool is_switched;   /**< bit 3 of the first byte */
} fuzz_table_file;

/** Store @p data as fuzz_table_file describes. */
fuzz_table_file fuzz_write_table(const uint8_t *data, size_t size);

/**
 * The node table the name-reading parsers (labels, split, features, types) look names up
 * in, built on first use: "a" to "h", "node 1", "x/y", "é", "n,1" (reachable in CSV only
 * by quoting) and "\"q\"". A view of memory kept until exit.
 */
const weft_names_view *fuzz_nodes(void);

#endif
