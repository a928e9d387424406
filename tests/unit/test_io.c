/* Tests of tabular input (core/io.c): formats, gzip, line handling, and every rejection. */
#include <criterion/criterion.h>
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <zlib.h>

#include "fixture.h"
#include "weft/io.h"
#include "weft/rng.h"

TestSuite(io, .init = fixture_dir_create, .fini = fixture_dir_remove);


static const char *write_gz(const char *name, const void *data, size_t len)
{
    const char *path = fixture_path(name);
    gzFile gz = gzopen(path, "wb");
    cr_assert_not_null(gz);
    cr_assert_eq(gzwrite(gz, data, (unsigned)len), (int)len);
    cr_assert_eq(gzclose(gz), Z_OK);
    return path;
}

/*
 * Reads every record of @p path into @p out as "line:field|field\n" per record, the
 * expected shape the tests spell out by hand. Returns the code of the first failure.
 */
static weft_err slurp(const char *path, char *out, size_t cap, weft_error *err)
{
    weft_io_reader *r = NULL;
    weft_err rc = weft_io_open(path, &r, err);
    if (rc != WEFT_OK)
        return rc;
    size_t used = 0;
    out[0] = '\0';
    for (;;) {
        weft_io_record rec;
        bool eof = false;
        rc = weft_io_next(r, &rec, &eof, err);
        if (rc != WEFT_OK || eof)
            break;
        used += (size_t)snprintf(out + used, cap - used, "%zu:", rec.lineno);
        for (size_t i = 0; i < rec.n_fields; i++) {
            cr_assert_eq(strlen(rec.field[i]), rec.len[i], "field %zu length", i + 1);
            used += (size_t)snprintf(out + used, cap - used, "%s%s", i ? "|" : "", rec.field[i]);
        }
        used += (size_t)snprintf(out + used, cap - used, "\n");
        cr_assert_lt(used, cap, "slurp buffer too small");
    }
    weft_io_close(r);
    return rc;
}

static void expect_slurp(const char *path, const char *want)
{
    char got[4096];
    weft_error err = { WEFT_OK, "" };
    weft_err rc = slurp(path, got, sizeof got, &err);
    cr_assert_eq(rc, WEFT_OK, "%s", err.msg);
    cr_assert_str_eq(got, want);
}

/* Expects reading @p path to fail with @p code and the message "<path><suffix>". */
static void expect_failure(const char *path, weft_err code, const char *suffix)
{
    char want[512], got[4096];
    snprintf(want, sizeof want, "%s%s", path, suffix);
    weft_error err = { WEFT_OK, "" };
    weft_err rc = slurp(path, got, sizeof got, &err);
    cr_assert_eq(rc, code, "code %s, message: %s", weft_err_name(rc), err.msg);
    cr_assert_str_eq(err.msg, want);
}

static weft_io_format format_of(const char *path)
{
    weft_io_reader *r = NULL;
    weft_io_record rec;
    bool eof = false;
    cr_assert_eq(weft_io_open(path, &r, NULL), WEFT_OK);
    cr_assert_eq(weft_io_next(r, &rec, &eof, NULL), WEFT_OK);
    weft_io_format f = weft_io_get_format(r);
    weft_io_close(r);
    return f;
}

Test(io, reads_tsv_fields)
{
    expect_slurp(fixture_write_text("a.tsv", "a\tb\tc\nd\te\n"), "1:a|b|c\n2:d|e\n");
}

Test(io, csv_quotes_and_escapes)
{
    const char *p = fixture_write_text("q.csv", "plain,\"a,b\",\"say \"\"hi\"\"\",\"\"\nx,y,\n");
    expect_slurp(p, "1:plain|a,b|say \"hi\"|\n2:x|y|\n");
    cr_assert_eq(format_of(p), WEFT_IO_CSV);
}

Test(io, csv_quote_inside_unquoted_field_is_literal)
{
    expect_slurp(fixture_write_text("lit.csv", "O\"Brien,x\n"), "1:O\"Brien|x\n");
}

Test(io, csv_unbalanced_quote_fails)
{
    expect_failure(fixture_write_text("open.csv", "a,b\nc,\"open\n"), WEFT_ERR_PARSE,
                   ":2: field 2: unbalanced quote");
}

