/* The HTTP server's parts, shared by server/http_*.c and cmd_serve.c. Not part of libweft.
 *
 *   http_daemon.c  libmicrohttpd set-up, one request from arrival to queued response, drain
 *   http_route.c   the route table, method checks, query-argument helpers
 *   http_error.c   the one table from an error to an HTTP status and a JSON error body
 *   http_live.c    the loader thread: follows the store's head, publishes the live snapshot
 *   http_model.c   GET /healthz, GET /v1/model
 *   http_links.c   GET /v1/links/predict
 *   http_labels.c  GET /v1/labels/predict, GET /v1/labels/explain
 */
#ifndef WEFT_SERVER_HTTP_H
#define WEFT_SERVER_HTTP_H

#include <jansson.h>
#include <microhttpd.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <sys/socket.h>

#include "weft/error.h"
#include "weft/snapshot.h"

/** k when a request gives none (capped at max_k). */
#define HTTP_DEFAULT_K 10
#define HTTP_DEFAULT_MAX_K 1000
/** Most neighbours /v1/labels/explain lists one by one (the rest are summed). */
#define HTTP_EXPLAIN_MAX_K 1000
#define HTTP_DEFAULT_POLL_MS 200
#define HTTP_DEFAULT_PORT 8080
/** Idle connections are closed after this many seconds. */
#define HTTP_TIMEOUT_SECONDS 10
/** Most connections open at once; more wait in the listen backlog. */
#define HTTP_MAX_CONNECTIONS 1024
/** How long a shutdown waits for open connections to finish. */
#define HTTP_DRAIN_MS 5000

/** What `weft serve` was asked for, after checking. */
typedef struct http_settings {
    const char *store_dir;           /**< borrowed from argv */
    struct sockaddr_storage addr;    /**< the address to bind, IPv4 or IPv6 */
    socklen_t addr_len;
    uint16_t port;                   /**< the port in addr, host order */
    bool is_ipv6;
    char listen[80];                 /**< the address as given, for messages */
    unsigned n_threads;              /**< request threads */
    size_t max_k;                    /**< largest k a request may ask for */
    unsigned poll_ms;                /**< how often the loader reads the store's head */
} http_settings;

/** Print one timestamped line "<UTC time> weft serve: <message>" on stderr. Any thread. */
void http_log(const char *fmt, ...) __attribute__((format(printf, 1, 2)));

/* ---- the live snapshot (http_live.c) ---- */

/**
 * One loaded snapshot as requests see it. The loader fills it once, before publishing; a
 * request gets a copy holding its own reference through http_live_acquire() and gives it
 * back with http_model_release(). Every pointer inside stays valid until then.
 */
typedef struct http_model {
    weft_snapshot *snap;     /**< one reference, owned by the holder of this copy */
    uint64_t version;
    bool has_links;          /**< the snapshot has a link model, and links is filled */
    weft_link_view links;
    bool has_labels;         /**< the snapshot has a label model, and labels is filled */
    weft_label_view labels;  /**< (a loaded model has at least one of the two) */
} http_model;

/** The loader: a thread that follows the store's head and publishes snapshots. Opaque. */
typedef struct http_live http_live;

/**
 * Start following the store in @p dir: one load attempt now (so a live snapshot is served
 * from the first request), then a thread that reads the head every @p poll_ms and loads a
 * newly promoted version. A store that cannot be opened yet, or holds no snapshot, is not
 * an error: the thread keeps trying and requests get 503 meanwhile.
 * @param dir  borrowed until http_live_stop()
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (the thread could not start)
 */
weft_err http_live_start(const char *dir, unsigned poll_ms, http_live **out, weft_error *err);

/** Stop the thread, release the published snapshot and close the store; NULL does nothing.
 *  Call after http_daemon_stop(): no request may still hold a model, since every snapshot
 *  must be released before its store closes. */
void http_live_stop(http_live *live);

/**
 * Copy the published model into @p out, taking a snapshot reference. Request threads call
 * this; it takes a mutex for a few instructions and never touches LMDB.
 * @return false (and @p out zeroed) when no snapshot is live
 */
bool http_live_acquire(http_live *live, http_model *out);

/** Give back a copy from http_live_acquire(); @p m is zeroed. A zeroed model does nothing. */
void http_model_release(http_model *m);

