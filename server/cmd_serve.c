/* weft serve: the HTTP API over the store's live snapshot, following promotions. */
#define _GNU_SOURCE   /* sched_getaffinity: the cores this process may run on */
#include "cmd.h"
#include "http.h"

#include <arpa/inet.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdlib.h>
#include <nettle/sha2.h>
#include <netinet/in.h>
#include <pthread.h>
#include <sched.h>
#include <signal.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* From OpenBLAS (<cblas.h> there): requests already run in parallel, so each BLAS call
 * runs on the thread that makes it (docs/dependencies.md, section 12). */
void openblas_set_num_threads(int n);

#define SUB "serve"
#define MAX_CONNECTIONS_LIMIT 16384
#define MAX_K_LIMIT 1000000
#define MAX_BATCH_LIMIT 100000
#define MAX_BODY_LIMIT (1ull << 30)
/* An admin token shorter than this is refused: it could be guessed. */
#define MIN_TOKEN_BYTES 16
#define MAX_TOKEN_BYTES 4096
/* A certificate chain or a key in PEM takes a few KB; a larger file is not one. */
#define MAX_TLS_FILE_BYTES (1u << 20)
#define MAX_TLS_PASSWORD_BYTES 1024

static const char usage_text[] =
    "usage: weft serve --store DIR [--listen ADDR:PORT] [--max-connections N] [--max-k N]\n"
    "                  [--max-batch N] [--max-body BYTES] [--admin-token-file FILE]\n"
    "                  [--poll-ms N] [--max-age AGE] [--access-log FILE] [--inputs FILE,...]\n"
    "                  [--scan-threads N] [--tls-cert FILE --tls-key FILE\n"
    "                  [--tls-key-password-file FILE]]\n"
    "\n"
    "Serves predictions from the store's live snapshot as JSON over HTTP. A snapshot\n"
    "promoted later (by weft train) is picked up without a restart. SIGINT or SIGTERM\n"
    "stops it after open connections finish (at most 5 s).\n"
    "\n"
    "  --store DIR         the snapshot store; it may still be empty (required)\n"
    "  --listen ADDR:PORT  numeric address to listen on (default 127.0.0.1:8080;\n"
    "                      IPv6 as [::1]:8080)\n"
    "  --max-connections N connections open at once, each served by its own thread; more\n"
    "                      wait in the listen backlog (default 1024, at most 16384)\n"
    "  --scan-threads N    top-k passes that may run at once (default: the usable cores)\n"
    "  --max-k N           most predictions one request may ask for (default 1000)\n"
    "  --max-batch N       most queries, triples or nodes one POST may hold (default 1000)\n"
    "  --max-body BYTES    largest request body (default 1048576)\n"
    "  --admin-token-file FILE\n"
    "                      turn on the admin routes (promote, rollback), which then need\n"
    "                      'Authorization: Bearer TOKEN' with the token in FILE (read once,\n"
    "                      at start; at least 16 bytes; surrounding white space ignored).\n"
    "                      The store is then opened for writing (default: none, and the\n"
    "                      admin routes answer 404)\n"
    "  --poll-ms N         how often to look for a new live snapshot, in ms (default 200)\n"
    "  --max-age AGE       /v1/health warns when the live snapshot is older than AGE and\n"
    "                      fails past twice AGE: seconds, or a number with s, m, h or d\n"
    "                      (default 7d)\n"
    "  --access-log FILE   one JSON line per request, appended to FILE; '-' is stderr (the\n"
    "                      default), 'off' writes none\n"
    "  --inputs FILE,...   edge files whose nodes /v1/health's coverage check looks up in the\n"
    "                      live node table (default: the edge files the snapshot's manifest\n"
    "                      names, where they can be read)\n"
    "  --tls-cert FILE     serve HTTPS (TLS 1.2 or 1.3) with the certificate in FILE (PEM;\n"
    "                      the server's certificate first, then any intermediate ones);\n"
    "                      needs --tls-key (default: none, plain HTTP)\n"
    "  --tls-key FILE      the certificate's private key (PEM), read once at start and wiped\n"
    "                      from memory once the TLS library holds it; needs --tls-cert\n"
    "                      (default: none)\n"
    "  --tls-key-password-file FILE\n"
    "                      the password of an encrypted --tls-key, on the file's first line\n"
    "                      (default: none, the key is not encrypted)\n";