Test(io, csv_text_after_closing_quote_fails)
{
    expect_failure(fixture_write_text("after.csv", "\"a\"b,c\n"), WEFT_ERR_PARSE,
                   ":1: field 1: text after the closing quote");
}

Test(io, gzip_is_read_transparently)
{
    char text[64 * 1024], want[4096 * 2];
    size_t used = 0, wused = 0;
    for (int i = 0; i < 200; i++) {
        used += (size_t)snprintf(text + used, sizeof text - used, "n%d\tm%d\n", i, i * 7);
        wused += (size_t)snprintf(want + wused, sizeof want - wused, "%d:n%d|m%d\n", i + 1, i,
                                  i * 7);
    }
    const char *p = write_gz("edges.tsv.gz", text, used);
    char got[8192];
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(slurp(p, got, sizeof got, &err), WEFT_OK, "%s", err.msg);
    cr_assert_str_eq(got, want);
}

Test(io, gzip_csv_by_extension)
{
    const char *p = write_gz("e.csv.gz", "a\tb,c\n", 6);
    expect_slurp(p, "1:a\tb|c\n");   /* the extension wins over the tab */
    cr_assert_eq(format_of(p), WEFT_IO_CSV);
}

/* Random hex compresses only about 2:1, so half the file ends mid-stream. */
static size_t random_lines(char *buf, size_t cap)
{
    weft_rng rng;
    weft_rng_seed(&rng, 42);
    size_t used = 0;
    while (used + 40 < cap)
        used += (size_t)snprintf(buf + used, cap - used, "%016llx\t%016llx\n",
                                 (unsigned long long)weft_rng_next(&rng),
                                 (unsigned long long)weft_rng_next(&rng));
    return used;
}

static weft_err read_to_end(const char *path, weft_error *err)
{
    weft_io_reader *r = NULL;
    weft_err rc = weft_io_open(path, &r, err);
    bool eof = false;
    while (rc == WEFT_OK && !eof) {
        weft_io_record rec;
        rc = weft_io_next(r, &rec, &eof, err);
    }
    weft_io_close(r);
    return rc;
}

Test(io, truncated_gzip_is_io_error)
{
    static char text[512 * 1024];
    size_t len = random_lines(text, sizeof text);
    const char *p = write_gz("cut.tsv.gz", text, len);
    char path[512];
    strcpy(path, p);
    FILE *f = fopen(path, "rb");
    cr_assert_not_null(f);
    fseek(f, 0, SEEK_END);
    long size = ftell(f);
    fclose(f);
    cr_assert_eq(truncate(path, size / 2), 0);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(read_to_end(path, &err), WEFT_ERR_IO, "message: %s", err.msg);
    cr_assert_eq(strncmp(err.msg, path, strlen(path)), 0, "message names the file: %s", err.msg);
}

Test(io, corrupt_gzip_is_io_error)
{
    static char text[256 * 1024], gz[256 * 1024];
    size_t len = random_lines(text, sizeof text);
    const char *p = write_gz("bad.tsv.gz", text, len);
    char path[512];
    strcpy(path, p);
    FILE *f = fopen(path, "r+b");
    cr_assert_not_null(f);
    size_t n = fread(gz, 1, sizeof gz, f);
    cr_assert_gt(n, 1000);
    gz[n / 2] ^= 0x55;   /* inside the deflate data: a data error or a CRC mismatch */
    rewind(f);
    cr_assert_eq(fwrite(gz, 1, n, f), n);
    fclose(f);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(read_to_end(path, &err), WEFT_ERR_IO, "message: %s", err.msg);
    cr_assert_eq(strncmp(err.msg, path, strlen(path)), 0, "message names the file: %s", err.msg);
}

Test(io, comments_and_blank_lines_keep_line_numbers)
{
    expect_slurp(fixture_write_text("c.tsv", "# header\n\na\tb\n   \n  # indented\n\t\nc\td\n"),
                 "3:a|b\n7:c|d\n");
}

