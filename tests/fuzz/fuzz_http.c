/* Fuzz target: the HTTP API as a client reaches it: the query strings and JSON bodies the
 * server decodes (server/http_route.c: http_route_arg, http_route_arg_count,
 * http_route_body, http_route_known_keys; the handlers of http_links.c, http_labels.c,
 * http_nodes.c, http_explain.c, http_snapshots.c, ...) behind the real daemon
 * (http_daemon.c: bodies, limits, routing, rendering).
 *
 * Set-up, once per process: a small graph written to a private directory (fuzz_dir()) is
 * trained in-process (cmd_train_main) into a store there: version 1, live, a DistMult link
 * model over two relations, a GCN label model and node types, names with a slash, a space
 * and a non-ASCII letter. The loader (http_live_start) and the daemon (http_daemon_start)
 * then serve it on a free loopback port as weft serve would, with small limits (bodies of
 * 2048 bytes, batches of 8, k up to 50) and the admin routes on. The store is opened
 * read-only, so an admin request is authenticated and decoded in full, then refused by the
 * store (422): what is served never changes from one input to the next.
 *
 * An input is one request:
 *   byte 0  the method: GET, POST, PUT, DELETE, HEAD, OPTIONS, PATCH (the byte mod 7)
 *   byte 1  how the path starts: an entry of paths[] below (the byte mod their count);
 *           entry 0 is empty, so that the input gives the whole path
 *   byte 2  flags: 1 the right admin token, 2 the body chunked, 4 "Content-Type:
 *           application/json", 8 "Connection: close", 16 a declared body over the limit
 *           (none is sent)
 *   rest    the rest of the path and the query string, up to the first '\n', with the bytes
 *           a request line cannot hold percent-encoded (controls, space, '#', bytes above
 *           0x7e: the server decodes them back); after the '\n', if any, the body (perhaps
 *           empty)
 * It goes over one kept-alive loopback connection, and the whole response is read.
 *
 * Findings: a status other than 200, 400, 401, 404, 405, 413, 422 or 503 (a 500 included);
 * a JSON response that does not parse, is not an object, lacks "version", or lacks the
 * {"error": {"code", "message"}} of a failure; a connection closed without an answer; no
 * answer within 8 s; and whatever the sanitizers see in the server's threads.
 * With WEFT_FUZZ_VERBOSE set, each request line and its status are printed on stderr. */
#include <arpa/inet.h>
#include <errno.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <signal.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/socket.h>
#include <sys/time.h>
#include <time.h>
#include <unistd.h>

#include <jansson.h>
#include <nettle/sha2.h>

#include "../../server/cmd.h"
#include "../../server/http.h"
#include "fuzz.h"

/* Declared by OpenBLAS's cblas.h, which the server does not include either. */
void openblas_set_num_threads(int n);

/* The sanitizers' allocation hooks (sanitizer/allocator_interface.h), when linked in. */
int __sanitizer_install_malloc_and_free_hooks(void (*on_malloc)(const volatile void *, size_t),
                                              void (*on_free)(const volatile void *))
    __attribute__((weak));

static const char *const methods[] = { "GET", "POST", "PUT", "DELETE", "HEAD", "OPTIONS",
                                       "PATCH" };
static const char *const paths[] = {
    "", "/healthz", "/readyz", "/v1/health", "/metrics", "/v1/model", "/v1/links/predict",
    "/v1/links/score", "/v1/links/explain", "/v1/labels/predict", "/v1/labels/explain",
    "/v1/nodes/", "/v1/snapshots", "/v1/snapshots/rollback", "/v1/snapshots/", "/v1/map",
    "/", "/assets/",
};
#define COUNT(a) (sizeof(a) / sizeof((a)[0]))

enum {
    FLAG_TOKEN = 1,
    FLAG_CHUNKED = 2,
    FLAG_JSON = 4,
    FLAG_CLOSE = 8,
    FLAG_TOO_LARGE = 16
};

