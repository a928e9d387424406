/* The route table and the query-argument helpers every handler uses. */
#include "http.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/io.h"

static const char *const model_params[] = { NULL };
static const char *const predict_params[] = { "source", "target", "relation", "k", "direction",
                                              "candidate_type", "include_known", "exact",
                                              NULL };
static const char *const link_explain_params[] = { "source", "relation", "target", "k", NULL };
static const char *const label_predict_params[] = { "node", NULL };
static const char *const label_explain_params[] = { "node", "k", NULL };
static const char *const node_params[] = { "neighbours", NULL };
static const char *const similar_params[] = { "k", "candidate_type", NULL };
static const char *const map_params[] = { "max_points", NULL };

/* Which part of a snapshot a route answers from. */
enum route_needs { NEEDS_NOTHING, NEEDS_SNAPSHOT, NEEDS_LINKS, NEEDS_LABELS };

/* Every route the server answers. A path may appear once per method. A path with one
 * "{...}" segment is a pattern (see match_path); exact paths are listed before patterns that
 * could match them, and a longer pattern before a shorter one. params lists the query
 * parameters the route takes besides "pretty"; any other is a 400, so that a misspelt
 * option is reported instead of ignored. NULL takes anything (probes add cache breakers).
 * needs: the dispatcher answers 503 while no snapshot is live and 404 when the live one lacks
 * the model the route needs, so that a handler always finds its part. */
static const struct route {
    const char *method;
    const char *path;
    http_handler handler;
    const char *const *params;
    enum route_needs needs;
} routes[] = {
    { "GET", "/healthz", http_model_healthz, NULL, NEEDS_NOTHING },
    { "GET", "/readyz", http_health_readyz, NULL, NEEDS_NOTHING },
    { "GET", "/v1/health", http_health_get, model_params, NEEDS_NOTHING },
    { "GET", "/metrics", http_metrics_get, NULL, NEEDS_NOTHING },
    { "GET", "/v1/model", http_model_get, model_params, NEEDS_SNAPSHOT },
    { "GET", "/v1/links/predict", http_links_predict, predict_params, NEEDS_LINKS },
    { "POST", "/v1/links/predict", http_links_predict_batch, model_params, NEEDS_LINKS },
    { "POST", "/v1/links/score", http_links_score, model_params, NEEDS_LINKS },
    { "GET", "/v1/links/explain", http_links_explain, link_explain_params, NEEDS_LINKS },
    { "GET", "/v1/labels/predict", http_labels_predict, label_predict_params, NEEDS_LABELS },
    { "POST", "/v1/labels/predict", http_labels_predict_batch, model_params, NEEDS_LABELS },
    { "GET", "/v1/labels/explain", http_labels_explain, label_explain_params, NEEDS_LABELS },
    { "GET", "/v1/nodes/{name}/similar", http_nodes_similar, similar_params, NEEDS_LINKS },
    { "GET", "/v1/nodes/{name}", http_nodes_get, node_params, NEEDS_SNAPSHOT },
    { "GET", "/v1/snapshots", http_snapshots_get, model_params, NEEDS_NOTHING },
    { "POST", "/v1/snapshots/rollback", http_snapshots_rollback, model_params, NEEDS_NOTHING },
    { "POST", "/v1/snapshots/{version}/promote", http_snapshots_promote, model_params,
      NEEDS_NOTHING },
    { "GET", "/v1/map", http_map_get, map_params, NEEDS_SNAPSHOT },
    { "GET", "/", http_page_index, NULL, NEEDS_NOTHING },
    { "GET", "/assets/{file}", http_page_asset, NULL, NEEDS_NOTHING },
};
#define N_ROUTES (sizeof routes / sizeof routes[0])

/* Whether @p path matches route path @p pattern. A "{...}" segment matches one or more
 * characters, slashes included (libmicrohttpd has already decoded %2F), so that a node name
 * with a slash can be given; what follows the segment in the pattern must end the path.
 * On a match, *@p arg and *@p arg_len are the matched part (within @p path), else NULL. */
