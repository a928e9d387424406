/* Tabular input (include/weft/io.h): lines are read in chunks through zlib, which passes
 * plain files through unchanged, so one path serves .tsv and .tsv.gz alike. */
#include "weft/io.h"

#include <errno.h>
#include <nettle/sha2.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <zlib.h>

#include "weft/alloc.h"

enum {
    IO_CHUNK = 64 * 1024,       /* bytes asked of gzread() at a time */
    IO_GZ_BUFFER = 128 * 1024   /* zlib's own input buffer (gzbuffer) */
};

/*
 * Invariants: chunk[chunk_pos .. chunk_len) holds bytes read but not yet consumed;
 * line[0 .. line_len) is the current physical line without its '\n', and line_cap >
 * line_len so a terminator always fits. is_eof means gzread() reported a clean end.
 */
struct weft_io_reader {
    gzFile gz;
    char *path;
    weft_io_format format;
    bool is_format_known;
    bool is_eof;
    unsigned char *chunk;
    size_t chunk_pos, chunk_len;
    char *line;
    size_t line_len, line_cap;
    size_t lineno;
};

/* ".tsv" / ".csv", also before a final ".gz", decide the format; anything else is sniffed. */
static bool format_from_path(const char *path, weft_io_format *fmt)
{
    size_t len = strlen(path);
    if (len >= 3 && strcasecmp(path + len - 3, ".gz") == 0)
        len -= 3;
    if (len < 4)
        return false;
    const char *ext = path + len - 4;
    if (strncasecmp(ext, ".tsv", 4) == 0) {
        *fmt = WEFT_IO_TSV;
        return true;
    }
    if (strncasecmp(ext, ".csv", 4) == 0) {
        *fmt = WEFT_IO_CSV;
        return true;
    }
    return false;
}

weft_err weft_io_open(const char *path, weft_io_reader **out, weft_error *err)
{
    weft_io_reader *r = calloc(1, sizeof *r);
    if (!r)
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", path);
    r->path = strdup(path);
    r->chunk = weft_alloc_array(IO_CHUNK, 1);
    if (!r->path || !r->chunk) {
        weft_io_close(r);
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", path);
    }
    errno = 0;
    r->gz = gzopen(path, "rb");
    if (!r->gz) {
        int e = errno;
        weft_io_close(r);
        if (e == 0)
            return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", path);
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", path, strerror(e));
    }
    gzbuffer(r->gz, IO_GZ_BUFFER);   /* before the first read, so it cannot fail */
    r->is_format_known = format_from_path(path, &r->format);
    *out = r;
    return WEFT_OK;
}

void weft_io_close(weft_io_reader *r)
{
    if (!r)
        return;
    if (r->gz)
        gzclose_r(r->gz);
    free(r->path);
    free(r->chunk);
    free(r->line);
    free(r);
}

const char *weft_io_path(const weft_io_reader *r)
{
    return r->path;
}

weft_io_format weft_io_get_format(const weft_io_reader *r)
{
    return r->format;
}

/* Refill chunk[]. A short stream (truncated gzip) is not an end of file: zlib reports it
 * through gzerror() as Z_BUF_ERROR while gzread() returns 0, so both cases are checked. */
static weft_err refill(weft_io_reader *r, weft_error *err)
{
    errno = 0;
    int n = gzread(r->gz, r->chunk, IO_CHUNK);
    int e = errno;
    int zerr = Z_OK;
    if (n <= 0)
        gzerror(r->gz, &zerr);
    if (n < 0 || zerr != Z_OK) {
        if (zerr == Z_ERRNO && e != 0)
            return weft_error_set(err, WEFT_ERR_IO, "%s: %s", r->path, strerror(e));
        if (zerr == Z_MEM_ERROR)
            return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", r->path);
        return weft_error_set(err, WEFT_ERR_IO, "%s: corrupt or truncated gzip data", r->path);
    }
    r->chunk_pos = 0;
    r->chunk_len = (size_t)n;
    r->is_eof = n == 0;
    return WEFT_OK;
}

