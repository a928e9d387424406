/* The HTTP server's parts, shared by server/http_*.c and cmd_serve.c. Not part of libweft.
 *
 *   http_daemon.c  libmicrohttpd set-up, one request from arrival to queued response, drain
 *   http_route.c   the route table, method checks, query-argument helpers
 *   http_error.c   the one table from an error to an HTTP status and a JSON error body
 *   http_live.c    the loader thread: follows the store's head, publishes the live snapshot
 *   http_model.c   GET /healthz, GET /v1/model
 *   http_metrics.c request counters and latency histograms, GET /metrics, the access log
 *   http_health.c  what the loader measures of a snapshot, GET /v1/health, GET /readyz
 *   http_scan.c    top-k scans shared by the requests that arrive together
 *   http_links.c   GET and POST /v1/links/predict, POST /v1/links/score
 *   http_explain.c GET /v1/links/explain
 *   http_labels.c  GET and POST /v1/labels/predict, GET /v1/labels/explain
 *   http_nodes.c   GET /v1/nodes/{name}, GET /v1/nodes/{name}/similar
 *   http_snapshots.c  GET /v1/snapshots, POST /v1/snapshots/{version}/promote,
 *                  POST /v1/snapshots/rollback (the admin routes)
 *   http_page.c    GET /, GET /assets/{file}: the analyst page (web/, compiled in)
 *   http_map.c     GET /v1/map: the node embeddings projected to 2-D (PCA)
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
#include "weft/link_index.h"
#include "weft/snapshot.h"
#include "weft/topk.h"

/** k when a request gives none (capped at max_k). */
#define HTTP_DEFAULT_K 10
#define HTTP_DEFAULT_MAX_K 1000
/** Most neighbours /v1/labels/explain lists one by one (the rest are summed). */
#define HTTP_EXPLAIN_MAX_K 1000
#define HTTP_DEFAULT_POLL_MS 200
#define HTTP_DEFAULT_PORT 8080
/** Idle connections are closed after this many seconds. */
#define HTTP_TIMEOUT_SECONDS 10
/** Bytes libmicrohttpd may use per connection (its default, stated here): the request line
 *  and headers must fit (libmicrohttpd refuses longer ones itself); bodies stream through. */
#define HTTP_MEMORY_LIMIT (32u * 1024)
/** Most connections open at once unless --max-connections says otherwise; more wait in the
 *  listen backlog. */
#define HTTP_DEFAULT_MAX_CONNECTIONS 1024
/** Stack of each connection's thread. The handlers keep little on the stack (jansson's
 *  parser recurses at most 2048 levels, a few hundred bytes each); the rest is headroom. */
#define HTTP_THREAD_STACK_BYTES (1u << 20)
/** How long a shutdown waits for open connections to finish. */
#define HTTP_DRAIN_MS 5000
/** Most queries, triples or nodes one POST may hold, unless --max-batch says otherwise. */
#define HTTP_DEFAULT_MAX_BATCH 1000
/** Largest request body in bytes, unless --max-body says otherwise. */
#define HTTP_DEFAULT_MAX_BODY (1u << 20)
/** How long an admin request waits for the loader to carry out its action. */
#define HTTP_ADMIN_WAIT_MS 30000

