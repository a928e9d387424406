/* The HTTP daemon: libmicrohttpd set-up, the life of one request, and a draining stop.
 * A request takes the live model once, runs its route's handler, builds the whole JSON body
 * and only then gives the model back; the response owns nothing from the snapshot. */
#include "http.h"

#include <pthread.h>
#include <stdarg.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <time.h>
#include <sys/socket.h>
#include <unistd.h>

#include "cmd.h"
#include "weft/alloc.h"

struct http_daemon {
    struct MHD_Daemon *mhd;
    const http_settings *cfg;
    http_live *live;
    atomic_bool is_draining;    /* set by stop: responses then close their connection */
    http_metrics *metrics;      /* request counters (http_metrics.c) */
    /* Deadlines (see struct watched): every open connection, and the thread enforcing them */
    pthread_mutex_t watch_lock;
    struct watched *watch;      /* a list, guarded by watch_lock */
    pthread_t reaper;
    atomic_bool is_reaper_on;
};

/* An open connection and the moment by which its current request must have arrived whole
 * (request line, headers and body). MHD_OPTION_CONNECTION_TIMEOUT closes only idle
 * connections: a client sending a byte a second is never idle and would hold its thread
 * forever. The reaper shuts down (never closes: libmicrohttpd owns the descriptor) the
 * socket of a connection past its deadline; its thread then sees the end of the stream and
 * closes it. No deadline while a response is being built or sent. */
struct watched {
    struct watched *next;
    int fd;
    double deadline;            /* CLOCK_MONOTONIC seconds; 0 while answering */
};

static double mono_now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + (double)t.tv_nsec / 1e9;
}

static void set_deadline(http_daemon *d, struct MHD_Connection *conn, double deadline)
{
    const union MHD_ConnectionInfo *info =
        MHD_get_connection_info(conn, MHD_CONNECTION_INFO_SOCKET_CONTEXT);
    struct watched *w = info ? info->socket_context : NULL;
    if (!w)
        return;
    pthread_mutex_lock(&d->watch_lock);
    w->deadline = deadline;
    pthread_mutex_unlock(&d->watch_lock);
}

static void on_connection(void *cls, struct MHD_Connection *conn, void **socket_context,
                          enum MHD_ConnectionNotificationCode toe)
{
    http_daemon *d = cls;
    if (toe == MHD_CONNECTION_NOTIFY_STARTED) {
        const union MHD_ConnectionInfo *info =
            MHD_get_connection_info(conn, MHD_CONNECTION_INFO_CONNECTION_FD);
        struct watched *w = info ? calloc(1, sizeof *w) : NULL;
        if (!w)
            return;   /* left to the idle timeout */
        w->fd = info->connect_fd;
        w->deadline = mono_now() + HTTP_TIMEOUT_SECONDS;
        pthread_mutex_lock(&d->watch_lock);
        w->next = d->watch;
        d->watch = w;
        pthread_mutex_unlock(&d->watch_lock);
        *socket_context = w;
        return;
    }
    struct watched *w = *socket_context;
    if (!w)
        return;
    pthread_mutex_lock(&d->watch_lock);
    for (struct watched **p = &d->watch; *p; p = &(*p)->next)
        if (*p == w) {
            *p = w->next;
            break;
        }
    pthread_mutex_unlock(&d->watch_lock);
    free(w);
    *socket_context = NULL;
}

static void *reap(void *arg)
{
    http_daemon *d = arg;
    const struct timespec tick = { 0, 250 * 1000000L };
    while (atomic_load(&d->is_reaper_on)) {
        nanosleep(&tick, NULL);
        double now = mono_now();
        pthread_mutex_lock(&d->watch_lock);
        for (struct watched *w = d->watch; w; w = w->next)
            if (w->deadline > 0 && now > w->deadline) {
                shutdown(w->fd, SHUT_RDWR);
                w->deadline = 0;
            }
        pthread_mutex_unlock(&d->watch_lock);
    }
    return NULL;
}

/* Sent when even the error body cannot be built (out of memory). */
static const char fallback_body[] =
    "{\"version\":null,\"error\":{\"code\":\"internal\","
    "\"message\":\"the response could not be built\",\"hint\":\"the server log has the details\"}}\n";

void http_log(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    cmd_vlog("serve", fmt, ap);
    va_end(ap);
}

static void log_mhd(void *cls, const char *fmt, va_list ap)
{
    (void)cls;
    char text[400];
    vsnprintf(text, sizeof text, fmt, ap);
    size_t len = strlen(text);
    while (len && (text[len - 1] == '\n' || text[len - 1] == '\r'))
        text[--len] = '\0';
    http_log("libmicrohttpd: %s", text);
}