/* "A.B.C.D:PORT" or "[v6]:PORT", numeric only: a name would need a resolver and could
 * silently bind somewhere other than intended. */
static bool parse_listen(const char *given, http_settings *cfg)
{
    const char *text = given;
    char host[64];
    const char *colon;
    size_t host_len;
    if (text[0] == '[') {
        const char *bracket = strchr(text, ']');
        if (!bracket || bracket[1] != ':') {
            cmd_usage_error(SUB, "--listen: '%s' is not [IPv6]:PORT", given);
            return false;
        }
        colon = bracket + 1;
        host_len = (size_t)(bracket - text - 1);
        text++;
        cfg->is_ipv6 = true;
    } else {
        colon = strrchr(text, ':');
        host_len = colon ? (size_t)(colon - text) : 0;
        cfg->is_ipv6 = false;
    }
    if (!colon || host_len == 0 || host_len >= sizeof host) {
        cmd_usage_error(SUB, "--listen: '%s' is not ADDR:PORT (for example 127.0.0.1:8080)",
                        given);
        return false;
    }
    memcpy(host, text, host_len);
    host[host_len] = '\0';
    uint64_t port = 0;
    if (!cmd_parse_u64(SUB, "--listen port", colon + 1, 1, 65535, &port))
        return false;
    memset(&cfg->addr, 0, sizeof cfg->addr);
    cfg->port = (uint16_t)port;
    int ok;
    if (cfg->is_ipv6) {
        struct sockaddr_in6 *a6 = (struct sockaddr_in6 *)&cfg->addr;
        a6->sin6_family = AF_INET6;
        a6->sin6_port = htons((uint16_t)port);
        ok = inet_pton(AF_INET6, host, &a6->sin6_addr);
        cfg->addr_len = sizeof *a6;
    } else {
        struct sockaddr_in *a4 = (struct sockaddr_in *)&cfg->addr;
        a4->sin_family = AF_INET;
        a4->sin_port = htons((uint16_t)port);
        ok = inet_pton(AF_INET, host, &a4->sin_addr);
        cfg->addr_len = sizeof *a4;
    }
    if (ok != 1) {
        cmd_usage_error(SUB, "--listen: '%s' is not a numeric %s address (for example %s)",
                        host, cfg->is_ipv6 ? "IPv6" : "IPv4",
                        cfg->is_ipv6 ? "[::1]:8080" : "127.0.0.1:8080");
        return false;
    }
    return true;
}

/* Read the admin token from @p path and keep only its SHA-256 in @p cfg: requests are then
 * compared digest to digest, in constant time, whatever their length. */
static bool read_admin_token(const char *path, http_settings *cfg)
{
    FILE *f = fopen(path, "r");
    if (!f) {
        cmd_usage_error(SUB, "--admin-token-file: %s: %s", path, strerror(errno));
        return false;
    }
    char buf[MAX_TOKEN_BYTES + 2];
    size_t n = fread(buf, 1, sizeof buf, f);
    bool is_read_error = ferror(f);
    struct stat st;
    bool is_shared = fstat(fileno(f), &st) == 0 && (st.st_mode & 077);
    fclose(f);
    if (is_read_error) {
        cmd_usage_error(SUB, "--admin-token-file: %s: cannot read it", path);
        return false;
    }
    if (n > MAX_TOKEN_BYTES) {
        cmd_usage_error(SUB, "--admin-token-file: %s: longer than %d bytes", path,
                        MAX_TOKEN_BYTES);
        return false;
    }
    size_t start = 0;
    while (start < n && (buf[start] == ' ' || buf[start] == '\t' || buf[start] == '\n' ||
                         buf[start] == '\r'))
        start++;
    while (n > start && (buf[n - 1] == ' ' || buf[n - 1] == '\t' || buf[n - 1] == '\n' ||
                         buf[n - 1] == '\r'))
        n--;
    if (n - start < MIN_TOKEN_BYTES) {
        cmd_usage_error(SUB, "--admin-token-file: %s: the token must have at least %d bytes",
                        path, MIN_TOKEN_BYTES);
        return false;
    }
    struct sha256_ctx ctx;
    sha256_init(&ctx);
    sha256_update(&ctx, n - start, (const uint8_t *)buf + start);
    sha256_digest(&ctx, sizeof cfg->admin_token_sha256, cfg->admin_token_sha256);
    memset(buf, 0, sizeof buf);
    cfg->has_admin_token = true;
    if (is_shared)
        fprintf(stderr, "weft: warning: %s can be read by other users (chmod 600 it)\n", path);
    return true;
}

