/* weft: reading tabular input files (TSV or CSV, gzip transparently) and fingerprinting them. */
#ifndef WEFT_IO_H
#define WEFT_IO_H

#include <stdbool.h>
#include <stddef.h>

#include "weft/error.h"
#include "weft/names.h"

/** Longest node, relation, class or type name accepted, in bytes (UTF-8). */
#define WEFT_IO_MAX_NAME 1024
/** Most fields one record may have. */
#define WEFT_IO_MAX_FIELDS 16

/** Field separator of a file: chosen by extension (.tsv/.csv, also under .gz), else sniffed. */
typedef enum weft_io_format { WEFT_IO_TSV = 0, WEFT_IO_CSV } weft_io_format;

/** An open input file. Opaque. */
typedef struct weft_io_reader weft_io_reader;

/**
 * One data line split into fields. Pointers borrow the reader's line buffer and stay valid
 * until the next weft_io_next() or weft_io_close(). Fields are NUL-terminated; a CSV field's
 * quotes are removed and "" unescaped. len excludes the terminator.
 */
typedef struct weft_io_record {
    size_t lineno;                         /**< 1-based physical line number in the file */
    size_t n_fields;
    const char *field[WEFT_IO_MAX_FIELDS];
    size_t len[WEFT_IO_MAX_FIELDS];
} weft_io_record;

/**
 * Open @p path for reading; gzip-compressed files are decompressed transparently.
 * @param path  copied, not kept
 * @param out   on success, a reader to close with weft_io_close()
 * @return WEFT_OK, WEFT_ERR_IO ("path: reason"), WEFT_ERR_NOMEM
 */
weft_err weft_io_open(const char *path, weft_io_reader **out, weft_error *err);

/** Close @p r; NULL does nothing. */
void weft_io_close(weft_io_reader *r);

/**
 * Read the next data line into @p rec, skipping blank lines and lines whose first
 * non-blank character is '#'. A trailing "\r\n" is accepted, and a UTF-8 byte order mark
 * opening the file is dropped. The whole line must be valid UTF-8 and must not contain NUL
 * bytes or carriage returns.
 * @param eof  set true (and @p rec untouched) at end of file, false otherwise
 * @return WEFT_OK, WEFT_ERR_PARSE ("path:line: reason": invalid UTF-8 at byte N, NUL byte,
 *         carriage return (lines ending in "\r" alone), unbalanced CSV quote, more than
 *         WEFT_IO_MAX_FIELDS fields), WEFT_ERR_IO (read or
 *         gzip error), WEFT_ERR_NOMEM
 */
weft_err weft_io_next(weft_io_reader *r, weft_io_record *rec, bool *eof, weft_error *err);

/** The path the reader was opened with; borrowed, valid until weft_io_close(). */
const char *weft_io_path(const weft_io_reader *r);

/** The separator in use (known after the first data line has been read). */
weft_io_format weft_io_get_format(const weft_io_reader *r);

/**
 * Fill @p err with WEFT_ERR_PARSE and "path:line: field N (what): reason", the one message
 * shape every parser uses. @p field is 1-based; 0 leaves the field part out.
 * @return WEFT_ERR_PARSE
 */
weft_err weft_io_fail(const weft_io_reader *r, size_t lineno, size_t field, const char *what,
                      weft_error *err, const char *fmt, ...) __attribute__((format(printf, 6, 7)));

/**
 * What to add to a "found N fields" message about @p rec: a TSV line read as one field
 * although it holds spaces was most likely meant to be split at them, so the note says that
 * fields are separated by tabs; "" otherwise. Static text.
 */
const char *weft_io_fields_note(const weft_io_reader *r, const weft_io_record *rec);

/**
 * Check that a name field is usable: not empty, at most WEFT_IO_MAX_NAME bytes.
 * @return WEFT_OK, or WEFT_ERR_PARSE through weft_io_fail() naming the field
 */
weft_err weft_io_check_name(const weft_io_reader *r, const weft_io_record *rec, size_t field,
                            const char *what, weft_error *err);

/** True when @p s[0..len) is well-formed UTF-8 (no overlongs, surrogates or code points > U+10FFFF). */
bool weft_io_utf8_valid(const char *s, size_t len);

/**
 * SHA-256 of the bytes of file @p path (as stored, compressed or not), as 64 lowercase hex
 * digits and a NUL in @p hex.
 * @return WEFT_OK, WEFT_ERR_IO
 */
weft_err weft_io_sha256_file(const char *path, char hex[65], weft_error *err);

/**
 * Id in @p names of name field @p f (1-based) of @p rec, checked with weft_io_check_name().
 * @param what  the field's role in messages ("source", "node")
 * @param kind  what the table holds ("node", "relation")
 * @return WEFT_OK; WEFT_ERR_NOT_FOUND "path:line: field F (what): unknown kind 'name'";
 *         WEFT_ERR_PARSE from weft_io_check_name()
 */
weft_err weft_io_find_name(const weft_io_reader *rd, const weft_io_record *rec, size_t f,
                           const char *what, const char *kind, const weft_names_view *names,
                           uint32_t *id, weft_error *err);

#endif