/* The body as text with a final newline: {"version": V or null, ...handler's keys...}.
 * Caller frees. NULL when out of memory. */
static char *render(const http_reply *reply, const http_model *model, bool is_pretty,
                    size_t *len)
{
    if (!reply->body)
        return NULL;
    json_t *top = json_object();
    bool bad = !top;
    bad |= json_object_set_new(top, "version", model ? json_integer((json_int_t)model->version)
                                                     : json_null()) != 0;
    bad |= json_object_update(top, reply->body) != 0;
    size_t flags = JSON_REAL_PRECISION(9) | (is_pretty ? JSON_INDENT(2) : JSON_COMPACT);
    char *text = bad ? NULL : json_dumps(top, flags);
    json_decref(top);
    if (!text)
        return NULL;
    size_t n = strlen(text);
    char *grown = realloc(text, n + 2);
    if (!grown) {
        free(text);
        return NULL;
    }
    grown[n] = '\n';
    grown[n + 1] = '\0';
    *len = n + 1;
    return grown;
}

static enum MHD_Result send_reply(http_daemon *d, struct MHD_Connection *conn,
                                  const http_reply *reply, char *text, size_t len)
{
    unsigned status = reply->status;
    struct MHD_Response *resp;
    if (text) {
        resp = MHD_create_response_from_buffer(len, text, MHD_RESPMEM_MUST_FREE);
        if (!resp)
            free(text);
    } else {
        status = MHD_HTTP_INTERNAL_SERVER_ERROR;
        resp = MHD_create_response_from_buffer(sizeof fallback_body - 1, (void *)fallback_body,
                                               MHD_RESPMEM_PERSISTENT);
    }
    if (!resp)
        return MHD_NO;
    const char *type = text && reply->content_type ? reply->content_type : "application/json";
    bool ok = MHD_add_response_header(resp, MHD_HTTP_HEADER_CONTENT_TYPE, type) == MHD_YES;
    /* The handler's own headers (the page's ETag, Content-Security-Policy, ...); its
     * Cache-Control, if it sets one, replaces the default "no-store". */
    bool has_cache_control = false;
    for (size_t i = 0; i < reply->n_headers; i++) {
        has_cache_control |= !strcasecmp(reply->headers[i][0], MHD_HTTP_HEADER_CACHE_CONTROL);
        ok = ok && MHD_add_response_header(resp, reply->headers[i][0], reply->headers[i][1])
                       == MHD_YES;
    }
    if (!has_cache_control)
        ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_CACHE_CONTROL, "no-store")
                       == MHD_YES;
    if (reply->allow[0])
        ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_ALLOW, reply->allow) == MHD_YES;
    if (reply->is_auth_challenge)
        ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_WWW_AUTHENTICATE,
                                           "Bearer realm=\"weft admin\"") == MHD_YES;
    if (atomic_load(&d->is_draining))
        ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_CONNECTION, "close") == MHD_YES;
    enum MHD_Result rc = ok ? MHD_queue_response(conn, status, resp) : MHD_NO;
    MHD_destroy_response(resp);
    return rc;
}

/* One request's progress, kept in *con_cls from its first call until libmicrohttpd reports
 * it completed (on_completed frees it, also when the client went away mid-body). Add here
 * whatever else a request must carry between calls. */
struct exchange {
    bool is_answered;     /* a response is queued: later calls only drain what is left */
    bool is_too_large;    /* the body passed max_body: it is counted, not kept */
    bool has_nul_path;    /* the decoded path holds a NUL byte (see unescape) */
    char *body;           /* the body so far (not NUL-terminated), or NULL */
    size_t len, cap;
    /* for the request counters and the access log (on_completed) */
    struct timespec began;    /* CLOCK_MONOTONIC, when the headers had arrived */
    double began_unix;        /* the same moment as Unix time */
    char method[16];          /* cut to fit */
    char path[384];           /* the decoded path, cut to fit */
    size_t route;             /* http_reply.route */
    bool is_wrong_method;
    unsigned status;          /* as queued; 0 until then */
    size_t bytes;             /* response body bytes */
    bool has_version;         /* a snapshot was live for it */
    uint64_t version;
};

/* Start an exchange's accounting: it counts as in flight until on_completed. */
static void begin(http_daemon *d, struct exchange *ex, const char *method, const char *url)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &ex->began);
    clock_gettime(CLOCK_REALTIME, &now);
    ex->began_unix = (double)now.tv_sec + (double)now.tv_nsec / 1e9;
    snprintf(ex->method, sizeof ex->method, "%s", method);
    snprintf(ex->path, sizeof ex->path, "%s", url);
    ex->route = HTTP_ROUTE_NONE;
    http_metrics_begin(d->metrics);
}