static bool match_path(const char *pattern, const char *path, const char **arg, size_t *arg_len)
{
    *arg = NULL;
    *arg_len = 0;
    const char *open = strchr(pattern, '{');
    if (!open)
        return !strcmp(pattern, path);
    const char *close = strchr(open, '}');
    size_t head = (size_t)(open - pattern), path_len = strlen(path);
    size_t tail = close ? strlen(close + 1) : 0;
    if (!close || strncmp(pattern, path, head) != 0 || path_len < head + tail + 1 ||
        strcmp(path + path_len - tail, close + 1) != 0)
        return false;
    *arg = path + head;
    *arg_len = path_len - head - tail;
    return true;
}

/* Position of @p key among the parameters @p rt takes: its params, then "pretty"; -1 when
 * the route does not take it. */
static int param_index(const struct route *rt, const char *key)
{
    int i = 0;
    for (const char *const *p = rt->params; *p; p++, i++)
        if (!strcmp(*p, key))
            return i;
    return strcmp(key, "pretty") ? -1 : i;
}

struct param_scan {
    const struct route *rt;
    const char *unknown;    /* first parameter the route does not take */
    const char *repeated;   /* first parameter given twice */
    uint32_t seen;          /* bit i: parameter i (param_index) was given */
};

/* A parameter given twice is refused like a JSON key given twice: which of the two was
 * meant cannot be known. */
static enum MHD_Result scan_param(void *cls, enum MHD_ValueKind kind, const char *key,
                                  const char *value)
{
    (void)kind;
    (void)value;
    struct param_scan *scan = cls;
    int i = param_index(scan->rt, key);
    if (i < 0) {
        scan->unknown = key;
        return MHD_NO;
    }
    if (scan->seen & (UINT32_C(1) << i)) {
        scan->repeated = key;
        return MHD_NO;
    }
    scan->seen |= UINT32_C(1) << i;
    return MHD_YES;
}

/* "source, relation, k, pretty": the parameters of @p rt, for hints. */
static void list_params(const struct route *rt, char *buf, size_t size)
{
    size_t used = 0;
    buf[0] = '\0';
    for (const char *const *p = rt->params; *p && used < size; p++)
        used += (size_t)snprintf(buf + used, size - used, "%s, ", *p);
    if (used < size)
        snprintf(buf + used, size - used, "pretty");
}

/* "GET /healthz, GET /v1/model, ...": every route, for the hint of a 404 (the spec test
 * reads it to compare the routes with openapi/openapi.yaml). */
static void list_routes(char *buf, size_t size)
{
    size_t used = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < N_ROUTES && used < size; i++)
        used += (size_t)snprintf(buf + used, size - used, "%s%s %s", i ? ", " : "",
                                 routes[i].method, routes[i].path);
}

static bool check_params(const http_request *rq, const struct route *rt, http_reply *out)
{
    if (!rt->params)
        return true;
    struct param_scan scan = { rt, NULL, NULL, 0 };
    MHD_get_connection_values(rq->conn, MHD_GET_ARGUMENT_KIND, scan_param, &scan);
    if (!scan.unknown && !scan.repeated)
        return true;
    char hint[200];
    char taken[160];
    list_params(rt, taken, sizeof taken);
    snprintf(hint, sizeof hint, "%s %s takes: %s", rt->method, rt->path, taken);
    if (scan.repeated)
        http_error_reply(out, HTTP_FAULT_BAD_REQUEST, "give each query parameter once",
                         "query parameter '%s' is given more than once", scan.repeated);
    else if (weft_io_utf8_valid(scan.unknown, strlen(scan.unknown)))
        http_error_reply(out, HTTP_FAULT_BAD_REQUEST, hint, "unknown query parameter '%s'",
                         scan.unknown);
    else
        http_error_reply(out, HTTP_FAULT_BAD_REQUEST, hint,
                         "a query parameter name is not valid UTF-8");
    return false;
}

/* The live snapshot holds what @p rt needs; else fill @p out with 503 or 404. */
static bool check_needs(const http_request *rq, const struct route *rt, http_reply *out)
{
    if (rt->needs == NEEDS_NOTHING)
        return true;
    const http_model *m = rq->model;
    if (!m) {
        http_error_reply(out, HTTP_FAULT_NO_SNAPSHOT, NULL, "no snapshot is live yet");
        return false;
    }
    if (rt->needs == NEEDS_LINKS && !m->has_links) {
        http_error_reply(out, HTTP_FAULT_NOT_FOUND,
                         "this snapshot has no link model; train one with "
                         "--model dot|distmult|complex|gcn-link",
                         "snapshot %llu has no link model", (unsigned long long)m->version);
        return false;
    }
    if (rt->needs == NEEDS_LABELS && !m->has_labels) {
        http_error_reply(out, HTTP_FAULT_NOT_FOUND,
                         "this snapshot has no label model; train one with "
                         "--model gcn --labels FILE",
                         "snapshot %llu has no label model", (unsigned long long)m->version);
        return false;
    }
    return true;
}