/* ---- errors (http_error.c) ---- */

/** The kinds of failure a client can see; http_error.c maps each to a status and code. */
typedef enum http_fault {
    HTTP_FAULT_BAD_REQUEST,  /**< 400 bad_request: an argument is missing or malformed */
    HTTP_FAULT_NOT_FOUND,    /**< 404 not_found: no such node, relation, model or route */
    HTTP_FAULT_METHOD,       /**< 405 method_not_allowed */
    HTTP_FAULT_TOO_LARGE,    /**< 413 too_large: a configured limit */
    HTTP_FAULT_INTERNAL,     /**< 500 internal: a fault of the server or the stored data */
    HTTP_FAULT_NO_SNAPSHOT   /**< 503 no_snapshot: nothing is live yet */
} http_fault;

/** A response being built by a handler. */
typedef struct http_reply {
    unsigned status;
    json_t *body;            /**< owned; a JSON object, NULL when building it failed */
    char allow[40];          /**< value of the Allow header (405), or empty */
} http_reply;

/**
 * Make @p r the error response of @p fault: {"error": {"code", "message", "hint"}}.
 * @param hint  NULL for the fault's standard hint; copied
 * @param fmt   the message (printf); invalid UTF-8 is trimmed off the end, not echoed
 * A body already in @p r is dropped.
 */
void http_error_reply(http_reply *r, http_fault fault, const char *hint, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));

/** Same, for a weft error: its code picks the fault, its message is the message. */
void http_error_from(http_reply *r, const weft_error *err, const char *hint);

/* ---- requests and routes (http_route.c) ---- */

/** One request as a handler sees it. */
typedef struct http_request {
    struct MHD_Connection *conn;
    const http_model *model;         /**< the live snapshot for this request; NULL when none */
    const http_settings *settings;
} http_request;

/** A route's handler: fills @p out (status and body). It must not block on I/O. */
typedef void (*http_handler)(const http_request *rq, http_reply *out);

/**
 * Find the route for @p method and @p path and run its handler, or fill @p out with 404
 * (no such path), 405 (path exists, other method; sets allow) or 400 (a query parameter
 * the route does not take).
 */
void http_route_dispatch(const http_request *rq, const char *method, const char *path,
                         http_reply *out);

/**
 * Query argument @p key: *@p value is NULL when absent, "" when given without a value.
 * Only the first of repeated keys counts. @p len may be NULL.
 * @return WEFT_OK, WEFT_ERR_INVALID (contains a NUL byte or invalid UTF-8)
 */
weft_err http_route_arg(const http_request *rq, const char *key, const char **value,
                        size_t *len, weft_error *err);

/**
 * Query argument @p key as a whole number in [1, @p max]; @p fallback when absent.
 * @return WEFT_OK, WEFT_ERR_INVALID (empty, not a number, out of range; the message says so)
 */
weft_err http_route_arg_count(const http_request *rq, const char *key, size_t fallback,
                              size_t max, size_t *out, weft_error *err);

/** True when the request asks for indented JSON (?pretty, ?pretty=1, ?pretty=true). */
bool http_route_is_pretty(struct MHD_Connection *conn);

/* ---- handlers (http_model.c, http_links.c, http_labels.c) ---- */

void http_model_healthz(const http_request *rq, http_reply *out);
void http_model_get(const http_request *rq, http_reply *out);
void http_links_predict(const http_request *rq, http_reply *out);
void http_labels_predict(const http_request *rq, http_reply *out);
void http_labels_explain(const http_request *rq, http_reply *out);

/* ---- the daemon (http_daemon.c) ---- */

typedef struct http_daemon http_daemon;

/**
 * Start listening and serving with the settings in @p cfg and snapshots from @p live
 * (both borrowed until http_daemon_stop()).
 * @return WEFT_OK, WEFT_ERR_IO (cannot bind or start; libmicrohttpd logged why),
 *         WEFT_ERR_NOMEM
 */
weft_err http_daemon_start(const http_settings *cfg, http_live *live, http_daemon **out,
                           weft_error *err);

/**
 * Stop accepting, let open connections finish for at most @p drain_ms (responses sent
 * meanwhile close their connection), then stop. Frees @p d; NULL does nothing.
 */
void http_daemon_stop(http_daemon *d, unsigned drain_ms);

#endif