Test(io, crlf_is_stripped)
{
    expect_slurp(fixture_write_text("w.tsv", "a\tb\r\nc\td\r\n"), "1:a|b\n2:c|d\n");
    expect_slurp(fixture_write_text("w.csv", "x,\"y\"\r\n"), "1:x|y\n");
}

Test(io, last_line_without_newline)
{
    expect_slurp(fixture_write_text("n.tsv", "a\tb\nc\td"), "1:a|b\n2:c|d\n");
}

Test(io, long_lines_are_not_split)
{
    size_t n = 300000;
    char *text = malloc(n + 16);
    cr_assert_not_null(text);
    memset(text, 'x', n);
    memcpy(text + n, "\tz\nq\tr\n", 7);
    const char *p = write_gz("long.tsv.gz", text, n + 7);
    weft_io_reader *r = NULL;
    weft_io_record rec;
    bool eof = false;
    cr_assert_eq(weft_io_open(p, &r, NULL), WEFT_OK);
    cr_assert_eq(weft_io_next(r, &rec, &eof, NULL), WEFT_OK);
    cr_assert_eq(rec.n_fields, 2);
    cr_assert_eq(rec.len[0], n);
    cr_assert_eq(memcmp(rec.field[0], text, n), 0);
    cr_assert_str_eq(rec.field[1], "z");
    cr_assert_eq(weft_io_next(r, &rec, &eof, NULL), WEFT_OK);
    cr_assert_eq(rec.lineno, 2);
    cr_assert_str_eq(rec.field[0], "q");
    cr_assert_eq(weft_io_next(r, &rec, &eof, NULL), WEFT_OK);
    cr_assert(eof);
    weft_io_close(r);
    free(text);
}

Test(io, invalid_utf8_names_line_and_byte)
{
    /* Byte 4 of line 2 is 0xC0, the start of an overlong encoding of NUL. */
    expect_failure(fixture_write_text("u.tsv", "ok\tfine\nab\t\xC0\x80\n"), WEFT_ERR_PARSE,
                   ":2: invalid UTF-8 at byte 4");
}

Test(io, invalid_utf8_in_a_comment_is_rejected)
{
    expect_failure(fixture_write_text("uc.tsv", "# caf\xE9\na\tb\n"), WEFT_ERR_PARSE,
                   ":1: invalid UTF-8 at byte 6");
}

Test(io, nul_byte_is_rejected)
{
    expect_failure(fixture_write("z.tsv", "a\tb\nc\0d\tx\n", 11), WEFT_ERR_PARSE,
                   ":2: NUL byte at byte 2");
}

Test(io, unreadable_file_is_io_error)
{
    expect_failure(fixture_path("missing.tsv"), WEFT_ERR_IO, ": No such file or directory");
}

Test(io, directory_is_io_error)
{
    expect_failure(fixture_dir, WEFT_ERR_IO, ": Is a directory");
}

Test(io, too_many_fields)
{
    expect_slurp(fixture_write_text("16.tsv", "1\t2\t3\t4\t5\t6\t7\t8\t9\t10\t11\t12\t13\t14\t15\t16\n"),
                 "1:1|2|3|4|5|6|7|8|9|10|11|12|13|14|15|16\n");
    expect_failure(fixture_write_text("17.tsv", "1\t2\t3\t4\t5\t6\t7\t8\t9\t10\t11\t12\t13\t14\t15\t16\t17\n"),
                   WEFT_ERR_PARSE, ":1: more than 16 fields");
    expect_failure(fixture_write_text("17.csv", "1,2,3,4,5,6,7,8,9,10,11,12,13,14,15,16,17\n"),
                   WEFT_ERR_PARSE, ":1: more than 16 fields");
}

Test(io, format_is_sniffed_without_extension)
{
    const char *p = fixture_write_text("commas", "# a,b\ta\nx,y\n");
    cr_assert_eq(format_of(p), WEFT_IO_CSV);
    expect_slurp(p, "2:x|y\n");
    p = fixture_write_text("tabs.txt", "x,y\tz\n");
    cr_assert_eq(format_of(p), WEFT_IO_TSV);
    expect_slurp(p, "1:x,y|z\n");
    p = fixture_write_text("single", "only one\n");
    cr_assert_eq(format_of(p), WEFT_IO_TSV);
    expect_slurp(p, "1:only one\n");
}