/* "3600", "90s", "30m", "36h", "7d", "1.5d": seconds, from 1 s to 10 years. */
static bool parse_age(const char *text, double *out)
{
    double seconds = 0.0;
    if (!cmd_parse_duration(text, &seconds) || seconds < 1 || seconds > 10 * 366 * 86400.0) {
        cmd_usage_error(SUB, "--max-age: '%s' is not an age from 1s to 3660d (for example "
                        "3600, 36h or 7d)", text);
        return false;
    }
    *out = seconds;
    return true;
}

/* "-" is stderr, "off" none, else a file opened for appending (created 0640). */
static bool open_access_log(const char *path, http_settings *cfg)
{
    if (!strcmp(path, "-")) {
        cfg->access_log_fd = STDERR_FILENO;
    } else if (!strcmp(path, "off")) {
        cfg->access_log_fd = -1;
    } else {
        cfg->access_log_fd = open(path, O_WRONLY | O_APPEND | O_CREAT | O_CLOEXEC, 0640);
        if (cfg->access_log_fd < 0) {
            cmd_usage_error(SUB, "--access-log: %s: %s", path, strerror(errno));
            return false;
        }
    }
    return true;
}

/* ---- HTTPS: the certificate, its key and the key's password, read once at start ---- */

/* Overwrite and free a buffer that may hold key material; NULL does nothing. */
static void forget(char *buf, size_t len)
{
    if (buf) {
        explicit_bzero(buf, len);
        free(buf);
    }
}

/* Wipe and free what parse_args read for HTTPS; the paths stay for messages. */
static void forget_tls(http_settings *cfg)
{
    forget(cfg->tls_cert_pem, cfg->tls_cert_pem ? strlen(cfg->tls_cert_pem) : 0);
    forget(cfg->tls_key_pem, cfg->tls_key_pem ? strlen(cfg->tls_key_pem) : 0);
    forget(cfg->tls_key_password, cfg->tls_key_password ? strlen(cfg->tls_key_password) : 0);
    cfg->tls_cert_pem = cfg->tls_key_pem = cfg->tls_key_password = NULL;
}

/* All of @p path (at most @p max bytes, no NUL byte) as a new NUL-terminated text for
 * option @p flag; *@p is_public tells whether every user on the host may read the file.
 * read(2), not stdio: no buffer of stdio's keeps a copy of a key after it is freed. NULL
 * after a usage error. Free it with forget(). */
static char *read_text_file(const char *flag, const char *path, size_t max, bool *is_public)
{
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0) {
        cmd_usage_error(SUB, "%s: %s: %s", flag, path, strerror(errno));
        return NULL;
    }
    struct stat st;
    *is_public = fstat(fd, &st) == 0 && (st.st_mode & S_IROTH);
    char *buf = malloc(max + 1);
    size_t n = 0;
    int read_errno = 0;
    while (buf && n <= max) {
        ssize_t got = read(fd, buf + n, max + 1 - n);
        if (got < 0 && errno == EINTR)
            continue;
        if (got < 0)
            read_errno = errno;
        if (got <= 0)
            break;
        n += (size_t)got;
    }
    close(fd);
    const char *problem = !buf ? "no memory to read it"
                          : read_errno ? strerror(read_errno)
                          : n > max ? "too large for a PEM certificate, key or password"
                          : n == 0 ? "it is empty"
                          : memchr(buf, '\0', n) ? "it is not text (a NUL byte; a DER file "
                                                   "must be converted to PEM)"
                          : NULL;
    if (problem) {
        forget(buf, n);
        cmd_usage_error(SUB, "%s: %s: %s", flag, path, problem);
        return NULL;
    }
    buf[n] = '\0';
    return buf;
}

