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

static const char usage_text[] =
    "usage: weft serve --store DIR [--listen ADDR:PORT] [--max-connections N] [--max-k N]\n"
    "                  [--max-batch N] [--max-body BYTES] [--admin-token-file FILE]\n"
    "                  [--poll-ms N] [--max-age AGE] [--access-log FILE] [--inputs FILE,...]\n"
    "\n"
    "Serves predictions from the store's live snapshot as JSON over HTTP. A snapshot\n"
    "promoted later (by weft train) is picked up without a restart. SIGINT or SIGTERM\n"
    "stops it after open connections finish (at most 5 s).\n"
    "\n"
    "  --store DIR         the snapshot store; it may still be empty\n"
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
    "                      The store is then opened for writing. Without it they answer 404\n"
    "  --poll-ms N         how often to look for a new live snapshot, in ms (default 200)\n"
    "  --max-age AGE       /v1/health warns when the live snapshot is older than AGE and\n"
    "                      fails past twice AGE: seconds, or a number with s, m, h or d\n"
    "                      (default 7d)\n"
    "  --access-log FILE   one JSON line per request, appended to FILE; '-' is stderr (the\n"
    "                      default), 'off' writes none\n"
    "  --inputs FILE,...   edge files whose nodes /v1/health's coverage check looks up in the\n"
    "                      live node table (default: the edge files the snapshot's manifest\n"
    "                      names, where they can be read)\n";

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
    char *end = NULL;
    double v = strtod(text, &end);
    double unit = 1;
    if (end && end != text && end[0] && !end[1]) {
        unit = end[0] == 's' ? 1 : end[0] == 'm' ? 60 : end[0] == 'h' ? 3600
               : end[0] == 'd' ? 86400 : 0;
        end++;
    }
    double seconds = v * unit;
    if (!end || end == text || *end || unit == 0 || !isfinite(seconds) || seconds < 1
        || seconds > 10 * 366 * 86400.0) {
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
    cfg->store_dir = NULL;
    cfg->max_age_seconds = HTTP_DEFAULT_MAX_AGE_SECONDS;
    cfg->inputs = NULL;
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
    if (!open_access_log(access_log, cfg))   /* last: nothing fails after it opens a file */
        return CMD_USAGE;
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
        return status;

    /* Before any thread starts: both settings are process-wide. */
    openblas_set_num_threads(1);
    json_object_seed(0);
    sigset_t stop_signals;
    if (!block_stop_signals(&stop_signals)) {
        fprintf(stderr, "weft: cannot set up signal handling\n");
        return CMD_FAIL;
    }

    http_scan_init(cfg.n_scan_threads);
    weft_error err;
    weft_error_clear(&err);
    http_live *live = NULL;
    http_daemon *server = NULL;
    if (http_live_start(cfg.store_dir, cfg.poll_ms, cfg.has_admin_token, &live, &err) != WEFT_OK)
        return cmd_report_error(&err);
    if ((cfg.inputs && http_live_set_inputs(live, cfg.inputs, &err) != WEFT_OK)
        || http_daemon_start(&cfg, live, &server, &err) != WEFT_OK) {
        http_live_stop(live);
        return cmd_report_error(&err);
    }
    http_log("listening on http://%s (connections at most: %u, top-k passes at once: %u, "
             "store: %s, admin routes %s)", cfg.listen, cfg.max_connections,
             cfg.n_scan_threads, cfg.store_dir, cfg.has_admin_token ? "on" : "off");

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
