/* The route table and the query-argument helpers every handler uses. */
#include "http.h"

#include <stdio.h>
#include <string.h>

#include "weft/io.h"

static const char *const model_params[] = { NULL };
static const char *const predict_params[] = { "source", "relation", "k", NULL };
static const char *const label_predict_params[] = { "node", NULL };
static const char *const label_explain_params[] = { "node", "k", NULL };

/* Which part of a snapshot a route answers from. */
enum route_needs { NEEDS_NOTHING, NEEDS_SNAPSHOT, NEEDS_LINKS, NEEDS_LABELS };

/* Every route the server answers. A path may appear once per method. params lists the query
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
    { "GET", "/v1/model", http_model_get, model_params, NEEDS_SNAPSHOT },
    { "GET", "/v1/links/predict", http_links_predict, predict_params, NEEDS_LINKS },
    { "GET", "/v1/labels/predict", http_labels_predict, label_predict_params, NEEDS_LABELS },
    { "GET", "/v1/labels/explain", http_labels_explain, label_explain_params, NEEDS_LABELS },
};
#define N_ROUTES (sizeof routes / sizeof routes[0])

static bool route_takes(const struct route *rt, const char *key)
{
    if (!strcmp(key, "pretty"))
        return true;
    for (const char *const *p = rt->params; *p; p++)
        if (!strcmp(*p, key))
            return true;
    return false;
}

struct param_scan {
    const struct route *rt;
    const char *unknown;    /* first parameter the route does not take */
};

static enum MHD_Result scan_param(void *cls, enum MHD_ValueKind kind, const char *key,
                                  const char *value)
{
    (void)kind;
    (void)value;
    struct param_scan *scan = cls;
    if (route_takes(scan->rt, key))
        return MHD_YES;
    scan->unknown = key;
    return MHD_NO;
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

/* "GET /healthz, GET /v1/model, ...": every route, for the hint of a 404. */
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
    struct param_scan scan = { rt, NULL };
    MHD_get_connection_values(rq->conn, MHD_GET_ARGUMENT_KIND, scan_param, &scan);
    if (!scan.unknown)
        return true;
    char hint[200];
    char taken[160];
    list_params(rt, taken, sizeof taken);
    snprintf(hint, sizeof hint, "%s %s takes: %s", rt->method, rt->path, taken);
    if (weft_io_utf8_valid(scan.unknown, strlen(scan.unknown)))
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
    size_t used = 0;
    out->allow[0] = '\0';
    for (size_t i = 0; i < N_ROUTES; i++) {
        if (strcmp(routes[i].path, path) != 0)
            continue;
        if (!strcmp(routes[i].method, method))
            found = &routes[i];
        if (used < sizeof out->allow)
            used += (size_t)snprintf(out->allow + used, sizeof out->allow - used, "%s%s",
                                     used ? ", " : "", routes[i].method);
    }
    if (!found && !used) {
        char hint[300];
        list_routes(hint, sizeof hint);
        out->allow[0] = '\0';
        http_error_reply(out, HTTP_FAULT_NOT_FOUND, hint, "no route %s %s", method, path);
        return;
    }
    if (!found) {
        http_error_reply(out, HTTP_FAULT_METHOD, NULL, "%s %s is not supported; use %s",
                         method, path, out->allow);
        return;
    }
    out->allow[0] = '\0';
    if (check_params(rq, found, out) && check_needs(rq, found, out))
        found->handler(rq, out);
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