/* What the PEM blocks of a file hold; GnuTLS decodes them when the daemon starts. */
typedef struct pem_shape {
    size_t n_certs;       /* blocks labelled "CERTIFICATE" (or "X509 CERTIFICATE") */
    size_t n_keys;        /* blocks labelled "PRIVATE KEY", "EC PRIVATE KEY", ... */
    bool is_encrypted;    /* a key needs a password: PKCS #8 "ENCRYPTED PRIVATE KEY", or
                             a "Proc-Type: 4,ENCRYPTED" header */
} pem_shape;

static bool has_prefix(const char *s, size_t n, const char *prefix)
{
    size_t k = strlen(prefix);
    return n >= k && memcmp(s, prefix, k) == 0;
}

static bool has_suffix(const char *s, size_t n, const char *suffix)
{
    size_t k = strlen(suffix);
    return n >= k && memcmp(s + n - k, suffix, k) == 0;
}

/* Check that every PEM block of @p text (RFC 7468) is whole: "-----BEGIN L-----", optional
 * "Name: value" headers, base64 lines, "-----END L-----" with the same label; and count
 * them into @p out. Text outside the blocks (openssl's "Bag Attributes", a printed
 * certificate) is skipped, as GnuTLS skips it. So a wrong, cut or edited file is named here,
 * before the start, and GnuTLS finds the rest (bad DER, a key that does not match).
 * @return true, or false with what is wrong in @p why */
static bool pem_read_shape(const char *text, pem_shape *out, char *why, size_t why_size)
{
    static const char begin[] = "-----BEGIN ", end[] = "-----END ", dashes[] = "-----";
    memset(out, 0, sizeof *out);
    char label[64] = "";
    bool is_inside = false, has_body = false, is_encrypted = false;
    size_t line = 0;
    for (const char *p = text; *p; ) {
        const char *eol = strchr(p, '\n');
        size_t n = eol ? (size_t)(eol - p) : strlen(p);
        const char *next = eol ? eol + 1 : p + n;
        line++;
        while (n && (p[n - 1] == '\r' || p[n - 1] == ' ' || p[n - 1] == '\t'))
            n--;
        size_t frame = (sizeof begin - 1) + (sizeof dashes - 1);
        size_t label_len = n > frame ? n - frame : 0;
        if (!is_inside && has_prefix(p, n, begin)) {
            if (!has_suffix(p, n, dashes) || label_len == 0 || label_len >= sizeof label) {
                snprintf(why, why_size, "line %zu: a BEGIN line without a PEM label", line);
                return false;
            }
            memcpy(label, p + sizeof begin - 1, label_len);
            label[label_len] = '\0';
            is_inside = true;
            has_body = false;
            is_encrypted = !strcmp(label, "ENCRYPTED PRIVATE KEY");
        } else if (is_inside && has_prefix(p, n, begin)) {
            snprintf(why, why_size, "line %zu: a BEGIN line inside the %s block (its END line "
                     "is missing)", line, label);
            return false;
        } else if (!is_inside && has_prefix(p, n, end)) {
            snprintf(why, why_size, "line %zu: an END line without its BEGIN line", line);
            return false;
        } else if (is_inside && has_prefix(p, n, end)) {
            size_t k = strlen(label);
            if (n != sizeof end - 1 + k + sizeof dashes - 1
                || memcmp(p + sizeof end - 1, label, k) != 0 || !has_suffix(p, n, dashes)) {
                snprintf(why, why_size, "line %zu: this END line does not close the %s block",
                         line, label);
                return false;
            }
            if (!has_body) {
                snprintf(why, why_size, "line %zu: the %s block is empty", line, label);
                return false;
            }
            if (!strcmp(label, "CERTIFICATE") || !strcmp(label, "X509 CERTIFICATE"))
                out->n_certs++;
            else if (has_suffix(label, k, "PRIVATE KEY")) {
                out->n_keys++;
                out->is_encrypted |= is_encrypted;
            }
            is_inside = false;
        } else if (is_inside && !has_body && memchr(p, ':', n)) {
            /* a header of the older encrypted form: "Proc-Type: 4,ENCRYPTED", "DEK-Info: ..." */
            if (has_prefix(p, n, "Proc-Type:") && has_suffix(p, n, "ENCRYPTED"))
                is_encrypted = true;
        } else if (is_inside) {
            for (size_t i = 0; i < n; i++) {
                unsigned char c = (unsigned char)p[i];
                if (!(c >= 'A' && c <= 'Z') && !(c >= 'a' && c <= 'z')
                    && !(c >= '0' && c <= '9') && !strchr("+/= \t", c)) {
                    snprintf(why, why_size, "line %zu: a byte that is not base64 (0x%02x) in "
                             "the %s block", line, c, label);
                    return false;
                }
            }
            has_body |= n > 0;
        }
        p = next;
    }
    if (is_inside) {
        snprintf(why, why_size, "the %s block has no END line (is the file cut short?)", label);
        return false;
    }
    return true;
}