/** What `weft serve` was asked for, after checking. */
typedef struct http_settings {
    const char *store_dir;           /**< borrowed from argv */
    struct sockaddr_storage addr;    /**< the address to bind, IPv4 or IPv6 */
    socklen_t addr_len;
    uint16_t port;                   /**< the port in addr, host order */
    bool is_ipv6;
    char listen[80];                 /**< the address as given, for messages */
    unsigned max_connections;        /**< connections open at once, one thread each */
    size_t max_k;                    /**< largest k a request may ask for */
    unsigned poll_ms;                /**< how often the loader reads the store's head */
    unsigned n_scan_threads;         /**< top-k passes that may run at once (http_scan.c) */
    size_t max_batch;                /**< most items (queries, triples, nodes) in one POST */
    size_t max_body;                 /**< largest request body, bytes */
    bool has_admin_token;            /**< admin routes are on (--admin-token-file) */
    unsigned char admin_token_sha256[32];  /**< SHA-256 of the token; compared in constant time */
    double max_age_seconds;          /**< /v1/health: a live snapshot older than this warns,
                                          twice as old fails (--max-age) */
    int access_log_fd;               /**< one JSON line per request goes here: 2 (stderr), a
                                          file opened for appending, or -1 (off) */
    const char *inputs;              /**< --inputs: comma-separated edge files for the coverage
                                          check, borrowed from argv; NULL for the manifest's */
    /* HTTPS (--tls-cert, --tls-key): the PEM texts are NULL for plain HTTP. cmd_serve.c reads
     * them at start and owns them; http_daemon_start() hands them to libmicrohttpd, which
     * parses them there (GnuTLS keeps its own copy) and keeps no pointer to them, so the
     * caller wipes them once it returns. */
    const char *tls_cert_path;       /**< --tls-cert, borrowed from argv; for messages */
    const char *tls_key_path;        /**< --tls-key, borrowed from argv; for messages */
    char *tls_cert_pem;              /**< the certificate chain, NUL-terminated PEM */
    char *tls_key_pem;               /**< the private key, NUL-terminated PEM; never logged */
    char *tls_key_password;          /**< --tls-key-password-file's password, or NULL */
} http_settings;

/** GnuTLS priorities of an HTTPS server: its default cipher suites, TLS 1.2 and 1.3 only
 *  (libmicrohttpd's default, "NORMAL", still offers TLS 1.0 and 1.1). */
#define HTTP_TLS_PRIORITIES "NORMAL:-VERS-ALL:+VERS-TLS1.3:+VERS-TLS1.2"

/** Snapshot age from which /v1/health warns unless --max-age says otherwise: 7 days (our
 *  choice: a weekly retrain is the slowest schedule we expect). */
#define HTTP_DEFAULT_MAX_AGE_SECONDS (7.0 * 24 * 3600)

/** Print one timestamped line "<UTC time> weft serve: <message>" on stderr. Any thread. */
void http_log(const char *fmt, ...) __attribute__((format(printf, 1, 2)));

/* ---- what the loader measures of a snapshot (http_health.c) ---- */

/** How far a measurement of a loaded snapshot got. */
typedef enum http_measure {
    HTTP_MEASURE_NONE = 0,   /**< not applicable or not asked for (the note says why) */
    HTTP_MEASURE_PENDING,    /**< the loader will measure it shortly */
    HTTP_MEASURE_DONE,
    HTTP_MEASURE_FAILED      /**< the note says why */
} http_measure;

/**
 * What the loader measures of a loaded snapshot for /v1/health and /metrics, so that no
 * request scans a blob: once at load (blobs, norms, drift) and again when the input files
 * change (coverage). Plain data, copied with the model.
 */
typedef struct http_checks {
    double created;            /**< the manifest's "created", Unix seconds; NaN when absent */
    double loaded;             /**< when this server made the version live, Unix seconds */
    size_t n_floats;           /**< f32 values in all the snapshot's blobs */
    size_t n_nonfinite;        /**< of them NaN or infinite */
    char nonfinite_blob[WEFT_BLOB_MAX_NAME + 1];   /**< the first blob holding one, or "" */
    size_t norm_rows;          /**< entity rows with finite values measured; 0: no link model */
    size_t norm_zero_rows;     /**< of them rows of norm 0 */
    double norm_p01, norm_p50, norm_p99;   /**< percentiles of the entity rows' L2 norms */
    http_measure drift;
    uint64_t drift_from;       /**< the version compared with */
    size_t drift_probes;       /**< link probes compared (0 without link models in both) */
    double drift_links;        /**< mean overlap of their top-10 lists, 0..1; NaN: none */
    size_t drift_nodes;        /**< nodes in both label models (0 without label models) */
    double drift_labels;       /**< share of them keeping their predicted class; NaN: none */
    char drift_note[160];      /**< why drift was not measured */
    http_measure coverage;
    size_t coverage_names;     /**< distinct node names in the input files read */
    size_t coverage_found;     /**< of them in the snapshot's node table */
    char coverage_note[200];   /**< the files read, or why coverage was not measured */
} http_checks;

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
    weft_link_index_view index;   /**< the link model's index (kind exact: none) */
    bool has_labels;         /**< the snapshot has a label model, and labels is filled */
    weft_label_view labels;  /**< (a loaded model has at least one of the two) */
    bool has_types;          /**< the snapshot stores node types, and types is filled */
    weft_types_view types;
    http_checks checks;      /**< what the loader measured (http_health.c) */
} http_model;