/* Count the finished request and write its access-log line. */
static void account(http_daemon *d, struct MHD_Connection *conn, const struct exchange *ex)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    double seconds = (double)(now.tv_sec - ex->began.tv_sec)
                     + (double)(now.tv_nsec - ex->began.tv_nsec) / 1e9;
    http_metrics_end(d->metrics, ex->route, ex->is_wrong_method, ex->status, seconds,
                     ex->status != 0);
    const union MHD_ConnectionInfo *info =
        MHD_get_connection_info(conn, MHD_CONNECTION_INFO_CLIENT_ADDRESS);
    http_access a = {
        .start = ex->began_unix, .method = ex->method, .path = ex->path, .route = ex->route,
        .status = ex->status, .seconds = seconds, .bytes = ex->bytes,
        .has_version = ex->has_version, .version = ex->version,
        .remote = info ? info->client_addr : NULL,
    };
    http_access_log(d->cfg->access_log_fd, &a);
}

static void on_completed(void *cls, struct MHD_Connection *conn, void **con_cls,
                         enum MHD_RequestTerminationCode why)
{
    (void)why;
    http_daemon *d = cls;
    set_deadline(d, conn, mono_now() + HTTP_TIMEOUT_SECONDS);
    struct exchange *ex = *con_cls;
    if (ex) {
        account(cls, conn, ex);
        free(ex->body);
        free(ex);
        *con_cls = NULL;
    }
}

/* libmicrohttpd decodes the path in place and hands it over as a C string, so a "%00" in it
 * would cut the path short: /v1/nodes/m0%00x would be answered for node m0. This unescape
 * callback decodes as libmicrohttpd's own does and notes the string when the result holds a
 * NUL byte; the path is decoded in this connection's own thread just before on_request's
 * first call (one thread per connection), which compares the pointer with its url. Query
 * arguments are refused by http_route_arg, which sees their length. */
static _Thread_local const char *decoded_nul;

static size_t unescape(void *cls, struct MHD_Connection *conn, char *s)
{
    (void)cls;
    (void)conn;
    size_t n = MHD_http_unescape(s);
    if (memchr(s, '\0', n))
        decoded_nul = s;
    return n;
}

/* The declared body length is over the limit (a chunked body is counted as it comes). */
static bool is_declared_too_large(struct MHD_Connection *conn, size_t max_body)
{
    const char *length =
        MHD_lookup_connection_value(conn, MHD_HEADER_KIND, MHD_HTTP_HEADER_CONTENT_LENGTH);
    if (!length)
        return false;
    char *end = NULL;
    unsigned long long n = strtoull(length, &end, 10);
    return end == length || *end != '\0' || n > max_body;
}

/* Keep @p n more body bytes, or mark the body too large once it passes the limit. */
static void collect(struct exchange *ex, const char *data, size_t n, size_t max_body)
{
    if (ex->is_too_large)
        return;
    if (n > max_body - ex->len) {
        ex->is_too_large = true;
        free(ex->body);
        ex->body = NULL;
        ex->len = ex->cap = 0;
        return;
    }
    if (weft_grow_array((void **)&ex->body, &ex->cap, ex->len + n, 1) != 0) {
        ex->is_too_large = true;   /* no memory for it: answered as too large, never cut */
        free(ex->body);
        ex->body = NULL;
        ex->len = ex->cap = 0;
        return;
    }
    memcpy(ex->body + ex->len, data, n);
    ex->len += n;
}

static void too_large_reply(const http_settings *cfg, http_reply *reply)
{
    char hint[200];
    snprintf(hint, sizeof hint,
             "this server takes bodies of at most %zu bytes (weft serve --max-body) and at "
             "most %zu items per call (--max-batch): split the batch",
             cfg->max_body, cfg->max_batch);
    http_error_reply(reply, HTTP_FAULT_TOO_LARGE, hint,
                     "the request body is larger than %zu bytes", cfg->max_body);
}