/* Read --tls-cert, --tls-key and --tls-key-password-file into @p cfg after checking their
 * shape. @return -1 to go on, else the exit status (a usage error, or no TLS in
 * libmicrohttpd); nothing is left allocated then. */
static int read_tls_files(const char *cert_path, const char *key_path, const char *password_path,
                          http_settings *cfg)
{
    if (MHD_is_feature_supported(MHD_FEATURE_TLS) != MHD_YES
        || (password_path && MHD_is_feature_supported(MHD_FEATURE_HTTPS_KEY_PASSWORD) != MHD_YES)) {
        weft_error err;
        weft_error_set(&err, WEFT_ERR_INVALID, "this libmicrohttpd (%s) was built without %s: "
                       "serve plain HTTP behind a TLS proxy, or use a libmicrohttpd built "
                       "with GnuTLS (Debian's is)", MHD_get_version(),
                       password_path ? "encrypted TLS keys" : "TLS support");
        return cmd_report_error(&err);
    }
    cfg->tls_cert_path = cert_path;
    cfg->tls_key_path = key_path;
    bool is_public = false;
    char why[160];
    pem_shape shape;
    if (!(cfg->tls_cert_pem = read_text_file("--tls-cert", cert_path, MAX_TLS_FILE_BYTES,
                                             &is_public)))
        return CMD_USAGE;
    bool is_whole = pem_read_shape(cfg->tls_cert_pem, &shape, why, sizeof why);
    if (!is_whole || shape.n_certs == 0) {
        if (is_whole && shape.n_keys > 0)
            snprintf(why, sizeof why, "it holds a private key but no certificate: give the "
                     "certificate to --tls-cert and its key to --tls-key");
        else if (is_whole)
            snprintf(why, sizeof why, "no PEM certificate in it (a '-----BEGIN "
                     "CERTIFICATE-----' block)");
        forget_tls(cfg);
        return cmd_usage_error(SUB, "--tls-cert: %s: %s", cert_path, why);
    }
    if (!(cfg->tls_key_pem = read_text_file("--tls-key", key_path, MAX_TLS_FILE_BYTES,
                                            &is_public))) {
        forget_tls(cfg);
        return CMD_USAGE;
    }
    if (is_public)
        fprintf(stderr, "weft: warning: %s can be read by every user (chmod 600 or 640 it)\n",
                key_path);
    is_whole = pem_read_shape(cfg->tls_key_pem, &shape, why, sizeof why);
    if (!is_whole || shape.n_keys != 1) {
        if (is_whole && shape.n_keys > 1)
            snprintf(why, sizeof why, "it holds %zu private keys: give the one of the "
                     "certificate", shape.n_keys);
        else if (is_whole && shape.n_certs > 0)
            snprintf(why, sizeof why, "it holds a certificate but no private key: give the "
                     "certificate to --tls-cert and its key to --tls-key");
        else if (is_whole)
            snprintf(why, sizeof why, "no PEM private key in it (a '-----BEGIN ... PRIVATE "
                     "KEY-----' block)");
        forget_tls(cfg);
        return cmd_usage_error(SUB, "--tls-key: %s: %s", key_path, why);
    }
    if (shape.is_encrypted && !password_path) {
        forget_tls(cfg);
        return cmd_usage_error(SUB, "--tls-key: %s: the key is encrypted: give its password "
                               "with --tls-key-password-file FILE", key_path);
    }
    if (password_path) {
        char *text = read_text_file("--tls-key-password-file", password_path,
                                    MAX_TLS_PASSWORD_BYTES, &is_public);
        if (!text) {
            forget_tls(cfg);
            return CMD_USAGE;
        }
        cfg->tls_key_password = text;
        size_t len = strlen(text), first = strcspn(text, "\r\n");
        explicit_bzero(text + first, len - first);   /* the password is the first line */
        if (is_public)
            fprintf(stderr, "weft: warning: %s can be read by every user (chmod 600 it)\n",
                    password_path);
        if (!*text) {
            forget_tls(cfg);
            return cmd_usage_error(SUB, "--tls-key-password-file: %s: the first line is empty",
                                   password_path);
        }
    }
    return -1;
}