void http_route_dispatch(const http_request *rq, const char *method, const char *path,
                         http_reply *out)
{
    const struct route *found = NULL;
    const char *arg = NULL, *found_arg = NULL;
    size_t arg_len = 0, found_arg_len = 0, used = 0;
    out->allow[0] = '\0';
    out->route = HTTP_ROUTE_NONE;   /* for the request counters: the first row whose path */
    out->is_wrong_method = false;   /* matched, then the row that answers */
    for (size_t i = 0; i < N_ROUTES; i++) {
        if (!match_path(routes[i].path, path, &arg, &arg_len))
            continue;
        if (out->route == HTTP_ROUTE_NONE)
            out->route = i;
        if (!found && !strcmp(routes[i].method, method)) {
            found = &routes[i];
            found_arg = arg;
            found_arg_len = arg_len;
        }
        if (used < sizeof out->allow && !strstr(out->allow, routes[i].method))
            used += (size_t)snprintf(out->allow + used, sizeof out->allow - used, "%s%s",
                                     used ? ", " : "", routes[i].method);
    }
    if (!found && !used) {
        char hint[1200];
        list_routes(hint, sizeof hint);
        out->allow[0] = '\0';
        http_error_reply(out, HTTP_FAULT_NOT_FOUND, hint, "no route %s %s", method, path);
        return;
    }
    if (!found) {
        out->is_wrong_method = true;
        http_error_reply(out, HTTP_FAULT_METHOD, NULL, "%s %s is not supported; use %s",
                         method, path, out->allow);
        return;
    }
    out->allow[0] = '\0';
    out->route = (size_t)(found - routes);
    http_request with_arg = *rq;
    char *arg_copy = NULL;
    if (found_arg && !weft_io_utf8_valid(found_arg, found_arg_len)) {
        http_error_reply(out, HTTP_FAULT_BAD_REQUEST,
                         "percent-encode a name in the path as its UTF-8 bytes (%C3%A9, not "
                         "%E9)", "the path segment after '%.*s' is not valid UTF-8",
                         (int)(found_arg - path), path);
        return;
    }
    if (found_arg) {   /* a NUL-terminated copy: the path is too, but the tail follows it */
        arg_copy = malloc(found_arg_len + 1);
        if (!arg_copy) {
            http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory routing %s", path);
            return;
        }
        memcpy(arg_copy, found_arg, found_arg_len);
        arg_copy[found_arg_len] = '\0';
        with_arg.path_arg = arg_copy;
        with_arg.path_arg_len = found_arg_len;
    }
    if (check_params(&with_arg, found, out) && check_needs(&with_arg, found, out))
        found->handler(&with_arg, out);
    free(arg_copy);
}

weft_err http_route_arg(const http_request *rq, const char *key, const char **value,
                        size_t *len, weft_error *err)
{
    const char *v = NULL;
    size_t n = 0;
    if (MHD_lookup_connection_value_n(rq->conn, MHD_GET_ARGUMENT_KIND, key, strlen(key), &v,
                                      &n) != MHD_YES) {
        *value = NULL;
        if (len)
            *len = 0;
        return WEFT_OK;
    }
    if (!v) { /* "?key" without "=" */
        v = "";
        n = 0;
    }
    if (strlen(v) != n)
        return weft_error_set(err, WEFT_ERR_INVALID, "query parameter '%s' contains a NUL byte",
                              key);
    if (!weft_io_utf8_valid(v, n))
        return weft_error_set(err, WEFT_ERR_INVALID, "query parameter '%s' is not valid UTF-8",
                              key);
    *value = v;
    if (len)
        *len = n;
    return WEFT_OK;
}