/** The loader: a thread that follows the store's head and publishes snapshots. Opaque. */
typedef struct http_live http_live;

/**
 * Start following the store in @p dir: one load attempt now (so a live snapshot is served
 * from the first request), then a thread that reads the head every @p poll_ms and loads a
 * newly promoted version. A store that cannot be opened yet, or holds no snapshot, is not
 * an error: the thread keeps trying and requests get 503 meanwhile.
 * @param dir          borrowed until http_live_stop()
 * @param is_writable  open the store for writing, so that admin actions can promote and roll
 *                     back (http_live_admin); else read-only
 * @param inputs       as http_live_set_inputs, set before the first load so that its
 *                     coverage is measured on them (NULL: the manifest's files)
 * @return WEFT_OK, WEFT_ERR_NOMEM, WEFT_ERR_INVALID (the thread could not start)
 */
weft_err http_live_start(const char *dir, unsigned poll_ms, bool is_writable, const char *inputs,
                         http_live **out, weft_error *err);

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

/**
 * The store's history as GET /v1/snapshots answers it: a deep copy (caller json_decref()s)
 * of the list the loader keeps. The loader reads it from the store when the head changes,
 * after every admin action, and at most HTTP_SNAPSHOTS_REFRESH_MS after a version is added
 * without a promotion. NULL when the loader has not read it yet (no store yet) or out of
 * memory. Never touches LMDB.
 */
json_t *http_live_snapshots(http_live *live);

/** What the loader has done since it started, for /metrics. */
typedef struct http_live_counts {
    uint64_t swaps;          /**< versions made live (the first load counts) */
    uint64_t load_failures;  /**< versions that could not be loaded */
} http_live_counts;

/** Copy the loader's counts into @p out. Any thread; never touches LMDB. */
void http_live_get_counts(http_live *live, http_live_counts *out);

/** The last promoted version the loader could not load, for /v1/health. */
typedef struct http_live_failure {
    uint64_t version;        /**< that version; 0: every version loaded since the start */
    bool is_current;         /**< the store's live version is still that one, so the server
                                  serves the version it had before (or none) */
    double at;               /**< when it first failed, Unix seconds */
    char message[160];       /**< why (weft_snapshot_open's message: blob, CRC, ...) */
} http_live_failure;

/** Copy the loader's last load failure into @p out. Any thread; never touches LMDB. */
void http_live_get_failure(http_live *live, http_live_failure *out);

/**
 * The edge files whose nodes /v1/health's coverage check looks up in the live node table
 * (weft serve --inputs): @p inputs is a comma-separated list (copied), NULL for the edge
 * files the live manifest names. The loader measures again at its next poll.
 * @return WEFT_OK, WEFT_ERR_NOMEM
 */
weft_err http_live_set_inputs(http_live *live, const char *inputs, weft_error *err);

/** How stale the cached history may get when the head does not change, in ms. */
#define HTTP_SNAPSHOTS_REFRESH_MS 5000

/** An admin action for the loader, the one thread that writes to the store. */
typedef struct http_admin_action {
    bool is_rollback;        /**< roll back to the previous version; else promote version */
    uint64_t version;        /**< the version to promote */
    bool is_forced;          /**< promote even a rejected version */
    const char *reason;      /**< for the history, valid UTF-8, or NULL; copied */
} http_admin_action;