/* Route the request (or answer 413), render and queue the response. */
static enum MHD_Result answer(http_daemon *d, struct MHD_Connection *conn, const char *url,
                              const char *method, struct exchange *ex)
{
    ex->is_answered = true;
    set_deadline(d, conn, 0);
    http_model model;
    bool has_model = http_live_acquire(d->live, &model);
    http_request rq = { .conn = conn, .model = has_model ? &model : NULL, .settings = d->cfg,
                        .live = d->live, .body = ex->body, .body_len = ex->len,
                        .metrics = d->metrics, .is_draining = atomic_load(&d->is_draining) };
    http_reply reply = { .status = MHD_HTTP_INTERNAL_SERVER_ERROR, .route = HTTP_ROUTE_NONE };
    if (ex->is_too_large) {
        too_large_reply(d->cfg, &reply);
        reply.route = http_route_find(method, url, &reply.is_wrong_method);
    } else if (ex->has_nul_path) {
        http_error_reply(&reply, HTTP_FAULT_BAD_REQUEST,
                         "a name in the path cannot hold a NUL byte",
                         "the path holds a NUL byte (%%00) after '%s'", url);
        reply.route = http_route_find(method, url, &reply.is_wrong_method);
    } else {
        http_route_dispatch(&rq, method, url, &reply);
    }
    size_t len = reply.text_len;
    char *text = reply.text;   /* a handler's own text (GET /metrics), else the JSON body */
    if (!text)
        text = render(&reply, rq.model, http_route_is_pretty(conn), &len);
    json_decref(reply.body);
    ex->route = reply.route;
    ex->is_wrong_method = reply.is_wrong_method;
    ex->status = text ? reply.status : MHD_HTTP_INTERNAL_SERVER_ERROR;
    ex->bytes = text ? len : sizeof fallback_body - 1;
    ex->has_version = has_model;
    ex->version = has_model ? model.version : 0;
    http_model_release(&model);
    return send_reply(d, conn, &reply, text, len);
}

/* libmicrohttpd calls this first for the headers, then once per chunk of the body, then once
 * more with no data, where the response is queued; a request without a body thus gets its
 * answer at the second call and the connection can stay open for the next one. A body
 * declared larger than the limit is refused at once (the connection then closes instead of
 * reading it); a chunked one is counted and dropped past the limit, then refused. */
static enum MHD_Result on_request(void *cls, struct MHD_Connection *conn, const char *url,
                                  const char *method, const char *version,
                                  const char *upload_data, size_t *upload_data_size,
                                  void **con_cls)
{
    (void)version;
    http_daemon *d = cls;
    struct exchange *ex = *con_cls;
    if (!ex) {
        if (!(ex = calloc(1, sizeof *ex)))
            return MHD_NO;
        *con_cls = ex;
        begin(d, ex, method, url);
        ex->has_nul_path = decoded_nul == url;
        decoded_nul = NULL;
        if (is_declared_too_large(conn, d->cfg->max_body)) {
            ex->is_too_large = true;
            return answer(d, conn, url, method, ex);
        }
        return MHD_YES;
    }
    if (*upload_data_size != 0) {
        if (!ex->is_answered)
            collect(ex, upload_data, *upload_data_size, d->cfg->max_body);
        *upload_data_size = 0;
        return MHD_YES;
    }
    if (ex->is_answered)
        return MHD_YES;
    return answer(d, conn, url, method, ex);
}