/*
 * Reference decoder written from the definition in RFC 3629 section 3 rather than from the
 * byte table: take the length from the lead byte's high bits, gather the payload bits of
 * continuation bytes, then reject a code point that is overlong for its length, a surrogate
 * (U+D800..U+DFFF) or above U+10FFFF.
 */
static bool utf8_reference(const unsigned char *s, size_t len)
{
    size_t i = 0;
    while (i < len) {
        unsigned c = s[i];
        size_t n;
        unsigned long cp, min;
        if (c < 0x80) {
            i++;
            continue;
        } else if ((c & 0xE0) == 0xC0) {
            n = 2, cp = c & 0x1F, min = 0x80;
        } else if ((c & 0xF0) == 0xE0) {
            n = 3, cp = c & 0x0F, min = 0x800;
        } else if ((c & 0xF8) == 0xF0) {
            n = 4, cp = c & 0x07, min = 0x10000;
        } else {
            return false;
        }
        if (len - i < n)
            return false;
        for (size_t k = 1; k < n; k++) {
            if ((s[i + k] & 0xC0) != 0x80)
                return false;
            cp = (cp << 6) | (s[i + k] & 0x3F);
        }
        if (cp < min || (cp >= 0xD800 && cp <= 0xDFFF) || cp > 0x10FFFF)
            return false;
        i += n;
    }
    return true;
}

Test(io, utf8_table_of_edge_cases)
{
    /* Boundaries from the Unicode Standard, Table 3-7 (well-formed byte sequences). */
    static const struct { const char *s; bool ok; } cases[] = {
        { "", true },                    { "abc", true },
        { "\xC2\x80", true },            /* U+0080 */
        { "\xDF\xBF", true },            /* U+07FF */
        { "\xE0\xA0\x80", true },        /* U+0800 */
        { "\xED\x9F\xBF", true },        /* U+D7FF */
        { "\xEE\x80\x80", true },        /* U+E000 */
        { "\xEF\xBF\xBF", true },        /* U+FFFF */
        { "\xF0\x90\x80\x80", true },    /* U+10000 */
        { "\xF4\x8F\xBF\xBF", true },    /* U+10FFFF */
        { "\xC0\x80", false },           /* overlong NUL */
        { "\xC1\xBF", false },           /* overlong U+007F */
        { "\xE0\x9F\xBF", false },       /* overlong U+07FF */
        { "\xF0\x8F\xBF\xBF", false },   /* overlong U+FFFF */
        { "\xED\xA0\x80", false },       /* U+D800, a surrogate */
        { "\xED\xBF\xBF", false },       /* U+DFFF, a surrogate */
        { "\xF4\x90\x80\x80", false },   /* U+110000 */
        { "\xF5\x80\x80\x80", false },
        { "\xFF", false },               { "\x80", false },
        { "\xC2", false },               { "\xE2\x82", false },
        { "\xE2\x28\xA1", false },       { "a\xF0\x90\x80", false },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++)
        cr_expect_eq(weft_io_utf8_valid(cases[i].s, strlen(cases[i].s)), cases[i].ok,
                     "case %zu", i);
}

Test(io, utf8_agrees_with_reference_decoder)
{
    unsigned char b[4];
    for (unsigned x = 0; x < 0x10000; x++) {   /* every 2-byte string */
        b[0] = (unsigned char)(x >> 8);
        b[1] = (unsigned char)x;
        cr_assert_eq(weft_io_utf8_valid((const char *)b, 2), utf8_reference(b, 2), "%02x %02x",
                     b[0], b[1]);
    }
    for (unsigned x = 0; x < 0x1000000; x++) {   /* every 3-byte string with a lead >= 0xC0 */
        b[0] = (unsigned char)(x >> 16);
        if (b[0] < 0xC0)
            continue;
        b[1] = (unsigned char)(x >> 8);
        b[2] = (unsigned char)x;
        if (weft_io_utf8_valid((const char *)b, 3) != utf8_reference(b, 3))
            cr_assert_fail("%02x %02x %02x", b[0], b[1], b[2]);
    }
    weft_rng rng;
    weft_rng_seed(&rng, 7);
    for (int k = 0; k < 1000000; k++) {   /* random 4-byte strings, leads biased to 0xF0.. */
        uint64_t r = weft_rng_next(&rng);
        b[0] = (unsigned char)(0xE8 + (r & 0x17));
        b[1] = (unsigned char)(r >> 8);
        b[2] = (unsigned char)(0x70 + ((r >> 16) & 0x5F));
        b[3] = (unsigned char)(0x70 + ((r >> 24) & 0x5F));
        if (weft_io_utf8_valid((const char *)b, 4) != utf8_reference(b, 4))
            cr_assert_fail("%02x %02x %02x %02x", b[0], b[1], b[2], b[3]);
    }
}