/** What came of it. */
typedef struct http_admin_result {
    bool is_done;            /**< false: the wait timed out (the action may still happen) */
    weft_error err;          /**< code WEFT_OK when the store carried it out */
    uint64_t live, previous; /**< the store's head afterwards */
    uint64_t serving;        /**< the version the server serves afterwards (0 none) */
} http_admin_result;

/**
 * Hand @p a to the loader and wait at most @p timeout_ms for it: the loader promotes or
 * rolls back (weft_store_promote_with / weft_store_rollback, which verify the CRCs first),
 * then at once loads the new head and rereads the history, so that the next request sees
 * the new version. A request thread calls this; it blocks only on a condition variable.
 */
void http_live_admin(http_live *live, const http_admin_action *a, unsigned timeout_ms,
                     http_admin_result *out);
/* ---- errors (http_error.c) ---- */

/** The kinds of failure a client can see; http_error.c maps each to a status and code. */
typedef enum http_fault {
    HTTP_FAULT_BAD_REQUEST,  /**< 400 bad_request: an argument is missing or malformed */
    HTTP_FAULT_NOT_FOUND,    /**< 404 not_found: no such node, relation, model or route */
    HTTP_FAULT_METHOD,       /**< 405 method_not_allowed */
    HTTP_FAULT_TOO_LARGE,    /**< 413 too_large: a configured limit */
    HTTP_FAULT_INTERNAL,     /**< 500 internal: a fault of the server or the stored data */
    HTTP_FAULT_NO_SNAPSHOT,  /**< 503 no_snapshot: nothing is live yet */
    HTTP_FAULT_UNAUTHORIZED, /**< 401 unauthorized: admin route without the right bearer token */
    HTTP_FAULT_UNPROCESSABLE,/**< 422 unprocessable: a body that is JSON but not what the
                                  route takes, or an action the store refuses */
    HTTP_FAULT_BUSY          /**< 503 busy: the loader did not finish an action in time */
} http_fault;

/** Most extra headers one reply carries (http_reply.headers). */
#define HTTP_REPLY_MAX_HEADERS 8