weft_err http_daemon_start(const http_settings *cfg, http_live *live, http_daemon **out,
                           weft_error *err)
{
    http_daemon *d = calloc(1, sizeof *d);
    if (!d)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the HTTP daemon");
    d->cfg = cfg;
    d->live = live;
    atomic_init(&d->is_draining, false);
    atomic_init(&d->is_reaper_on, true);
    pthread_mutex_init(&d->watch_lock, NULL);
    weft_err rc = http_metrics_new(&d->metrics, err);
    if (rc != WEFT_OK) {
        free(d);
        return rc;
    }
    /* One thread per connection. A top-k request blocks its thread while it waits for a
     * pass shared with the other requests (http_scan.c); with a pool of event loops, the
     * other connections of a blocked loop would wait too, and passes would hold few queries
     * (measured with bench/service.sh's load, 16 connections, one core: 1,050 to 1,730 req/s
     * with a pool of 32 loops, 2,700 to 4,000 with a thread each). poll, not select, so
     * descriptors past FD_SETSIZE work; ITC makes MHD_quiesce_daemon possible, which the
     * draining stop needs. */
    bool is_tls = cfg->tls_cert_pem != NULL;
    unsigned flags = MHD_USE_INTERNAL_POLLING_THREAD | MHD_USE_THREAD_PER_CONNECTION
                     | MHD_USE_POLL | MHD_USE_ITC | MHD_USE_ERROR_LOG
                     | (cfg->is_ipv6 ? MHD_USE_IPv6 : 0) | (is_tls ? MHD_USE_TLS : 0);
    struct MHD_OptionItem options[10] = {
        { MHD_OPTION_SOCK_ADDR, 0, (void *)&cfg->addr },
        { MHD_OPTION_CONNECTION_TIMEOUT, HTTP_TIMEOUT_SECONDS, NULL },
        { MHD_OPTION_CONNECTION_MEMORY_LIMIT, HTTP_MEMORY_LIMIT, NULL },
        { MHD_OPTION_CONNECTION_LIMIT, (intptr_t)cfg->max_connections, NULL },
        { MHD_OPTION_THREAD_STACK_SIZE, HTTP_THREAD_STACK_BYTES, NULL },
    };
    size_t n_options = 5;
    /* libmicrohttpd 0.9.75 reads the certificate, key and password only inside
     * MHD_start_daemon, where GnuTLS parses them into credentials of its own. Checked under
     * valgrind: handshakes succeed, with no invalid read, after the buffers are overwritten
     * and freed right after the start. So cmd_serve.c wipes the key then, instead of keeping
     * it in memory for the life of the server. (GnuTLS keeps the decoded key, as it must, and
     * its PEM decoder leaves a freed copy of the base64 text in the heap, out of our reach.) */
    if (is_tls) {
        options[n_options++] = (struct MHD_OptionItem){ MHD_OPTION_HTTPS_MEM_CERT, 0,
                                                        cfg->tls_cert_pem };
        options[n_options++] = (struct MHD_OptionItem){ MHD_OPTION_HTTPS_MEM_KEY, 0,
                                                        cfg->tls_key_pem };
        options[n_options++] = (struct MHD_OptionItem){ MHD_OPTION_HTTPS_PRIORITIES, 0,
                                                        (void *)HTTP_TLS_PRIORITIES };
        if (cfg->tls_key_password)
            options[n_options++] = (struct MHD_OptionItem){ MHD_OPTION_HTTPS_KEY_PASSWORD, 0,
                                                            cfg->tls_key_password };
    }
    options[n_options] = (struct MHD_OptionItem){ MHD_OPTION_END, 0, NULL };
    d->mhd = MHD_start_daemon(flags, cfg->port, NULL, NULL, on_request, d,
                              MHD_OPTION_EXTERNAL_LOGGER, log_mhd, NULL, /* first, or it warns */
                              MHD_OPTION_NOTIFY_COMPLETED, on_completed, d,
                              MHD_OPTION_NOTIFY_CONNECTION, on_connection, d,
                              MHD_OPTION_UNESCAPE_CALLBACK, unescape, NULL,
                              MHD_OPTION_ARRAY, options, MHD_OPTION_END);
    if (!d->mhd) {
        http_metrics_free(d->metrics);
        free(d);
        if (is_tls)
            return weft_error_set(err, WEFT_ERR_IO,
                                  "cannot serve HTTPS on %s with the certificate %s and the "
                                  "key %s (see the message above)", cfg->listen,
                                  cfg->tls_cert_path, cfg->tls_key_path);
        return weft_error_set(err, WEFT_ERR_IO, "cannot serve on %s (see the message above)",
                              cfg->listen);
    }
    if (pthread_create(&d->reaper, NULL, reap, d) != 0) {
        MHD_stop_daemon(d->mhd);
        http_metrics_free(d->metrics);
        free(d);
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot start the connection reaper");
    }
    http_scan_watch(d->metrics);
    *out = d;
    return WEFT_OK;
}

static unsigned open_connections(struct MHD_Daemon *mhd)
{
    const union MHD_DaemonInfo *info =
        MHD_get_daemon_info(mhd, MHD_DAEMON_INFO_CURRENT_CONNECTIONS);
    return info ? info->num_connections : 0;
}

void http_daemon_stop(http_daemon *d, unsigned drain_ms)
{
    if (!d)
        return;
    atomic_store(&d->is_draining, true);
    MHD_socket listener = MHD_quiesce_daemon(d->mhd);
    const struct timespec step = { 0, 20 * 1000000L };
    unsigned waited = 0, open = 0;
    while ((open = open_connections(d->mhd)) > 0 && waited < drain_ms) {
        nanosleep(&step, NULL);
        waited += 20;
    }
    if (open)
        http_log("closing %u connections still open after %u ms", open, drain_ms);
    MHD_stop_daemon(d->mhd);
    atomic_store(&d->is_reaper_on, false);
    pthread_join(d->reaper, NULL);
    pthread_mutex_destroy(&d->watch_lock);
    if (listener != MHD_INVALID_SOCKET)
        close(listener);
    http_scan_watch(NULL);
    http_metrics_free(d->metrics);
    free(d);
}