enum {
    MAX_BODY = 2048,          /* bytes, so that an input can pass the limit */
    MAX_TARGET = 8192,        /* encoded path and query bytes sent, well within the
                                 daemon's 32 KiB for the request line and headers */
    ANSWER_SECONDS = 8        /* under libFuzzer's -timeout=10 */
};

static const char admin_token[] = "fuzz-admin-token-0123456789abcdef";

/* ---- waiting for the server's frees ---- */

/* libFuzzer looks for a leak after an input that left more blocks allocated than it found,
 * counting every thread, and stops looking after every input once 1000 such inputs held no
 * leak. The server frees a request's last blocks (the exchange, the response) on its own
 * thread just after the client has read the answer, so most inputs would look like leaks.
 * So an input waits, briefly, until the blocks allocated since it began are freed again,
 * counted by the same hooks; except when it opened a connection that stays open, whose
 * blocks stay with it. */
static atomic_long live_blocks;

static void count_malloc(const volatile void *p, size_t size)
{
    (void)p;
    (void)size;
    atomic_fetch_add_explicit(&live_blocks, 1, memory_order_relaxed);
}

static void count_free(const volatile void *p)
{
    if (p)
        atomic_fetch_sub_explicit(&live_blocks, 1, memory_order_relaxed);
}

/* Wait at most 20 ms for the count to come back to @p before. */
static void wait_for_frees(long before)
{
    const struct timespec step = { 0, 50 * 1000 };
    for (int i = 0; i < 400 && atomic_load(&live_blocks) > before; i++)
        nanosleep(&step, NULL);
}

/* ---- the served store ---- */

static http_settings settings;
static http_live *live;
static http_daemon *server;
static int client = -1;       /* the kept-alive connection, -1 when none */

/* Write the graph the store is trained on: nodes n0..n29 on a ring of "knows" and a stride
 * of "cites", plus three names that need encoding in a URL; three classes (some nodes
 * unlabelled) and two types. */
static void write_inputs(char *edges, char *labels, char *types, size_t size)
{
    static char text[8192];
    size_t n = 0;
    for (int i = 0; i < 30; i++) {
        n += (size_t)snprintf(text + n, sizeof text - n, "n%d\tknows\tn%d\n", i, (i + 1) % 30);
        if ((i * 7 + 3) % 30 != i)
            n += (size_t)snprintf(text + n, sizeof text - n, "n%d\tcites\tn%d\n", i,
                                  (i * 7 + 3) % 30);
    }
    n += (size_t)snprintf(text + n, sizeof text - n,
                          "a/b\tknows\tn0\nn1\tcites\ta/b\n\xc3\xa9\tknows\tn2\nn3\tknows\t"
                          "\xc3\xa9\nx y\tcites\tn4\nn5\tknows\tx y\n");
    snprintf(edges, size, "%s", fuzz_write("edges.tsv", (const uint8_t *)text, n, false));
    n = 0;
    for (int i = 0; i < 30; i++)
        if (i % 5 != 4)
            n += (size_t)snprintf(text + n, sizeof text - n, "n%d\tc%d\n", i, i % 3);
    n += (size_t)snprintf(text + n, sizeof text - n, "a/b\tc0\n\xc3\xa9\tc1\n");
    snprintf(labels, size, "%s", fuzz_write("labels.tsv", (const uint8_t *)text, n, false));
    n = 0;
    for (int i = 0; i < 30; i++)
        n += (size_t)snprintf(text + n, sizeof text - n, "n%d\tt%d\n", i, i % 2);
    n += (size_t)snprintf(text + n, sizeof text - n, "a/b\tt0\n");
    snprintf(types, size, "%s", fuzz_write("types.tsv", (const uint8_t *)text, n, false));
}