/** A response being built by a handler. */
typedef struct http_reply {
    unsigned status;
    json_t *body;            /**< owned; a JSON object, NULL when building it failed */
    char allow[40];          /**< value of the Allow header (405), or empty */
    bool is_auth_challenge;  /**< add WWW-Authenticate: Bearer (401) */
    char *text;              /**< owned (malloc); when set, sent as is instead of body */
    size_t text_len;
    const char *content_type;  /**< of text; static */
    size_t route;            /**< set by the dispatcher: the routes[] row whose path matched
                                  (see http_route_info), HTTP_ROUTE_NONE when none did */
    bool is_wrong_method;    /**< the path matched, the method did not (405) */
    const char *headers[HTTP_REPLY_MAX_HEADERS][2];  /**< more response headers, name and
                                  value, static strings (the page's CSP and ETag); a
                                  Cache-Control here replaces the default "no-store" */
    size_t n_headers;
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

/** The request counters (http_metrics.c). Opaque. */
typedef struct http_metrics http_metrics;

/** One request as a handler sees it. */
typedef struct http_request {
    struct MHD_Connection *conn;
    const http_model *model;         /**< the live snapshot for this request; NULL when none */
    const http_settings *settings;
    http_live *live;                 /**< the loader, for the snapshot list and admin actions */
    const char *body;                /**< the request body, not NUL-terminated; NULL if none */
    size_t body_len;
    const char *path_arg;            /**< the {name} or {version} of a pattern route, NUL-
                                          terminated (set by the dispatcher); NULL otherwise */
    size_t path_arg_len;
    http_metrics *metrics;           /**< the request counters, for GET /metrics */
    bool is_draining;                /**< the server is shutting down (/readyz fails) */
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

/** http_reply.route when no route's path matched. */
#define HTTP_ROUTE_NONE ((size_t)-1)

/** Rows in the route table; http_reply.route is below it (or HTTP_ROUTE_NONE). */
size_t http_route_count(void);

/** Method and path pattern (as "/v1/nodes/{name}") of row @p i < http_route_count(); static. */
void http_route_info(size_t i, const char **method, const char **path);

/**
 * The row that would answer @p method @p path, as http_route_dispatch() sets reply.route and
 * reply.is_wrong_method, without running it (for requests refused before routing, 413).
 */
size_t http_route_find(const char *method, const char *path, bool *is_wrong_method);

/**
 * The request body as a JSON object (a new reference), or NULL with @p out filled: 400 when
 * there is no body or it is not JSON (the message gives line, column and byte position; an
 * object key given twice counts as not JSON), 422 when it is JSON but not an object.
 */
json_t *http_route_body(const http_request *rq, http_reply *out);

/**
 * Fill @p out with 422 unless every key of @p body is in @p keys (NULL-terminated), so that a
 * misspelt field is reported instead of ignored. @p where names the object in the message
 * ("the body", "queries[3]"). @return true when all keys are known.
 */
bool http_route_known_keys(const json_t *body, const char *const *keys, const char *where,
                           http_reply *out);

/* ---- handlers (http_model.c, http_links.c, http_labels.c) ---- */

void http_model_healthz(const http_request *rq, http_reply *out);
void http_model_get(const http_request *rq, http_reply *out);
void http_links_predict(const http_request *rq, http_reply *out);
void http_links_predict_batch(const http_request *rq, http_reply *out);
void http_links_score(const http_request *rq, http_reply *out);
void http_links_explain(const http_request *rq, http_reply *out);
void http_labels_predict(const http_request *rq, http_reply *out);
void http_labels_predict_batch(const http_request *rq, http_reply *out);
void http_labels_explain(const http_request *rq, http_reply *out);
/** The class of highest probability of @p node (the lowest class id on a tie), as every
 *  answer about labels names it. */
uint32_t http_labels_predicted_class(const weft_label_view *v, uint32_t node);
/** The caution every answer about labels carries (probabilistic, human review, the law). */
extern const char http_labels_caution[];
void http_nodes_get(const http_request *rq, http_reply *out);
void http_nodes_similar(const http_request *rq, http_reply *out);
void http_snapshots_get(const http_request *rq, http_reply *out);
void http_snapshots_promote(const http_request *rq, http_reply *out);
void http_snapshots_rollback(const http_request *rq, http_reply *out);
void http_page_index(const http_request *rq, http_reply *out);
void http_page_asset(const http_request *rq, http_reply *out);
void http_map_get(const http_request *rq, http_reply *out);

/** GET /v1/map: points when a request gives no max_points, and the most it may ask for
 *  (a sample of the nodes when the snapshot has more; the PCA costs O(points x dim^2)). */
#define HTTP_MAP_DEFAULT_POINTS 2000
#define HTTP_MAP_MAX_POINTS 20000

/* Name lookups of the link routes (http_links.c), shared with http_explain.c and
 * http_nodes.c. @p rq->model must have the link model (types: any model). */

/** Node @p name[0..len) (the role @p what, "source" or "target", names it in messages).
 *  @return WEFT_OK, WEFT_ERR_INVALID (NULL: missing, or empty), WEFT_ERR_NOT_FOUND */
weft_err http_links_node(const http_request *rq, const char *what, const char *name,
                         size_t len, uint32_t *id, weft_error *err);
/** Relation @p name[0..len); NULL means the model's only relation.
 *  @return WEFT_OK, WEFT_ERR_INVALID (NULL and several relations), WEFT_ERR_NOT_FOUND */
weft_err http_links_relation(const http_request *rq, const char *name, size_t len,
                             uint32_t *id, weft_error *err);
/** "this model's relations: a, b" into @p buf, for hints. */
void http_links_relation_hint(const weft_link_view *v, char *buf, size_t size);
/** Node type @p name[0..len). @return WEFT_OK, WEFT_ERR_INVALID (empty), WEFT_ERR_NOT_FOUND
 *  (no such type, or the snapshot stores no types) */
weft_err http_links_type(const http_request *rq, const char *name, size_t len, uint32_t *id,
                         weft_error *err);

/**
 * The body of GET /v1/snapshots read from @p s: {"live", "previous", "listed_at",
 * "snapshots": [...]}, a new reference. The loader calls it (it reads LMDB).
 * @return WEFT_OK, the codes of weft_store_head() and weft_store_list(), WEFT_ERR_NOMEM
 */
weft_err http_snapshots_read(weft_store *s, json_t **out, weft_error *err);

/* ---- request counters and GET /metrics (http_metrics.c) ---- */

/**
 * New counters for every row of the route table by status (fixed buckets), with latency
 * histograms. @return WEFT_OK, WEFT_ERR_NOMEM
 */
weft_err http_metrics_new(http_metrics **out, weft_error *err);

/** Free @p m; NULL does nothing. */
void http_metrics_free(http_metrics *m);

/** A request has started (it counts as in flight until http_metrics_end). Any thread. */
void http_metrics_begin(http_metrics *m);

/** Requests begun and not yet ended (the in-flight gauge). Any thread. */
long http_metrics_in_flight(const http_metrics *m);

/**
 * A request has ended. With @p is_answered, count it under @p route (http_reply.route),
 * @p is_wrong_method and @p status, taking @p seconds; else (the client went away before an
 * answer) only leave the in-flight count. Lock-free: relaxed atomic additions.
 */
void http_metrics_end(http_metrics *m, size_t route, bool is_wrong_method, unsigned status,
                      double seconds, bool is_answered);

/** GET /metrics: the Prometheus text format, version 0.0.4. */
void http_metrics_get(const http_request *rq, http_reply *out);

/** One request as the access log records it. */
typedef struct http_access {
    double start;                    /**< when its headers arrived, Unix seconds */
    const char *method;              /**< as the client sent it */
    const char *path;                /**< the decoded path, without the query string */
    size_t route;                    /**< http_reply.route */
    unsigned status;                 /**< 0: no answer was sent (the client went away) */
    double seconds;                  /**< from its headers to the end of its response */
    size_t bytes;                    /**< response body bytes */
    bool has_version;                /**< a snapshot was live for it */
    uint64_t version;
    const struct sockaddr *remote;   /**< the client's address, or NULL */
} http_access;

/**
 * Write @p a as one JSON line {"time", "method", "route", "path", "status", "duration_ms",
 * "bytes", "version", "remote"} to @p fd with a single write(2); -1 does nothing. Text the
 * client sent is escaped (bytes that are not UTF-8 become U+FFFD). Any thread.
 */
void http_access_log(int fd, const http_access *a);

/* ---- model checks, GET /v1/health and /readyz (http_health.c) ---- */

/** The verdict of one check; the order is the order of severity. */
typedef enum http_check_status {
    HTTP_CHECK_OK = 0,
    HTTP_CHECK_WARN = 1,
    HTTP_CHECK_FAIL = 2
} http_check_status;

/** One check of the live snapshot as /v1/health reports it. */
typedef struct http_check {
    const char *name;           /**< static */
    http_check_status status;
    double value;               /**< the figure measured; NaN for none (null in JSON) */
    double threshold;           /**< the limit it is judged against; NaN for none */
    char message[240];
} http_check;

/** Most checks http_health_evaluate() gives. */
#define HTTP_MAX_CHECKS 16

/**
 * Judge the live snapshot of @p rq (its http_checks, its manifest, the settings) at time
 * @p now (Unix seconds). Cheap: no blob is read. @return the number of checks in @p out;
 * with no live snapshot, one failing check "snapshot".
 */
size_t http_health_evaluate(const http_request *rq, double now, http_check *out);

/** "ok", "warn", "fail". */
const char *http_check_status_name(http_check_status s);

/**
 * Loader side: fill @p m->checks from its blobs (NaN and infinities in every f32 blob, the
 * entity rows' norms) and its manifest ("created"), marking drift and coverage pending.
 * O(size of the f32 blobs). @return WEFT_OK, WEFT_ERR_NOMEM
 */
weft_err http_checks_scan(http_model *m, weft_error *err);

/**
 * Loader side: measure @p m's drift from @p before (the version served before it): the
 * overlap of top-10 link predictions on a fixed probe set of nodes present in both, and
 * the share of nodes keeping their predicted class. Sets m->checks.drift*.
 */
void http_checks_drift(http_model *m, const http_model *before);

/**
 * Loader side: the share of the distinct node names in edge files @p paths (2 or 3
 * columns, as weft train reads them) that @p m's node table holds. Sets m->checks.coverage*.
 */
void http_checks_coverage(http_model *m, const char *const *paths, size_t n_paths);

void http_health_get(const http_request *rq, http_reply *out);
void http_health_readyz(const http_request *rq, http_reply *out);

/* ---- the daemon (http_daemon.c) ---- */

typedef struct http_daemon http_daemon;

/**
 * Start listening and serving with the settings in @p cfg and snapshots from @p live
 * (both borrowed until http_daemon_stop()).
 * With cfg->tls_cert_pem it serves HTTPS (HTTP_TLS_PRIORITIES); the PEM texts and the
 * password are read during this call only, and may be wiped as soon as it returns.
 * @return WEFT_OK, WEFT_ERR_IO (cannot bind or start, or GnuTLS refused the certificate or
 *         key; libmicrohttpd logged why), WEFT_ERR_NOMEM
 */
weft_err http_daemon_start(const http_settings *cfg, http_live *live, http_daemon **out,
                           weft_error *err);

/**
 * Stop accepting, let open connections finish for at most @p drain_ms (responses sent
 * meanwhile close their connection), then stop. Frees @p d; NULL does nothing.
 */
void http_daemon_stop(http_daemon *d, unsigned drain_ms);

/* ---- http_scan.c ---- */

/** Most top-k passes that may run at once. */
#define HTTP_SCAN_MAX_LEADERS 64

/** Let at most @p leaders passes run at once (default 1; `weft serve` sets one per core). */
void http_scan_init(unsigned leaders);
/** Free the leaders' workspace; call once no request runs. */
void http_scan_fini(void);
/**
 * Let a new pass wait while requests counted in flight by @p m (NULL: none) still have work
 * of their own to do, so that their queries join it (see gather() in http_scan.c). The
 * daemon sets it at start and clears it before freeing @p m.
 */
void http_scan_watch(const http_metrics *m);

/**
 * weft_topk_scan() (include/weft/topk.h) for a request thread, with the same result, but
 * answered together with the other requests waiting on the same matrix: one pass over @p e
 * serves up to 64 of them. Blocks until this query's list is written. @p q, @p ex, @p id and
 * @p score must stay valid until it returns.
 */
size_t http_scan_topk(const float *e, size_t n, size_t d, const float *q, size_t k,
                      const weft_topk_exclude *ex, uint32_t *id, float *score);

/**
 * weft_index_int8_search() (include/weft/index.h) for a request thread, with the same
 * result, answered together with the other requests waiting on the same codes: one pass
 * (weft_index_int8_search_many) serves up to 64 of them. Same contract as http_scan_topk.
 * @return WEFT_OK or WEFT_ERR_NOMEM
 */
weft_err http_scan_int8(const weft_index_codes *c, const float *e, size_t oversample,
                        const float *q, size_t k, const weft_index_filter *f, uint32_t *id,
                        float *score, size_t *n_out, weft_error *err);

/**
 * weft_index_ivf_search() for a request thread, with the same result, in the same queue as
 * the other passes (oldest first), one search at a time: the lists differ from query to
 * query, so there is no pass to share, but the queue keeps the waits fair under load.
 */
weft_err http_scan_ivf(const weft_index_ivf *ix, const float *e, size_t nprobe,
                       size_t oversample, const float *q, size_t k, const weft_index_filter *f,
                       uint32_t *id, float *score, size_t *n_out, weft_error *err);

#endif