Test(io, fail_message_shape)
{
    const char *p = fixture_write_text("m.tsv", "a\tb\n");
    weft_io_reader *r = NULL;
    cr_assert_eq(weft_io_open(p, &r, NULL), WEFT_OK);
    char want[600];
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_io_fail(r, 7, 2, "target", &err, "empty"), WEFT_ERR_PARSE);
    snprintf(want, sizeof want, "%s:7: field 2 (target): empty", p);
    cr_assert_str_eq(err.msg, want);
    cr_assert_eq(err.code, WEFT_ERR_PARSE);
    weft_io_fail(r, 3, 0, NULL, &err, "expected %d fields like line %d, found %d", 2, 1, 4);
    snprintf(want, sizeof want, "%s:3: expected 2 fields like line 1, found 4", p);
    cr_assert_str_eq(err.msg, want);
    cr_assert_str_eq(weft_io_path(r), p);
    weft_io_close(r);
}

Test(io, check_name_limits)
{
    char line[3000];
    size_t used = 0;
    line[used++] = '\t';                       /* field 1 empty */
    memset(line + used, 'a', 1024);            /* field 2: exactly the limit */
    used += 1024;
    line[used++] = '\t';
    memset(line + used, 'b', 1025);            /* field 3: one byte over */
    used += 1025;
    line[used++] = '\n';
    const char *p = fixture_write("names.tsv", line, used);
    char path[512], want[600];
    strcpy(path, p);
    weft_io_reader *r = NULL;
    weft_io_record rec;
    bool eof = false;
    cr_assert_eq(weft_io_open(path, &r, NULL), WEFT_OK);
    cr_assert_eq(weft_io_next(r, &rec, &eof, NULL), WEFT_OK);
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_io_check_name(r, &rec, 1, "source", &err), WEFT_ERR_PARSE);
    snprintf(want, sizeof want, "%s:1: field 1 (source): empty", path);
    cr_assert_str_eq(err.msg, want);
    cr_assert_eq(weft_io_check_name(r, &rec, 2, "relation", &err), WEFT_OK);
    cr_assert_eq(weft_io_check_name(r, &rec, 3, "target", &err), WEFT_ERR_PARSE);
    snprintf(want, sizeof want, "%s:1: field 3 (target): name is 1025 bytes, limit 1024", path);
    cr_assert_str_eq(err.msg, want);
    weft_io_close(r);
}

static void expect_sha256(const char *path, const char *want)
{
    char hex[65];
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_io_sha256_file(path, hex, &err), WEFT_OK, "%s", err.msg);
    cr_assert_str_eq(hex, want);
}

Test(io, sha256_known_digests)
{
    /* Digests from FIPS 180-2, Appendix B.1 ("abc") and B.3 (a million 'a'); the empty
     * string's digest is the one `sha256sum /dev/null` prints. */
    expect_sha256(fixture_write_text("abc", "abc"),
                  "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    expect_sha256(fixture_write_text("empty", ""),
                  "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
    char *many = malloc(1000000);
    cr_assert_not_null(many);
    memset(many, 'a', 1000000);
    expect_sha256(fixture_write("million", many, 1000000),
                  "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
    free(many);
}

Test(io, sha256_missing_file_is_io_error)
{
    char hex[65], want[600];
    const char *p = fixture_path("nope");
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_io_sha256_file(p, hex, &err), WEFT_ERR_IO);
    snprintf(want, sizeof want, "%s: No such file or directory", p);
    cr_assert_str_eq(err.msg, want);
}