static weft_err append_line(weft_io_reader *r, const unsigned char *p, size_t n, weft_error *err)
{
    if (n > SIZE_MAX - r->line_len - 1 ||
        weft_grow_array((void **)&r->line, &r->line_cap, r->line_len + n + 1, 1) != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s:%zu: out of memory for a line", r->path,
                              r->lineno + 1);
    memcpy(r->line + r->line_len, p, n);
    r->line_len += n;
    return WEFT_OK;
}

/* Read one physical line (any length) into line[]. *got is false at end of file. */
static weft_err read_line(weft_io_reader *r, bool *got, weft_error *err)
{
    r->line_len = 0;
    bool has_bytes = false;
    for (;;) {
        if (r->chunk_pos == r->chunk_len) {
            if (r->is_eof)
                break;
            weft_err rc = refill(r, err);
            if (rc != WEFT_OK)
                return rc;
            continue;
        }
        const unsigned char *start = r->chunk + r->chunk_pos;
        size_t avail = r->chunk_len - r->chunk_pos;
        const unsigned char *nl = memchr(start, '\n', avail);
        size_t take = nl ? (size_t)(nl - start) : avail;
        weft_err rc = append_line(r, start, take, err);
        if (rc != WEFT_OK)
            return rc;
        has_bytes = true;
        r->chunk_pos += take + (nl ? 1 : 0);
        if (nl)
            break;
    }
    if (!has_bytes) {
        *got = false;
        return WEFT_OK;
    }
    if (weft_grow_array((void **)&r->line, &r->line_cap, r->line_len + 1, 1) != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", r->path);
    r->line[r->line_len] = '\0';
    *got = true;
    return WEFT_OK;
}

/*
 * Offset of the first byte that does not begin a well-formed UTF-8 sequence, or len.
 * The table is the Unicode Standard's "well-formed UTF-8 byte sequences" (Table 3-7),
 * which excludes overlongs (C0, C1, E0 80..9F, F0 80..8F), surrogates (ED A0..BF) and
 * code points above U+10FFFF (F4 90.., F5..FF).
 */
static size_t utf8_first_invalid(const unsigned char *s, size_t len)
{
    size_t i = 0;
    while (i < len) {
        unsigned c = s[i];
        if (c < 0x80) {
            i++;
            continue;
        }
        size_t need;
        unsigned lo = 0x80, hi = 0xBF;   /* range of the second byte */
        if (c >= 0xC2 && c <= 0xDF) {
            need = 1;
        } else if (c >= 0xE0 && c <= 0xEF) {
            need = 2;
            if (c == 0xE0)
                lo = 0xA0;
            else if (c == 0xED)
                hi = 0x9F;
        } else if (c >= 0xF0 && c <= 0xF4) {
            need = 3;
            if (c == 0xF0)
                lo = 0x90;
            else if (c == 0xF4)
                hi = 0x8F;
        } else {
            return i;
        }
        if (len - i <= need || s[i + 1] < lo || s[i + 1] > hi)
            return i;
        for (size_t k = 2; k <= need; k++)
            if (s[i + k] < 0x80 || s[i + k] > 0xBF)
                return i;
        i += need + 1;
    }
    return len;
}

bool weft_io_utf8_valid(const char *s, size_t len)
{
    return utf8_first_invalid((const unsigned char *)s, len) == len;
}

/* Byte positions in messages are 1-based, like lines and fields. A carriage return left
 * inside a line (after the "\r\n" ending is taken off) means lines that end with "\r" alone:
 * the whole file would read as one line, its names joined across line ends. */
static weft_err check_line_bytes(const weft_io_reader *r, weft_error *err)
{
    const char *nul = memchr(r->line, '\0', r->line_len);
    const char *cr = memchr(r->line, '\r', r->line_len);
    size_t bad = utf8_first_invalid((const unsigned char *)r->line, r->line_len);
    if (nul && (size_t)(nul - r->line) <= bad && (!cr || nul < cr))
        return weft_io_fail(r, r->lineno, 0, NULL, err, "NUL byte at byte %zu",
                            (size_t)(nul - r->line) + 1);
    if (cr && (size_t)(cr - r->line) <= bad)
        return weft_io_fail(r, r->lineno, 0, NULL, err, "carriage return at byte %zu: lines "
                            "must end with \\n or \\r\\n", (size_t)(cr - r->line) + 1);
    if (bad < r->line_len)
        return weft_io_fail(r, r->lineno, 0, NULL, err, "invalid UTF-8 at byte %zu", bad + 1);
    return WEFT_OK;
}

/* A UTF-8 byte order mark (EF BB BF, as some spreadsheet programs write) opening the file is
 * not text: left in place it would become part of the first name. */
static void drop_bom(weft_io_reader *r)
{
    if (r->line_len >= 3 && !memcmp(r->line, "\xef\xbb\xbf", 3)) {
        r->line_len -= 3;
        memmove(r->line, r->line + 3, r->line_len + 1);
    }
}

static bool is_skipped(const char *s, size_t len)
{
    size_t i = 0;
    while (i < len && (s[i] == ' ' || s[i] == '\t'))
        i++;
    return i == len || s[i] == '#';
}

static weft_err too_many_fields(const weft_io_reader *r, weft_error *err)
{
    return weft_io_fail(r, r->lineno, 0, NULL, err, "more than %d fields", WEFT_IO_MAX_FIELDS);
}

/* TSV: fields split at every tab, no quoting. Tabs become terminators in place. */
static weft_err split_tsv(weft_io_reader *r, weft_io_record *rec, weft_error *err)
{
    char *s = r->line;
    size_t n = 0, start = 0;
    for (size_t i = 0; i <= r->line_len; i++) {
        if (i < r->line_len && s[i] != '\t')
            continue;
        if (n == WEFT_IO_MAX_FIELDS)
            return too_many_fields(r, err);
        s[i] = '\0';
        rec->field[n] = s + start;
        rec->len[n] = i - start;
        n++;
        start = i + 1;
    }
    rec->n_fields = n;
    return WEFT_OK;
}

/*
 * CSV on one line: a field that starts with '"' runs to the matching '"', with "" standing
 * for one quote, and must be followed by ',' or the end of the line. A quote inside an
 * unquoted field is taken literally. Unescaping only shrinks, so it is done in place:
 * the write position wr never passes the read position rd.
 */
static weft_err split_csv(weft_io_reader *r, weft_io_record *rec, weft_error *err)
{
    char *s = r->line;
    size_t len = r->line_len, rd = 0, wr = 0, n = 0;
    for (;;) {
        if (n == WEFT_IO_MAX_FIELDS)
            return too_many_fields(r, err);
        size_t start = wr;
        if (rd < len && s[rd] == '"') {
            rd++;
            for (;;) {
                if (rd == len)
                    return weft_io_fail(r, r->lineno, n + 1, NULL, err, "unbalanced quote");
                if (s[rd] == '"' && rd + 1 < len && s[rd + 1] == '"') {
                    s[wr++] = '"';
                    rd += 2;
                } else if (s[rd] == '"') {
                    rd++;
                    break;
                } else {
                    s[wr++] = s[rd++];
                }
            }
            if (rd < len && s[rd] != ',')
                return weft_io_fail(r, r->lineno, n + 1, NULL, err,
                                    "text after the closing quote");
        } else {
            while (rd < len && s[rd] != ',')
                s[wr++] = s[rd++];
        }
        rec->field[n] = s + start;
        rec->len[n] = wr - start;
        n++;
        s[wr++] = '\0';
        if (rd == len)
            break;
        rd++;   /* the comma */
    }
    rec->n_fields = n;
    return WEFT_OK;
}

static void sniff_format(weft_io_reader *r)
{
    if (memchr(r->line, '\t', r->line_len))
        r->format = WEFT_IO_TSV;
    else if (memchr(r->line, ',', r->line_len))
        r->format = WEFT_IO_CSV;
    else
        r->format = WEFT_IO_TSV;
    r->is_format_known = true;
}

weft_err weft_io_next(weft_io_reader *r, weft_io_record *rec, bool *eof, weft_error *err)
{
    for (;;) {
        bool got = false;
        weft_err rc = read_line(r, &got, err);
        if (rc != WEFT_OK)
            return rc;
        if (!got) {
            *eof = true;
            return WEFT_OK;
        }
        r->lineno++;
        if (r->lineno == 1)
            drop_bom(r);
        if (r->line_len > 0 && r->line[r->line_len - 1] == '\r')
            r->line[--r->line_len] = '\0';
        /* Comments too must be clean text: a bad byte anywhere means a wrong encoding. */
        rc = check_line_bytes(r, err);
        if (rc != WEFT_OK)
            return rc;
        if (is_skipped(r->line, r->line_len))
            continue;
        if (!r->is_format_known)
            sniff_format(r);
        weft_io_record tmp;
        tmp.lineno = r->lineno;
        rc = r->format == WEFT_IO_CSV ? split_csv(r, &tmp, err) : split_tsv(r, &tmp, err);
        if (rc != WEFT_OK)
            return rc;
        *rec = tmp;
        *eof = false;
        return WEFT_OK;
    }
}

weft_err weft_io_fail(const weft_io_reader *r, size_t lineno, size_t field, const char *what,
                      weft_error *err, const char *fmt, ...)
{
    char reason[192];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(reason, sizeof reason, fmt, ap);
    va_end(ap);
    if (field == 0)
        return weft_error_set(err, WEFT_ERR_PARSE, "%s:%zu: %s", r->path, lineno, reason);
    if (!what)
        return weft_error_set(err, WEFT_ERR_PARSE, "%s:%zu: field %zu: %s", r->path, lineno,
                              field, reason);
    return weft_error_set(err, WEFT_ERR_PARSE, "%s:%zu: field %zu (%s): %s", r->path, lineno,
                          field, what, reason);
}

const char *weft_io_fields_note(const weft_io_reader *r, const weft_io_record *rec)
{
    if (r->format != WEFT_IO_TSV || rec->n_fields != 1 ||
        !memchr(rec->field[0], ' ', rec->len[0]))
        return "";
    return " (fields are separated by tabs; this line has spaces and no tab)";
}

weft_err weft_io_check_name(const weft_io_reader *r, const weft_io_record *rec, size_t field,
                            const char *what, weft_error *err)
{
    if (field == 0 || field > rec->n_fields)
        return weft_io_fail(r, rec->lineno, field, what, err, "missing");
    size_t len = rec->len[field - 1];
    if (len == 0)
        return weft_io_fail(r, rec->lineno, field, what, err, "empty");
    if (len > WEFT_IO_MAX_NAME)
        return weft_io_fail(r, rec->lineno, field, what, err, "name is %zu bytes, limit %d", len,
                            WEFT_IO_MAX_NAME);
    return WEFT_OK;
}

weft_err weft_io_sha256_file(const char *path, char hex[65], weft_error *err)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", path, strerror(errno));
    unsigned char *buf = weft_alloc_array(IO_CHUNK, 1);
    if (!buf) {
        fclose(f);
        return weft_error_set(err, WEFT_ERR_NOMEM, "%s: out of memory", path);
    }
    struct sha256_ctx ctx;
    sha256_init(&ctx);
    size_t n;
    while ((n = fread(buf, 1, IO_CHUNK, f)) > 0)
        sha256_update(&ctx, n, buf);
    bool is_bad = ferror(f) != 0;
    int e = errno;
    free(buf);
    fclose(f);
    if (is_bad)
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", path, strerror(e));
    uint8_t digest[SHA256_DIGEST_SIZE];
    sha256_digest(&ctx, sizeof digest, digest);
    static const char digits[] = "0123456789abcdef";
    for (size_t i = 0; i < SHA256_DIGEST_SIZE; i++) {
        hex[2 * i] = digits[digest[i] >> 4];
        hex[2 * i + 1] = digits[digest[i] & 15];
    }
    hex[64] = '\0';
    return WEFT_OK;
}

weft_err weft_io_find_name(const weft_io_reader *rd, const weft_io_record *rec, size_t f,
                           const char *what, const char *kind, const weft_names_view *names,
                           uint32_t *id, weft_error *err)
{
    weft_err rc = weft_io_check_name(rd, rec, f, what, err);
    if (rc != WEFT_OK)
        return rc;
    if (weft_names_find(names, rec->field[f - 1], rec->len[f - 1], id))
        return WEFT_OK;
    return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s:%zu: field %zu (%s): unknown %s '%.80s'",
                          weft_io_path(rd), rec->lineno, f, what, kind, rec->field[f - 1]);
}