weft_err http_route_arg_count(const http_request *rq, const char *key, size_t fallback,
                              size_t max, size_t *out, weft_error *err)
{
    const char *v = NULL;
    size_t n = 0;
    weft_err rc = http_route_arg(rq, key, &v, &n, err);
    if (rc != WEFT_OK)
        return rc;
    if (!v) {
        *out = fallback < max ? fallback : max;
        return WEFT_OK;
    }
    /* Digits only: no sign, no spaces, no exponent. Stop counting once past max, so that
     * a long string of digits cannot overflow. */
    size_t value = 0;
    bool is_above = false;
    for (size_t i = 0; i < n; i++) {
        if (v[i] < '0' || v[i] > '9')
            return weft_error_set(err, WEFT_ERR_INVALID,
                                  "%s must be a whole number from 1 to %zu, not '%s'", key, max,
                                  v);
        if (!is_above)
            value = value * 10 + (size_t)(v[i] - '0');
        is_above = is_above || value > max;
    }
    if (n == 0 || value == 0)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "%s must be a whole number from 1 to %zu, not '%s'", key, max, v);
    if (is_above)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "%s=%s is above this server's limit of %zu", key, v, max);
    *out = value;
    return WEFT_OK;
}

bool http_route_is_pretty(struct MHD_Connection *conn)
{
    const char *v = NULL;
    if (MHD_lookup_connection_value_n(conn, MHD_GET_ARGUMENT_KIND, "pretty", strlen("pretty"),
                                      &v, NULL) != MHD_YES)
        return false;
    return !v || (strcmp(v, "0") != 0 && strcmp(v, "false") != 0);
}

json_t *http_route_body(const http_request *rq, http_reply *out)
{
    if (!rq->body || rq->body_len == 0) {
        http_error_reply(out, HTTP_FAULT_BAD_REQUEST,
                         "send a JSON object with 'Content-Type: application/json'",
                         "this route needs a JSON body");
        return NULL;
    }
    json_error_t jerr;
    /* Any JSON value is read (JSON_DECODE_ANY), so that a bare string or number is called
     * what it is, valid JSON that is not an object (422), rather than invalid JSON. */
    json_t *body = json_loadb(rq->body, rq->body_len, JSON_REJECT_DUPLICATES | JSON_DECODE_ANY,
                              &jerr);
    if (!body) {
        http_error_reply(out, HTTP_FAULT_BAD_REQUEST,
                         "the body must be one JSON object in UTF-8, each key once",
                         "the body is not valid JSON: %s at line %d, column %d (byte %d)",
                         jerr.text, jerr.line, jerr.column, jerr.position);
        return NULL;
    }
    if (!json_is_object(body)) {
        json_decref(body);
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL,
                         "the body must be a JSON object");
        return NULL;
    }
    return body;
}

bool http_route_known_keys(const json_t *body, const char *const *keys, const char *where,
                           http_reply *out)
{
    const char *key;
    const json_t *value;
    json_object_foreach((json_t *)body, key, value) {
        const char *const *k = keys;
        while (*k && strcmp(*k, key) != 0)
            k++;
        if (*k)
            continue;
        char hint[200];
        size_t used = (size_t)snprintf(hint, sizeof hint, "%s takes: ", where);
        for (k = keys; *k && used < sizeof hint; k++)
            used += (size_t)snprintf(hint + used, sizeof hint - used, "%s%s",
                                     k == keys ? "" : ", ", *k);
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, hint, "%s: unknown field '%s'", where,
                         key);
        return false;
    }
    return true;
}

size_t http_route_count(void)
{
    return N_ROUTES;
}

void http_route_info(size_t i, const char **method, const char **path)
{
    *method = i < N_ROUTES ? routes[i].method : "other";
    *path = i < N_ROUTES ? routes[i].path : "unmatched";
}

size_t http_route_find(const char *method, const char *path, bool *is_wrong_method)
{
    size_t first = HTTP_ROUTE_NONE;
    for (size_t i = 0; i < N_ROUTES; i++) {
        const char *arg = NULL;
        size_t arg_len = 0;
        if (!match_path(routes[i].path, path, &arg, &arg_len))
            continue;
        if (!strcmp(routes[i].method, method)) {
            *is_wrong_method = false;
            return i;
        }
        if (first == HTTP_ROUTE_NONE)
            first = i;
    }
    *is_wrong_method = first != HTTP_ROUTE_NONE;
    return first;
}