static void train_store(const char *store)
{
    char edges[4200], labels[4200], types[4200];
    write_inputs(edges, labels, types, sizeof edges);
    char *argv[] = { "train", "--store", (char *)store, "--edges", edges, "--types", types,
                     "--model", "distmult,gcn", "--labels", labels, "--epochs", "3", "--dim",
                     "8", "--threads", "1", "--seed", "1", "--quiet", "--force", NULL };
    int rc = cmd_train_main((int)COUNT(argv) - 1, argv);
    fflush(stdout);
    if (rc != CMD_OK)
        fuzz_fail("training the store failed (status %d)", rc);
}

/* A loopback port nobody listens on now. */
static uint16_t free_port(void)
{
    int s = socket(AF_INET, SOCK_STREAM, 0);
    struct sockaddr_in a = { .sin_family = AF_INET, .sin_port = 0 };
    a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    socklen_t len = sizeof a;
    if (s < 0 || bind(s, (struct sockaddr *)&a, sizeof a) != 0 ||
        getsockname(s, (struct sockaddr *)&a, &len) != 0)
        fuzz_fail("no free loopback port: %s", strerror(errno));
    close(s);
    return ntohs(a.sin_port);
}

static void stop_server(void)
{
    if (client >= 0)
        close(client);
    client = -1;
    http_daemon_stop(server, 1000);   /* the client is closed: this takes a moment */
    http_live_stop(live);
    http_scan_fini();
    free((char *)settings.store_dir);
}

static void start_server(void)
{
    static char store[4200];
    snprintf(store, sizeof store, "%s/store", fuzz_dir());
    if (__sanitizer_install_malloc_and_free_hooks)
        __sanitizer_install_malloc_and_free_hooks(count_malloc, count_free);
    openblas_set_num_threads(1);
    json_object_seed(0);
    signal(SIGPIPE, SIG_IGN);
    train_store(store);

    memset(&settings, 0, sizeof settings);
    settings.store_dir = strdup(store);
    if (!settings.store_dir)
        fuzz_fail("out of memory");
    settings.port = free_port();
    struct sockaddr_in *a = (struct sockaddr_in *)&settings.addr;
    a->sin_family = AF_INET;
    a->sin_port = htons(settings.port);
    a->sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    settings.addr_len = sizeof *a;
    snprintf(settings.listen, sizeof settings.listen, "127.0.0.1:%u", (unsigned)settings.port);
    settings.max_connections = 8;
    settings.max_k = 50;
    settings.poll_ms = 1000;
    settings.n_scan_threads = 1;
    settings.max_batch = 8;
    settings.max_body = MAX_BODY;
    settings.has_admin_token = true;
    struct sha256_ctx ctx;
    sha256_init(&ctx);
    sha256_update(&ctx, sizeof admin_token - 1, (const uint8_t *)admin_token);
    sha256_digest(&ctx, sizeof settings.admin_token_sha256, settings.admin_token_sha256);
    settings.max_age_seconds = HTTP_DEFAULT_MAX_AGE_SECONDS;
    settings.access_log_fd = -1;

    http_scan_init(1);
    weft_error err;
    if (http_live_start(settings.store_dir, settings.poll_ms, false, NULL, &live, &err)
            != WEFT_OK
        || http_daemon_start(&settings, live, &server, &err) != WEFT_OK)
        fuzz_fail("cannot serve: %s", err.msg);
    http_model m;
    if (!http_live_acquire(live, &m))
        fuzz_fail("the trained snapshot is not live");
    http_model_release(&m);
    atexit(stop_server);
}

/* ---- one exchange ---- */

/* A growing byte buffer; out of memory is a failure of the harness. */
struct buf {
    char *p;
    size_t len, cap;
};

static void put(struct buf *b, const void *data, size_t n)
{
    if (b->len + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 1024;
        while (cap < b->len + n + 1)
            cap *= 2;
        char *p = realloc(b->p, cap);
        if (!p)
            fuzz_fail("out of memory");
        b->p = p;
        b->cap = cap;
    }
    memcpy(b->p + b->len, data, n);
    b->len += n;
    b->p[b->len] = '\0';
}

