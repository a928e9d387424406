/* The HTTP daemon: libmicrohttpd set-up, the life of one request, and a draining stop.
 * A request takes the live model once, runs its route's handler, builds the whole JSON body
 * and only then gives the model back; the response owns nothing from the snapshot. */
#include "http.h"

#include <stdarg.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "cmd.h"

struct http_daemon {
    struct MHD_Daemon *mhd;
    const http_settings *cfg;
    http_live *live;
    atomic_bool is_draining;    /* set by stop: responses then close their connection */
};

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
    bool ok = MHD_add_response_header(resp, MHD_HTTP_HEADER_CONTENT_TYPE, "application/json")
              == MHD_YES;
    ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_CACHE_CONTROL, "no-store")
                   == MHD_YES;
    if (reply->allow[0])
        ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_ALLOW, reply->allow) == MHD_YES;
    if (atomic_load(&d->is_draining))
        ok = ok && MHD_add_response_header(resp, MHD_HTTP_HEADER_CONNECTION, "close") == MHD_YES;
    enum MHD_Result rc = ok ? MHD_queue_response(conn, status, resp) : MHD_NO;
    MHD_destroy_response(resp);
    return rc;
}

/* A request without a body is answered at the second call, once libmicrohttpd has seen the
 * whole request, so the connection can stay open for the next one. No route takes a body:
 * a request announcing one is answered at once, and the connection then closes instead of
 * reading it. */
static bool has_body(struct MHD_Connection *conn)
{
    const char *length =
        MHD_lookup_connection_value(conn, MHD_HEADER_KIND, MHD_HTTP_HEADER_CONTENT_LENGTH);
    return MHD_lookup_connection_value(conn, MHD_HEADER_KIND,
                                       MHD_HTTP_HEADER_TRANSFER_ENCODING)
           || (length && strcmp(length, "0") != 0);
}

static enum MHD_Result on_request(void *cls, struct MHD_Connection *conn, const char *url,
                                  const char *method, const char *version,
                                  const char *upload_data, size_t *upload_data_size,
                                  void **con_cls)
{
    static int seen, answered; /* their addresses mark a request's progress in *con_cls */
    (void)version;
    (void)upload_data;
    http_daemon *d = cls;
    if (*con_cls == &answered || *upload_data_size != 0) {
        *upload_data_size = 0; /* a body nobody reads */
        return MHD_YES;
    }
    if (!*con_cls && !has_body(conn)) {
        *con_cls = &seen;
        return MHD_YES;
    }
    *con_cls = &answered;

    http_model model;
    bool has_model = http_live_acquire(d->live, &model);
    http_request rq = { .conn = conn, .model = has_model ? &model : NULL, .settings = d->cfg };
    http_reply reply = { .status = MHD_HTTP_INTERNAL_SERVER_ERROR };
    http_route_dispatch(&rq, method, url, &reply);
    size_t len = 0;
    char *text = render(&reply, rq.model, http_route_is_pretty(conn), &len);
    json_decref(reply.body);
    http_model_release(&model);
    return send_reply(d, conn, &reply, text, len);
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
    /* epoll with a pool of threads, each running its own event loop; ITC makes
     * MHD_quiesce_daemon possible, which the draining stop needs. One thread means no pool
     * (libmicrohttpd warns about a pool of one). */
    unsigned flags = MHD_USE_INTERNAL_POLLING_THREAD | MHD_USE_EPOLL | MHD_USE_ITC
                     | MHD_USE_ERROR_LOG | (cfg->is_ipv6 ? MHD_USE_IPv6 : 0);
    struct MHD_OptionItem options[] = {
        { MHD_OPTION_SOCK_ADDR, 0, (void *)&cfg->addr },
        { MHD_OPTION_CONNECTION_TIMEOUT, HTTP_TIMEOUT_SECONDS, NULL },
        { MHD_OPTION_CONNECTION_LIMIT, HTTP_MAX_CONNECTIONS, NULL },
        /* last: with one thread it becomes the end of the list */
        { cfg->n_threads > 1 ? MHD_OPTION_THREAD_POOL_SIZE : MHD_OPTION_END,
          (intptr_t)cfg->n_threads, NULL },
        { MHD_OPTION_END, 0, NULL },
    };
    d->mhd = MHD_start_daemon(flags, cfg->port, NULL, NULL, on_request, d,
                              MHD_OPTION_EXTERNAL_LOGGER, log_mhd, NULL, /* first, or it warns */
                              MHD_OPTION_ARRAY, options, MHD_OPTION_END);
    if (!d->mhd) {
        free(d);
        return weft_error_set(err, WEFT_ERR_IO, "cannot serve on %s (see the message above)",
                              cfg->listen);
    }
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
    if (listener != MHD_INVALID_SOCKET)
        close(listener);
    free(d);
}
