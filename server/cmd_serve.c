/* weft serve: the HTTP API over the store's live snapshot, following promotions. */
#include "cmd.h"
#include "http.h"

#include <arpa/inet.h>
#include <netinet/in.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* From OpenBLAS (<cblas.h> there): requests already run in parallel, so each BLAS call
 * runs on the thread that makes it (docs/dependencies.md, section 12). */
void openblas_set_num_threads(int n);

#define SUB "serve"
#define MAX_THREADS 256
#define MAX_K_LIMIT 1000000

static const char usage_text[] =
    "usage: weft serve --store DIR [--listen ADDR:PORT] [--threads N] [--max-k N]\n"
    "                  [--poll-ms N]\n"
    "\n"
    "Serves predictions from the store's live snapshot as JSON over HTTP. A snapshot\n"
    "promoted later (by weft train) is picked up without a restart. SIGINT or SIGTERM\n"
    "stops it after open connections finish (at most 5 s).\n"
    "\n"
    "  --store DIR         the snapshot store; it may still be empty\n"
    "  --listen ADDR:PORT  numeric address to listen on (default 127.0.0.1:8080;\n"
    "                      IPv6 as [::1]:8080)\n"
    "  --threads N         request threads, 1 to 256 (default: the number of CPUs)\n"
    "  --max-k N           most predictions one request may ask for (default 1000)\n"
    "  --poll-ms N         how often to look for a new live snapshot, in ms (default 200)\n";

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

static unsigned online_cpus(void)
{
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    return n < 1 ? 1 : n > MAX_THREADS ? MAX_THREADS : (unsigned)n;
}

/* Fill @p cfg from argv. @return -1 to go on, else the exit status (help, usage error). */
static int parse_args(int argc, char **argv, http_settings *cfg)
{
    const char *listen_text = "127.0.0.1:8080";
    uint64_t threads = online_cpus(), max_k = HTTP_DEFAULT_MAX_K, poll_ms = HTTP_DEFAULT_POLL_MS;
    cfg->store_dir = NULL;
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
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--threads", &bad))) {
            if (!cmd_parse_u64(SUB, "--threads", v, 1, MAX_THREADS, &threads))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--max-k", &bad))) {
            if (!cmd_parse_u64(SUB, "--max-k", v, 1, MAX_K_LIMIT, &max_k))
                return CMD_USAGE;
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
    cfg->n_threads = (unsigned)threads;
    cfg->max_k = (size_t)max_k;
    cfg->poll_ms = (unsigned)poll_ms;
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

    weft_error err;
    weft_error_clear(&err);
    http_live *live = NULL;
    http_daemon *server = NULL;
    if (http_live_start(cfg.store_dir, cfg.poll_ms, &live, &err) != WEFT_OK)
        return cmd_report_error(&err);
    if (http_daemon_start(&cfg, live, &server, &err) != WEFT_OK) {
        http_live_stop(live);
        return cmd_report_error(&err);
    }
    http_log("listening on http://%s (request threads: %u, store: %s)", cfg.listen,
             cfg.n_threads, cfg.store_dir);

    int sig = wait_for_stop(&stop_signals);
    http_log("%s: finishing open requests", sig == SIGINT ? "SIGINT" : "SIGTERM");
    http_daemon_stop(server, HTTP_DRAIN_MS);
    http_live_stop(live);
    http_log("stopped");
    return CMD_OK;
}