static void put_text(struct buf *b, const char *s)
{
    put(b, s, strlen(s));
}

/* The request for one input, whole. */
static void build_request(const uint8_t *data, size_t size, struct buf *req)
{
    static const char hex[] = "0123456789ABCDEF";
    unsigned method = size > 0 ? data[0] : 0, start = size > 1 ? data[1] : 1;
    unsigned flags = size > 2 ? data[2] : 0;
    const uint8_t *rest = size > 3 ? data + 3 : data;
    size_t n = size > 3 ? size - 3 : 0;
    const uint8_t *nl = memchr(rest, '\n', n);
    size_t target_len = nl ? (size_t)(nl - rest) : n;
    const char *path = paths[start % COUNT(paths)];

    put_text(req, methods[method % COUNT(methods)]);
    put_text(req, " ");
    if (path[0] != '/' && (target_len == 0 || rest[0] != '/'))
        put_text(req, "/");
    put_text(req, path);
    size_t sent = 0;
    for (size_t i = 0; i < target_len && sent < MAX_TARGET; i++) {
        uint8_t c = rest[i];
        if (c > 0x20 && c < 0x7f && c != '#') {
            put(req, &c, 1);
            sent++;
        } else {
            char esc[3] = { '%', hex[c >> 4], hex[c & 15] };
            put(req, esc, 3);
            sent += 3;
        }
    }
    put_text(req, " HTTP/1.1\r\nHost: 127.0.0.1\r\n");
    if (flags & FLAG_TOKEN) {
        put_text(req, "Authorization: Bearer ");
        put_text(req, admin_token);
        put_text(req, "\r\n");
    }
    if (flags & FLAG_JSON)
        put_text(req, "Content-Type: application/json\r\n");
    if (flags & FLAG_CLOSE)
        put_text(req, "Connection: close\r\n");
    if (flags & FLAG_TOO_LARGE) {
        char line[64];
        snprintf(line, sizeof line, "Content-Length: %d\r\n\r\n", MAX_BODY * 64);
        put_text(req, line);
        return;
    }
    if (!nl) {
        put_text(req, "\r\n");
        return;
    }
    const char *body = (const char *)nl + 1;
    size_t body_len = n - target_len - 1;
    char line[64];
    if (flags & FLAG_CHUNKED) {
        put_text(req, "Transfer-Encoding: chunked\r\n\r\n");
        if (body_len) {
            snprintf(line, sizeof line, "%zx\r\n", body_len);
            put_text(req, line);
            put(req, body, body_len);
            put_text(req, "\r\n");
        }
        put_text(req, "0\r\n\r\n");
        return;
    }
    snprintf(line, sizeof line, "Content-Length: %zu\r\n\r\n", body_len);
    put_text(req, line);
    put(req, body, body_len);
}

/* A new connection to the server. libFuzzer's timer (SIGALRM, each second) may interrupt
 * connect(), which cannot simply be called again: then it starts over on a new socket. The
 * client closes with a reset (linger 0), so that thousands of closed connections a minute
 * leave no TIME_WAIT behind to run out of ports. */