/* The cores this process may run on (a taskset counts), at least 1. */
static unsigned usable_cpus(void)
{
    cpu_set_t set;
    long n = sched_getaffinity(0, sizeof set, &set) == 0 ? CPU_COUNT(&set)
                                                          : sysconf(_SC_NPROCESSORS_ONLN);
    return n < 1 ? 1 : n > HTTP_SCAN_MAX_LEADERS ? HTTP_SCAN_MAX_LEADERS : (unsigned)n;
}

/* Fill @p cfg from argv. @return -1 to go on, else the exit status (help, usage error). */
static int parse_args(int argc, char **argv, http_settings *cfg)
{
    const char *listen_text = "127.0.0.1:8080";
    uint64_t connections = HTTP_DEFAULT_MAX_CONNECTIONS, scan = usable_cpus();
    uint64_t max_k = HTTP_DEFAULT_MAX_K, poll_ms = HTTP_DEFAULT_POLL_MS;
    uint64_t max_batch = HTTP_DEFAULT_MAX_BATCH, max_body = HTTP_DEFAULT_MAX_BODY;
    const char *token_file = NULL, *access_log = "-";
    const char *tls_cert = NULL, *tls_key = NULL, *tls_password = NULL;
    cfg->store_dir = NULL;
    cfg->max_age_seconds = HTTP_DEFAULT_MAX_AGE_SECONDS;
    cfg->inputs = NULL;
    int status;
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            fputs(usage_text, stdout);
            return CMD_OK;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--store", &bad))) {
            cfg->store_dir = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--listen", &bad))) {
            listen_text = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--max-connections", &bad))) {
            if (!cmd_parse_u64(SUB, "--max-connections", v, 1, MAX_CONNECTIONS_LIMIT,
                               &connections))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--scan-threads", &bad))) {
            if (!cmd_parse_u64(SUB, "--scan-threads", v, 1, HTTP_SCAN_MAX_LEADERS, &scan))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--max-k", &bad))) {
            if (!cmd_parse_u64(SUB, "--max-k", v, 1, MAX_K_LIMIT, &max_k))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--max-batch", &bad))) {
            if (!cmd_parse_u64(SUB, "--max-batch", v, 1, MAX_BATCH_LIMIT, &max_batch))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--max-body", &bad))) {
            if (!cmd_parse_u64(SUB, "--max-body", v, 64, MAX_BODY_LIMIT, &max_body))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--admin-token-file", &bad))) {
            token_file = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--max-age", &bad))) {
            if (!parse_age(v, &cfg->max_age_seconds))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--access-log", &bad))) {
            access_log = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--inputs", &bad))) {
            if (!*v)
                return cmd_usage_error(SUB, "--inputs: give at least one file");
            cfg->inputs = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--tls-cert", &bad))) {
            tls_cert = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--tls-key", &bad))) {
            tls_key = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--tls-key-password-file", &bad))) {
            tls_password = v;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--poll-ms", &bad))) {
            if (!cmd_parse_u64(SUB, "--poll-ms", v, 10, 600000, &poll_ms))
                return CMD_USAGE;
        } else if (!bad) {
            return cmd_usage_error(SUB, "unknown argument '%s'", argv[i]);
        }
        if (bad)
            return CMD_USAGE;
    }
    if (!cfg->store_dir)
        return cmd_usage_error(SUB, "--store DIR is required");
    if (tls_cert && !tls_key)
        return cmd_usage_error(SUB, "--tls-cert needs --tls-key FILE, the certificate's "
                               "private key");
    if (tls_key && !tls_cert)
        return cmd_usage_error(SUB, "--tls-key needs --tls-cert FILE, the certificate");
    if (tls_password && !tls_key)
        return cmd_usage_error(SUB, "--tls-key-password-file needs --tls-cert and --tls-key");
    struct stat st;
    if (stat(cfg->store_dir, &st) != 0 || !S_ISDIR(st.st_mode))
        return cmd_usage_error(SUB, "--store: '%s' is not a directory", cfg->store_dir);
    if (!parse_listen(listen_text, cfg))
        return CMD_USAGE;
    snprintf(cfg->listen, sizeof cfg->listen, "%s", listen_text);
    cfg->max_connections = (unsigned)connections;
    cfg->n_scan_threads = (unsigned)scan;
    cfg->max_k = (size_t)max_k;
    cfg->poll_ms = (unsigned)poll_ms;
    cfg->max_batch = (size_t)max_batch;
    cfg->max_body = (size_t)max_body;
    if (token_file && !read_admin_token(token_file, cfg))
        return CMD_USAGE;
    if (tls_cert && (status = read_tls_files(tls_cert, tls_key, tls_password, cfg)) >= 0)
        return status;
    if (!open_access_log(access_log, cfg)) {   /* last: nothing fails after it opens a file */
        forget_tls(cfg);
        return CMD_USAGE;
    }
    return -1;
}