static int connect_server(void)
{
    for (int attempt = 0; attempt < 100; attempt++) {
        int s = socket(AF_INET, SOCK_STREAM, 0);
        if (s < 0)
            fuzz_fail("socket: %s", strerror(errno));
        struct timeval tv = { ANSWER_SECONDS, 0 };
        struct linger reset = { 1, 0 };
        int one = 1;
        setsockopt(s, SOL_SOCKET, SO_RCVTIMEO, &tv, sizeof tv);
        setsockopt(s, SOL_SOCKET, SO_SNDTIMEO, &tv, sizeof tv);
        setsockopt(s, SOL_SOCKET, SO_LINGER, &reset, sizeof reset);
        setsockopt(s, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
        if (connect(s, (const struct sockaddr *)&settings.addr, settings.addr_len) == 0)
            return s;
        int e = errno;
        close(s);
        if (e != EINTR)
            fuzz_fail("connect to %s: %s", settings.listen, strerror(e));
    }
    fuzz_fail("connect to %s: interrupted 100 times", settings.listen);
}

/* Send all of @p b. @return false when the connection is gone. */
static bool send_all(int s, const struct buf *b)
{
    size_t off = 0;
    while (off < b->len) {
        ssize_t n = send(s, b->p + off, b->len - off, MSG_NOSIGNAL);
        if (n < 0 && errno == EINTR)
            continue;
        if (n < 0 && (errno == EAGAIN || errno == EWOULDBLOCK))
            fuzz_fail("the server took no request bytes for %d s", ANSWER_SECONDS);
        if (n <= 0)
            return false;
        off += (size_t)n;
    }
    return true;
}

/* What came back. */
struct response {
    unsigned status;
    size_t head_len;          /* bytes of the status line and headers, blank line included */
    size_t body_len;
    bool is_json;
    bool is_closing;          /* the server said Connection: close */
};

/* The value of header @p name in head[0..len) (case-insensitive name), or NULL. */
static const char *header(const char *head, const char *name, size_t *len)
{
    size_t n = strlen(name);
    for (const char *line = strstr(head, "\r\n"); line && line[2] != '\r';
         line = strstr(line + 2, "\r\n")) {
        const char *p = line + 2;
        if (strncasecmp(p, name, n) == 0 && p[n] == ':') {
            p += n + 1;
            while (*p == ' ')
                p++;
            const char *end = strstr(p, "\r\n");
            *len = end ? (size_t)(end - p) : strlen(p);
            return p;
        }
    }
    return NULL;
}

/* Read one response to a request with @p method from @p s into @p in.
 * @return false when the connection closed before a complete response. */
static bool read_response(int s, const char *method, struct buf *in, struct response *r)
{
    memset(r, 0, sizeof *r);
    size_t need = 0;   /* head + body, once the head is known */
    for (;;) {
        if (r->head_len == 0) {
            const char *end = in->p ? strstr(in->p, "\r\n\r\n") : NULL;
            if (end) {
                r->head_len = (size_t)(end - in->p) + 4;
                if (sscanf(in->p, "HTTP/1.%*d %u", &r->status) != 1)
                    fuzz_fail("not an HTTP response: %.200s", in->p);
                size_t len = 0;
                const char *v = header(in->p, "Content-Length", &len);
                if (!v && strcmp(method, "HEAD") != 0)
                    fuzz_fail("a response without Content-Length: %.400s", in->p);
                r->body_len = v && strcmp(method, "HEAD") != 0 ? strtoul(v, NULL, 10) : 0;
                v = header(in->p, "Content-Type", &len);
                r->is_json = v && len >= 16 && !strncmp(v, "application/json", 16);
                v = header(in->p, "Connection", &len);
                r->is_closing = v && len == 5 && !strncasecmp(v, "close", 5);
                need = r->head_len + r->body_len;
            }
        }
        if (r->head_len && in->len >= need)
            return true;
        char chunk[16384];
        ssize_t got = recv(s, chunk, sizeof chunk, 0);
        if (got < 0 && errno == EINTR)
            continue;
        if (got < 0 && (errno == EAGAIN || errno == EWOULDBLOCK))
            fuzz_fail("no answer within %d s", ANSWER_SECONDS);
        if (got <= 0)
            return false;
        put(in, chunk, (size_t)got);
    }
}

/* The checks every answer passes. */
static void check_response(const struct buf *req, const struct buf *in, const struct response *r,
                           bool is_too_large)
{
    if (is_too_large && r->status != 413)
        fuzz_fail("status %u for a body over the limit:\n%.600s", r->status, req->p);
    static const unsigned documented[] = { 200, 400, 401, 404, 405, 413, 422, 503 };
    bool is_documented = false;
    for (size_t i = 0; i < COUNT(documented); i++)
        is_documented |= r->status == documented[i];
    if (!is_documented)
        fuzz_fail("status %u for\n%.600s\n---- answer:\n%.1200s", r->status, req->p, in->p);
    if (!r->is_json || r->body_len == 0)
        return;
    json_error_t jerr;
    json_t *body = json_loadb(in->p + r->head_len, r->body_len, JSON_REJECT_DUPLICATES, &jerr);
    if (!json_is_object(body) || !json_object_get(body, "version"))
        fuzz_fail("a JSON answer without an object or its version (%s) for\n%.600s\n"
                  "---- answer:\n%.1200s", body ? "no version" : jerr.text, req->p, in->p);
    /* Every failure carries an error, except the verdicts of GET /v1/health ({"status",
     * "checks"}) and GET /readyz ({"ready": false, "reason"}), 503 when they fail. */
    const json_t *error = json_object_get(body, "error");
    bool is_verdict = r->status == 503 && (json_object_get(body, "checks") ||
                                           json_is_false(json_object_get(body, "ready")));
    bool is_error = r->status >= 400 && !is_verdict;
    if (is_error && (!json_is_string(json_object_get(error, "code")) ||
                     !json_is_string(json_object_get(error, "message"))))
        fuzz_fail("a failure without error.code and error.message for\n%.600s\n"
                  "---- answer:\n%.1200s", req->p, in->p);
    json_decref(body);
}

/* Bytes of the body an input sends (0 without one). */
static size_t body_size(const uint8_t *data, size_t size)
{
    const uint8_t *nl = size > 3 ? memchr(data + 3, '\n', size - 3) : NULL;
    return nl ? size - (size_t)(nl - data) - 1 : 0;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static bool is_verbose;
    if (!live) {
        start_server();
        is_verbose = getenv("WEFT_FUZZ_VERBOSE") != NULL;
    }
    long blocks_before = atomic_load(&live_blocks);
    bool has_connected = false;   /* a new connection left open keeps its blocks */
    struct buf req = { 0 }, in = { 0 };
    build_request(data, size, &req);
    const char *method = methods[(size > 0 ? data[0] : 0) % COUNT(methods)];
    unsigned flags = size > 2 ? data[2] : 0;
    struct response r;
    bool is_answered = false;
    /* A kept-alive connection may have been closed by the server meanwhile: one retry on a
     * new one. A new connection that closes unanswered is a finding. */
    for (int attempt = 0; attempt < 2 && !is_answered; attempt++) {
        bool is_fresh = client < 0;
        if (is_fresh)
            client = connect_server();
        has_connected |= is_fresh;
        in.len = 0;
        if (in.p)
            in.p[0] = '\0';
        /* The server may answer before it has read everything (413) and close: what it
         * sent is still read when the rest of the request could not be. */
        (void)send_all(client, &req);
        is_answered = read_response(client, method, &in, &r);
        if (!is_answered) {
            close(client);
            client = -1;
            if (is_fresh)
                fuzz_fail("the server closed the connection without answering\n%.600s", req.p);
        }
    }
    if (is_verbose)
        fprintf(stderr, "%.*s -> %u\n", (int)strcspn(req.p, "\r"), req.p, r.status);
    check_response(&req, &in, &r, (flags & FLAG_TOO_LARGE) || body_size(data, size) > MAX_BODY);
    if (r.is_closing || (flags & (FLAG_CLOSE | FLAG_TOO_LARGE))) {
        close(client);
        client = -1;
    }
    free(req.p);
    free(in.p);
    if (!has_connected || client < 0)
        wait_for_frees(blocks_before);
    return 0;
}