/* Block SIGINT and SIGTERM in this thread before any other starts, so every thread inherits
 * the mask and only the sigwait() in cmd_serve_main sees them. */
static bool block_stop_signals(sigset_t *set)
{
    sigemptyset(set);
    sigaddset(set, SIGINT);
    sigaddset(set, SIGTERM);
    struct sigaction ignore = { .sa_handler = SIG_IGN };
    sigemptyset(&ignore.sa_mask);
    return pthread_sigmask(SIG_BLOCK, set, NULL) == 0 && sigaction(SIGPIPE, &ignore, NULL) == 0;
}

static int wait_for_stop(const sigset_t *set)
{
    int sig = 0;
    while (sigwait(set, &sig) != 0 || (sig != SIGINT && sig != SIGTERM))
        ;
    return sig;
}

int cmd_serve_main(int argc, char **argv)
{
    http_settings cfg;
    memset(&cfg, 0, sizeof cfg);
    int status = parse_args(argc, argv, &cfg);
    if (status >= 0)
        return status;   /* parse_args left nothing allocated */

    /* Before any thread starts: both settings are process-wide. */
    openblas_set_num_threads(1);
    json_object_seed(0);
    sigset_t stop_signals;
    if (!block_stop_signals(&stop_signals)) {
        fprintf(stderr, "weft: cannot set up signal handling\n");
        forget_tls(&cfg);
        return CMD_FAIL;
    }

    http_scan_init(cfg.n_scan_threads);
    weft_error err;
    weft_error_clear(&err);
    http_live *live = NULL;
    http_daemon *server = NULL;
    weft_err rc = http_live_start(cfg.store_dir, cfg.poll_ms, cfg.has_admin_token, cfg.inputs,
                                  &live, &err);
    if (rc == WEFT_OK)
        rc = http_daemon_start(&cfg, live, &server, &err);
    forget_tls(&cfg);   /* libmicrohttpd no longer needs them: GnuTLS has its own copy */
    if (rc != WEFT_OK) {
        http_live_stop(live);
        return cmd_report_error(&err);
    }
    char tls_note[300] = "";
    if (cfg.tls_cert_path)
        snprintf(tls_note, sizeof tls_note, "TLS 1.2 or 1.3 with the certificate %s, ",
                 cfg.tls_cert_path);
    http_log("listening on %s://%s (%sconnections at most: %u, top-k passes at once: %u, "
             "store: %s, admin routes %s)", cfg.tls_cert_path ? "https" : "http", cfg.listen,
             tls_note, cfg.max_connections, cfg.n_scan_threads, cfg.store_dir,
             cfg.has_admin_token ? "on" : "off");

    int sig = wait_for_stop(&stop_signals);
    http_log("%s: finishing open requests", sig == SIGINT ? "SIGINT" : "SIGTERM");
    http_daemon_stop(server, HTTP_DRAIN_MS);
    http_live_stop(live);
    http_scan_fini();
    http_log("stopped");
    if (cfg.access_log_fd > STDERR_FILENO)
        close(cfg.access_log_fd);
    return CMD_OK;
}
