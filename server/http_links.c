/* GET and POST /v1/links/predict: the k best new targets of a source (direction out) or the
 * k best new sources of a target (direction in) under one relation, optionally only among the
 * nodes of one type. POST /v1/links/score: the model's score of given triples.
 * Every link model scores a candidate c as q . e_c for a query vector q of the anchor and the
 * relation (include/weft/model.h), so one scan over the entity rows ranks them all. */
#include "http.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/graph.h"
#include "weft/kernels.h"
#include "weft/model.h"
#include "weft/names.h"
#include "weft/topk.h"

static const char hint_node[] =
    "node names are case-sensitive and must match the training edge files exactly";
static const char hint_anchor[] =
    "give ?source=NAME for its best targets (direction=out), or ?target=NAME for its best "
    "sources (direction=in)";

/* ---- names, shared with http_explain.c and http_nodes.c ---- */

weft_err http_links_node(const http_request *rq, const char *what, const char *name,
                         size_t len, uint32_t *id, weft_error *err)
{
    const weft_link_view *v = &rq->model->links;
    if (!name)
        return weft_error_set(err, WEFT_ERR_INVALID, "'%s' is missing", what);
    if (len == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "'%s' is empty", what);
    if (!weft_names_find(&v->nodes, name, len, id))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "%s node '%s' is not in snapshot %llu",
                              what, name, (unsigned long long)rq->model->version);
    return WEFT_OK;
}

weft_err http_links_relation(const http_request *rq, const char *name, size_t len,
                             uint32_t *id, weft_error *err)
{
    const weft_link_view *v = &rq->model->links;
    if (!name) {
        if (v->n_relations != 1)
            return weft_error_set(err, WEFT_ERR_INVALID,
                                  "'relation' is needed: the model has %zu relations",
                                  v->n_relations);
        *id = 0;
        return WEFT_OK;
    }
    if (!weft_names_find(&v->relations, name, len, id))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "relation '%s' is not in snapshot %llu",
                              name, (unsigned long long)rq->model->version);
    return WEFT_OK;
}

void http_links_relation_hint(const weft_link_view *v, char *buf, size_t size)
{
    size_t used = (size_t)snprintf(buf, size, "this model's relations: ");
    for (uint32_t r = 0; r < v->n_relations && used < size; r++)
        used += (size_t)snprintf(buf + used, size - used, "%s%s", r ? ", " : "",
                                 weft_names_get(&v->relations, r, NULL));
    if (used >= size)
        snprintf(buf, size, "this model has %zu relations; name one", v->n_relations);
}

/* "this snapshot's node types: a, b" (or their count when they do not fit). */
static void type_hint(const http_model *m, char *buf, size_t size)
{
    if (!m->has_types) {
        snprintf(buf, size, "train with 'weft train --types FILE' (node<TAB>type) to store "
                            "node types");
        return;
    }
    size_t used = (size_t)snprintf(buf, size, "this snapshot's node types: ");
    for (uint32_t t = 0; t < m->types.n_types && used < size; t++)
        used += (size_t)snprintf(buf + used, size - used, "%s%s", t ? ", " : "",
                                 weft_names_get(&m->types.names, t, NULL));
    if (used >= size)
        snprintf(buf, size, "this snapshot has %zu node types", m->types.n_types);
}

weft_err http_links_type(const http_request *rq, const char *name, size_t len, uint32_t *id,
                         weft_error *err)
{
    const http_model *m = rq->model;
    if (len == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "'candidate_type' is empty");
    if (!m->has_types)
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "snapshot %llu stores no node types",
                              (unsigned long long)m->version);
    if (!weft_names_find(&m->types.names, name, len, id))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "node type '%s' is not in snapshot %llu",
                              name, (unsigned long long)m->version);
    return WEFT_OK;
}

/* ---- one query ---- */

/* A query as given, before names are looked up. */
struct query_text {
    const char *source, *target, *relation, *direction, *type;
    size_t source_len, target_len, relation_len, type_len;
    size_t k;                /* checked against the server's max_k */
    bool include_known;
    bool is_exact;           /* exact=true: scan every row even when the snapshot has an index */
};

/* A query with its names resolved. */
struct predict_query {
    bool is_in;              /* rank sources of (?, relation, anchor); else targets */
    uint32_t anchor;         /* the source (out) or the target (in) */
    uint32_t relation;
    size_t k;
    bool has_type;
    uint32_t type;           /* only candidates of this type */
    bool include_known;      /* keep links already in the known graph */
    bool is_exact;           /* scan every row, not the snapshot's index */
};

/* Resolve @p t; on failure @p hint says what to do. */
static weft_err resolve(const http_request *rq, const struct query_text *t,
                        struct predict_query *q, char *hint, size_t hint_size, weft_error *err)
{
    const weft_link_view *v = &rq->model->links;
    weft_err rc;
    memset(q, 0, sizeof *q);
    q->k = t->k;
    q->include_known = t->include_known;
    q->is_exact = t->is_exact;
    if (t->direction && strcmp(t->direction, "in") != 0 && strcmp(t->direction, "out") != 0) {
        snprintf(hint, hint_size, "direction is out (the default with source) or in");
        return weft_error_set(err, WEFT_ERR_INVALID, "direction must be out or in, not '%s'",
                              t->direction);
    }
    /* Without a direction, the node given says which: a source ranks targets. */
    q->is_in = t->direction ? !strcmp(t->direction, "in") : (!t->source && t->target);
    const char *name = q->is_in ? t->target : t->source;
    size_t len = q->is_in ? t->target_len : t->source_len;
    const char *other = q->is_in ? t->source : t->target;
    snprintf(hint, hint_size, "%s", hint_anchor);
    if (other)
        return weft_error_set(err, WEFT_ERR_INVALID,
                              "direction=%s takes '%s', not '%s' (the candidates are ranked)",
                              q->is_in ? "in" : "out", q->is_in ? "target" : "source",
                              q->is_in ? "source" : "target");
    if ((rc = http_links_node(rq, q->is_in ? "target" : "source", name, len, &q->anchor,
                              err)) != WEFT_OK) {
        if (rc == WEFT_ERR_NOT_FOUND)
            snprintf(hint, hint_size, "%s", hint_node);
        return rc;
    }
    if ((rc = http_links_relation(rq, t->relation, t->relation_len, &q->relation, err)) !=
        WEFT_OK) {
        http_links_relation_hint(v, hint, hint_size);
        return rc;
    }
    if (t->type) {
        if ((rc = http_links_type(rq, t->type, t->type_len, &q->type, err)) != WEFT_OK) {
            type_hint(rq->model, hint, hint_size);
            return rc;
        }
        q->has_type = true;
    }
    return WEFT_OK;
}

/* Buffers of one request: k ids and scores, and the query vector. */
struct workspace {
    size_t k;
    uint32_t *id;
    float *score;
    float *query;
};

static weft_err workspace_init(struct workspace *w, size_t k, size_t dim, weft_error *err)
{
    w->k = k;
    w->id = weft_alloc_array(k, sizeof *w->id);
    w->score = weft_alloc_array(k, sizeof *w->score);
    w->query = weft_alloc_array(dim, sizeof *w->query);
    if (!w->id || !w->score || !w->query)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for %zu predictions", k);
    return WEFT_OK;
}

static void workspace_fini(struct workspace *w)
{
    free(w->id);
    free(w->score);
    free(w->query);
}

static bool is_in_sorted(const uint32_t *a, size_t n, uint32_t x)
{
    size_t lo = 0, hi = n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (a[mid] < x)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo < n && a[lo] == x;
}

/* weft_topk_scan limited to the nodes of one type: only their rows are scored, each with
 * weft_kernel_dot, which is the score weft_topk_scan gives a row (include/weft/topk.h), so a
 * typed list is exactly the untyped one with the other types left out. */
static size_t scan_typed(const weft_link_view *v, const uint32_t *of_node, uint32_t type,
                         const float *q, size_t k, const weft_topk_exclude *ex, uint32_t *id,
                         float *score)
{
    weft_topk t;
    weft_topk_init(&t, k, id, score);
    size_t d = v->dim;
    for (size_t c = 0; c < v->n_nodes; c++) {
        if (of_node[c] != type)
            continue;
        float s = weft_kernel_dot(v->entity + c * d, q, d);
        if (!weft_topk_would_enter(&t, (uint32_t)c, s))
            continue;
        if ((ex->has_self && ex->self == c) || is_in_sorted(ex->sorted, ex->n_sorted, (uint32_t)c))
            continue;
        weft_topk_push(&t, (uint32_t)c, s);
    }
    return weft_topk_finish(&t);
}

/* The best q->k candidates into w, best first; *n how many. Known links (in the query's
 * direction) are left out unless asked for, and so is the anchor itself unless the known
 * graph holds self-loops. */
/* What a scan for @p q leaves out. */
static weft_topk_exclude exclusion(const weft_link_view *v, const struct predict_query *q)
{
    uint64_t first = 0;
    size_t n_known = 0;
    const weft_csr *known = q->is_in ? &v->known_in : &v->known_out;
    if (!q->include_known)
        weft_csr_range(known, q->anchor, q->relation, &first, &n_known);
    return (weft_topk_exclude){
        .sorted = n_known ? known->nbr + first : NULL,
        .n_sorted = n_known,
        .has_self = !v->has_self_loops,
        .self = q->anchor,
    };
}

static weft_err check_kind(const weft_link_view *v, weft_error *err)
{
    if (!weft_model_kind_name(v->kind))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "link model kind %d is not served",
                              (int)v->kind);
    return WEFT_OK;
}

/* True when @p q is answered through the snapshot's index (include/weft/link_index.h). */
static bool uses_index(const http_model *m, const struct predict_query *q)
{
    return m->index.kind != WEFT_LINK_INDEX_EXACT && !q->is_exact;
}

/* The path that answers @p q, as responses name it. */
static const char *path_name(const http_model *m, const struct predict_query *q)
{
    return weft_link_index_kind_name(uses_index(m, q) ? m->index.kind : WEFT_LINK_INDEX_EXACT);
}

static weft_err rank(const http_model *m, const struct predict_query *q, struct workspace *w,
                     size_t *n, weft_error *err)
{
    const weft_link_view *v = &m->links;
    if (check_kind(v, err) != WEFT_OK)
        return err->code;
    weft_model_query(&v->model, q->anchor, q->relation, q->is_in, w->query);
    weft_topk_exclude ex = exclusion(v, q);
    if (uses_index(m, q)) {   /* the same filters; the index picks the candidates */
        weft_index_filter f = { .ex = &ex, .type_of = q->has_type ? m->types.of_node : NULL,
                                .type = q->type };
        const weft_link_index_view *ix = &m->index;
        if (weft_link_index_is_clustered(ix->kind))
            return http_scan_ivf(&ix->ivf, v->entity, ix->nprobe, ix->oversample, w->query,
                                 q->k, &f, w->id, w->score, n, err);
        return http_scan_int8(&ix->codes, v->entity, ix->oversample, w->query, q->k, &f,
                              w->id, w->score, n, err);
    }
    if (q->has_type)
        *n = scan_typed(v, m->types.of_node, q->type, w->query, q->k, &ex, w->id, w->score);
    else
        *n = http_scan_topk(v->entity, v->n_nodes, v->dim, w->query, q->k, &ex, w->id,
                            w->score);
    return WEFT_OK;
}

/* A JSON score: null when not finite (a broken model; JSON has no such numbers). */
static json_t *score_json(float score)
{
    return isfinite(score) ? json_real(score) : json_null();
}

static json_t *name_json(const weft_names_view *names, uint32_t id)
{
    size_t len = 0;
    const char *name = weft_names_get(names, id, &len);
    return json_stringn(name, len);
}

/* One {"target" or "source", "score", "probability"} entry. */
static json_t *prediction_json(const weft_link_view *v, const char *key, uint32_t node,
                               float score)
{
    json_t *p = json_object();
    bool bad = !p;
    bad |= json_object_set_new(p, key, name_json(&v->nodes, node)) != 0;
    bad |= json_object_set_new(p, "score", score_json(score)) != 0;
    if (v->is_probability)
        bad |= json_object_set_new(p, "probability",
                                   isfinite(score) ? json_real(weft_model_sigmoid(score))
                                                   : json_null()) != 0;
    if (bad) {
        json_decref(p);
        return NULL;
    }
    return p;
}

/* The answer to one query: what was asked, then the predictions. */
static json_t *answer_json(const http_model *m, const struct predict_query *q,
                           const struct workspace *w, size_t n)
{
    const weft_link_view *v = &m->links;
    json_t *body = json_object();
    json_t *list = json_array();
    bool bad = !body || !list;
    for (size_t i = 0; !bad && i < n; i++)
        bad = json_array_append_new(list, prediction_json(v, q->is_in ? "source" : "target",
                                                          w->id[i], w->score[i])) != 0;
    bad |= json_object_set_new(body, q->is_in ? "target" : "source",
                               name_json(&v->nodes, q->anchor)) != 0;
    bad |= json_object_set_new(body, "relation", name_json(&v->relations, q->relation)) != 0;
    bad |= json_object_set_new(body, "direction", json_string(q->is_in ? "in" : "out")) != 0;
    bad |= json_object_set_new(body, "k", json_integer((json_int_t)q->k)) != 0;
    bad |= json_object_set_new(body, "candidate_type",
                               q->has_type ? name_json(&m->types.names, q->type)
                                           : json_null()) != 0;
    bad |= json_object_set_new(body, "include_known", json_boolean(q->include_known)) != 0;
    bad |= json_object_set_new(body, "path", json_string(path_name(m, q))) != 0;
    bad |= json_object_set_new(body, "predictions", list) != 0;   /* takes list */
    if (bad) {
        json_decref(body);
        return NULL;
    }
    return body;
}

/* ---- GET /v1/links/predict ---- */

/* ?name=true|false|1|0; @p fallback when absent. */
static weft_err arg_bool(const http_request *rq, const char *key, bool fallback, bool *out,
                         weft_error *err)
{
    const char *v = NULL;
    weft_err rc = http_route_arg(rq, key, &v, NULL, err);
    if (rc != WEFT_OK)
        return rc;
    if (!v) {
        *out = fallback;
        return WEFT_OK;
    }
    if (!strcmp(v, "true") || !strcmp(v, "1") || !v[0]) {
        *out = true;
        return WEFT_OK;
    }
    if (!strcmp(v, "false") || !strcmp(v, "0")) {
        *out = false;
        return WEFT_OK;
    }
    return weft_error_set(err, WEFT_ERR_INVALID, "%s must be true or false, not '%s'", key, v);
}

/* Read the query parameters into @p t; on failure @p hint says what to do. */
static weft_err read_args(const http_request *rq, struct query_text *t, char *hint,
                          size_t hint_size, weft_error *err)
{
    weft_err rc;
    memset(t, 0, sizeof *t);
    snprintf(hint, hint_size, "%s", "the message names the parameter at fault");
    if ((rc = http_route_arg(rq, "source", &t->source, &t->source_len, err)) ||
        (rc = http_route_arg(rq, "target", &t->target, &t->target_len, err)) ||
        (rc = http_route_arg(rq, "relation", &t->relation, &t->relation_len, err)) ||
        (rc = http_route_arg(rq, "direction", &t->direction, NULL, err)) ||
        (rc = http_route_arg(rq, "candidate_type", &t->type, &t->type_len, err)))
        return rc;
    if ((rc = arg_bool(rq, "exact", false, &t->is_exact, err)) != WEFT_OK) {
        snprintf(hint, hint_size, "exact=true scans every row even when the snapshot has an "
                                  "index (default false)");
        return rc;
    }
    if ((rc = arg_bool(rq, "include_known", false, &t->include_known, err)) != WEFT_OK) {
        snprintf(hint, hint_size, "include_known=true keeps links already in the known graph "
                                  "among the candidates (default false)");
        return rc;
    }
    rc = http_route_arg_count(rq, "k", HTTP_DEFAULT_K, rq->settings->max_k, &t->k, err);
    if (rc != WEFT_OK)
        snprintf(hint, hint_size, "k is how many predictions to return: 1 to %zu, default %d",
                 rq->settings->max_k, HTTP_DEFAULT_K);
    if (rc == WEFT_OK && !t->source && !t->target) {
        snprintf(hint, hint_size, "%s", hint_anchor);
        rc = weft_error_set(err, WEFT_ERR_INVALID,
                            "the query parameter 'source' (or 'target' with direction=in) is "
                            "missing");
    }
    return rc;
}

void http_links_predict(const http_request *rq, http_reply *out)
{
    const http_model *m = rq->model;   /* the route needs links (http_route.c) */
    struct query_text t;
    struct predict_query q;
    struct workspace w = { 0 };
    weft_error err;
    weft_error_clear(&err);
    char hint[256];
    size_t n = 0;
    if (read_args(rq, &t, hint, sizeof hint, &err) != WEFT_OK ||
        resolve(rq, &t, &q, hint, sizeof hint, &err) != WEFT_OK) {
        http_error_from(out, &err, hint);
        return;
    }
    if (workspace_init(&w, q.k, m->links.dim, &err) == WEFT_OK)
        rank(m, &q, &w, &n, &err);
    if (err.code == WEFT_OK) {
        out->status = MHD_HTTP_OK;
        out->body = answer_json(m, &q, &w, n);
    } else {
        http_error_from(out, &err, NULL);
    }
    workspace_fini(&w);
}

/* ---- the batch routes' common parts ---- */

/* The array @p key of @p body, holding 1 to max_batch items; else @p out is filled (422, or
 * 413 past the limit). */
static const json_t *batch_items(const http_request *rq, const json_t *body, const char *key,
                                 http_reply *out)
{
    const json_t *items = json_object_get(body, key);
    char hint[200];
    if (!json_is_array(items) || json_array_size(items) == 0) {
        snprintf(hint, sizeof hint, "send {\"%s\": [...]} with 1 to %zu items", key,
                 rq->settings->max_batch);
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, hint,
                         "'%s' must be a non-empty array", key);
        return NULL;
    }
    if (json_array_size(items) > rq->settings->max_batch) {
        snprintf(hint, sizeof hint,
                 "this server takes at most %zu items per call (weft serve --max-batch): "
                 "split the batch", rq->settings->max_batch);
        http_error_reply(out, HTTP_FAULT_TOO_LARGE, hint, "'%s' holds %zu items", key,
                         json_array_size(items));
        return NULL;
    }
    return items;
}

/* An item's optional string field @p key into *@p s / *@p len; false (and 422 in @p out)
 * when present but not a string. */
static bool item_string(const json_t *item, const char *key, const char *where,
                        const char **s, size_t *len, http_reply *out)
{
    const json_t *v = json_object_get(item, key);
    *s = NULL;
    if (len)
        *len = 0;
    if (!v || json_is_null(v))
        return true;
    if (!json_is_string(v)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "%s.%s must be a string", where,
                         key);
        return false;
    }
    *s = json_string_value(v);
    if (len)
        *len = json_string_length(v);
    if (strlen(*s) != json_string_length(v)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "%s.%s contains a NUL character",
                         where, key);
        return false;
    }
    return true;
}

/* {"error": {...}, "status": N}: the error this item would have had on its own. */
static json_t *item_error_json(const weft_error *err, const char *hint)
{
    http_reply r = { 0 };
    http_error_from(&r, err, hint);
    if (r.body && json_object_set_new(r.body, "status", json_integer((json_int_t)r.status))) {
        json_decref(r.body);
        return NULL;
    }
    return r.body;
}

/* Answer @p out with {"key": results}, or 500 when any item could not be built. */
static void batch_reply(http_reply *out, const char *key, json_t *results)
{
    json_t *body = results ? json_object() : NULL;
    if (!body || json_object_set_new(body, key, results)) {
        json_decref(body);
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory building the answer");
        return;
    }
    out->status = MHD_HTTP_OK;
    out->body = body;
}

/* ---- POST /v1/links/predict ---- */

static const char *const query_keys[] = { "source", "target", "relation", "k", "direction",
                                          "candidate_type", "include_known", "exact", NULL };

/* Check the shape of queries[i] and read it into @p t (422 in @p out when wrong). */
static bool read_item(const http_request *rq, const json_t *item, size_t i,
                      struct query_text *t, http_reply *out)
{
    char where[48];
    snprintf(where, sizeof where, "queries[%zu]", i);
    memset(t, 0, sizeof *t);
    if (!json_is_object(item)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "%s must be an object", where);
        return false;
    }
    if (!http_route_known_keys(item, query_keys, where, out) ||
        !item_string(item, "source", where, &t->source, &t->source_len, out) ||
        !item_string(item, "target", where, &t->target, &t->target_len, out) ||
        !item_string(item, "relation", where, &t->relation, &t->relation_len, out) ||
        !item_string(item, "direction", where, &t->direction, NULL, out) ||
        !item_string(item, "candidate_type", where, &t->type, &t->type_len, out))
        return false;
    if (t->direction && strcmp(t->direction, "in") != 0 && strcmp(t->direction, "out") != 0) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL,
                         "%s.direction must be out or in, not '%.40s'", where, t->direction);
        return false;
    }
    if (!t->source && !t->target) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, hint_anchor,
                         "%s needs 'source' (or 'target' with direction in)", where);
        return false;
    }
    const json_t *k = json_object_get(item, "k");
    size_t max_k = rq->settings->max_k;
    t->k = HTTP_DEFAULT_K < max_k ? HTTP_DEFAULT_K : max_k;
    if (k && !json_is_null(k)) {
        if (!json_is_integer(k) || json_integer_value(k) < 1 ||
            (uint64_t)json_integer_value(k) > max_k) {
            char hint[120];
            snprintf(hint, sizeof hint, "k is how many predictions to return: 1 to %zu, "
                                        "default %d", max_k, HTTP_DEFAULT_K);
            http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, hint,
                             "%s.k must be a whole number from 1 to %zu", where, max_k);
            return false;
        }
        t->k = (size_t)json_integer_value(k);
    }
    const json_t *known = json_object_get(item, "include_known");
    if (known && !json_is_null(known) && !json_is_boolean(known)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL,
                         "%s.include_known must be true or false", where);
        return false;
    }
    t->include_known = json_is_true(known);
    const json_t *exact = json_object_get(item, "exact");
    if (exact && !json_is_null(exact) && !json_is_boolean(exact)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "%s.exact must be true or false",
                         where);
        return false;
    }
    t->is_exact = json_is_true(exact);
    return true;
}

/* Queries scanned together by weft_topk_scan_batch, which reads each block of the matrix
 * once for all of them; its lists equal those of one weft_topk_scan per query. */
#define BATCH_CHUNK 64

/* One query of the batch on its way: resolved (or failed), then answered. */
struct batch_item {
    struct predict_query q;
    json_t *answer;          /* the answer or the item's error; NULL while pending */
};

/* True when @p q is ranked on its own (rank()) rather than in a chunk: limited to a type, or
 * answered through the snapshot's index. */
static bool is_alone(const http_model *m, const struct predict_query *q)
{
    return q->has_type || uses_index(m, q);
}

/* Whether @p q goes into a chunk of rank_chunks(@p via_int8). */
static bool in_chunk(const http_model *m, const struct predict_query *q, bool via_int8)
{
    return via_int8 ? m->index.kind == WEFT_LINK_INDEX_INT8 && uses_index(m, q)
                    : !is_alone(m, q);
}

/* Answer the resolved queries among @p items[0..n) that in_chunk() selects in chunks of
 * BATCH_CHUNK, the query vectors of a chunk stacked and answered by one pass: with
 * @p via_int8, the queries answered through the snapshot's int8 index, one pass over its
 * codes (weft_index_int8_search_many, filters included); else those neither limited to a
 * type nor answered through an index, one pass over the matrix (weft_topk_scan_batch, each
 * list then cut to its own k: a list's first k entries are the list of k). Either way each
 * query gets the list of a search of its own. */
static weft_err rank_chunks(const http_model *m, struct batch_item *items, size_t n,
                            bool via_int8, weft_error *err)
{
    const weft_link_view *v = &m->links;
    size_t pending[BATCH_CHUNK], max_k = 1;
    for (size_t i = 0; i < n; i++)
        if (!items[i].answer && in_chunk(m, &items[i].q, via_int8) && items[i].q.k > max_k)
            max_k = items[i].q.k;
    float *q = weft_alloc_array(BATCH_CHUNK, v->dim * sizeof *q);
    uint32_t *id = weft_alloc_array(BATCH_CHUNK, max_k * sizeof *id);
    float *score = weft_alloc_array(BATCH_CHUNK, max_k * sizeof *score);
    weft_topk_exclude ex[BATCH_CHUNK];
    weft_index_filter f[BATCH_CHUNK];
    weft_index_query qs[BATCH_CHUNK];
    size_t count[BATCH_CHUNK];
    weft_err rc = q && id && score ? check_kind(v, err)
                                   : weft_error_set(err, WEFT_ERR_NOMEM,
                                                    "no memory for a batch of predictions");
    for (size_t i = 0; rc == WEFT_OK && i < n;) {
        size_t m_chunk = 0;
        for (; i < n && m_chunk < BATCH_CHUNK; i++) {
            const struct batch_item *it = &items[i];
            if (it->answer || !in_chunk(m, &it->q, via_int8))
                continue;
            size_t j = m_chunk++;
            weft_model_query(&v->model, it->q.anchor, it->q.relation, it->q.is_in,
                             q + j * v->dim);
            ex[j] = exclusion(v, &it->q);
            f[j] = (weft_index_filter){ .ex = &ex[j],
                                        .type_of = it->q.has_type ? m->types.of_node : NULL,
                                        .type = it->q.type };
            qs[j] = (weft_index_query){ .q = q + j * v->dim, .k = it->q.k, .f = &f[j],
                                        .id = id + j * max_k, .score = score + j * max_k };
            pending[j] = i;
        }
        if (m_chunk == 0)
            break;
        if (via_int8) {
            rc = weft_index_int8_search_many(&m->index.codes, v->entity, m->index.oversample,
                                             qs, m_chunk, err);
            for (size_t j = 0; j < m_chunk; j++)
                count[j] = qs[j].n_out;
        } else {
            weft_topk_scan_batch(v->entity, v->n_nodes, v->dim, q, m_chunk, max_k, ex, id,
                                 score, count);
        }
        for (size_t j = 0; rc == WEFT_OK && j < m_chunk; j++) {
            struct batch_item *it = &items[pending[j]];
            struct workspace w = { max_k, id + j * max_k, score + j * max_k, NULL };
            size_t got = count[j] < it->q.k ? count[j] : it->q.k;
            if (!(it->answer = answer_json(m, &it->q, &w, got)))
                rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory building the answer");
        }
    }
    free(q);
    free(id);
    free(score);
    return rc;
}

/* Every query is checked for shape first; then each is resolved (a name the snapshot does
 * not know answers in its place), the queries answered through an int8 index are ranked in
 * chunks over its codes and the plain exact ones in chunks over the matrix (rank_chunks),
 * the rest (exact queries limited to a type, queries through an ivf index) one by one;
 * answers come back in the order asked. */
void http_links_predict_batch(const http_request *rq, http_reply *out)
{
    const http_model *m = rq->model;
    json_t *body = http_route_body(rq, out);
    if (!body)
        return;
    static const char *const keys[] = { "queries", NULL };
    const json_t *list = http_route_known_keys(body, keys, "the body", out)
                             ? batch_items(rq, body, "queries", out)
                             : NULL;
    size_t n_items = list ? json_array_size(list) : 0;
    struct query_text *texts = list ? weft_calloc_array(n_items, sizeof *texts) : NULL;
    struct batch_item *items = list ? weft_calloc_array(n_items, sizeof *items) : NULL;
    bool ok = texts && items;
    if (list && !ok)
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory for %zu queries",
                         n_items);
    size_t max_typed_k = 1;
    for (size_t i = 0; ok && i < n_items; i++)   /* the whole body first: shape errors */
        ok = read_item(rq, json_array_get(list, i), i, &texts[i], out);
    weft_error err;
    weft_error_clear(&err);
    for (size_t i = 0; ok && i < n_items; i++) {
        char hint[256];
        weft_error_clear(&err);
        if (resolve(rq, &texts[i], &items[i].q, hint, sizeof hint, &err) != WEFT_OK &&
            !(items[i].answer = item_error_json(&err, hint))) {
            http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory");
            ok = false;
        }
        if (!items[i].answer && is_alone(m, &items[i].q) && items[i].q.k > max_typed_k)
            max_typed_k = items[i].q.k;
    }
    struct workspace w = { 0 };
    weft_error_clear(&err);
    if (ok && (workspace_init(&w, max_typed_k, m->links.dim, &err) != WEFT_OK ||
               rank_chunks(m, items, n_items, false, &err) != WEFT_OK ||
               rank_chunks(m, items, n_items, true, &err) != WEFT_OK)) {
        http_error_from(out, &err, NULL);
        ok = false;
    }
    for (size_t i = 0; ok && i < n_items; i++) {
        size_t n = 0;
        if (items[i].answer)
            continue;
        if (rank(m, &items[i].q, &w, &n, &err) != WEFT_OK ||
            !(items[i].answer = answer_json(m, &items[i].q, &w, n))) {
            if (err.code == WEFT_OK)
                weft_error_set(&err, WEFT_ERR_NOMEM, "out of memory building the answer");
            http_error_from(out, &err, NULL);
            ok = false;
        }
    }
    json_t *results = ok ? json_array() : NULL;
    for (size_t i = 0; results && i < n_items; i++) {
        json_t *a = items[i].answer;
        items[i].answer = NULL;
        if (json_array_append_new(results, a)) {
            json_decref(results);
            results = NULL;
        }
    }
    if (ok)
        batch_reply(out, "results", results);
    for (size_t i = 0; items && i < n_items; i++)
        json_decref(items[i].answer);
    workspace_fini(&w);
    free(texts);
    free(items);
    json_decref(body);
}

/* ---- POST /v1/links/score ---- */

static const char *const triple_keys[] = { "source", "relation", "target", NULL };

struct triple_text {
    const char *source, *relation, *target;
    size_t source_len, relation_len, target_len;
};

static bool read_triple(const json_t *item, size_t i, struct triple_text *t, http_reply *out)
{
    char where[48];
    snprintf(where, sizeof where, "triples[%zu]", i);
    memset(t, 0, sizeof *t);
    if (!json_is_object(item)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "%s must be an object", where);
        return false;
    }
    if (!http_route_known_keys(item, triple_keys, where, out) ||
        !item_string(item, "source", where, &t->source, &t->source_len, out) ||
        !item_string(item, "relation", where, &t->relation, &t->relation_len, out) ||
        !item_string(item, "target", where, &t->target, &t->target_len, out))
        return false;
    if (!t->source || !t->target) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "%s needs 'source' and 'target'",
                         where);
        return false;
    }
    return true;
}

/* {"source", "relation", "target", "score", "probability"?, "known"} of one triple. */
static json_t *triple_json(const http_model *m, uint32_t s, uint32_t r, uint32_t t)
{
    const weft_link_view *v = &m->links;
    float score = weft_model_score(&v->model, s, r, t);
    json_t *j = json_object();
    bool bad = !j;
    bad |= json_object_set_new(j, "source", name_json(&v->nodes, s)) != 0;
    bad |= json_object_set_new(j, "relation", name_json(&v->relations, r)) != 0;
    bad |= json_object_set_new(j, "target", name_json(&v->nodes, t)) != 0;
    bad |= json_object_set_new(j, "score", score_json(score)) != 0;
    if (v->is_probability)
        bad |= json_object_set_new(j, "probability",
                                   isfinite(score) ? json_real(weft_model_sigmoid(score))
                                                   : json_null()) != 0;
    bad |= json_object_set_new(j, "known", json_boolean(weft_csr_has(&v->known_out, s, r, t)))
           != 0;
    if (bad) {
        json_decref(j);
        return NULL;
    }
    return j;
}

static json_t *score_one(const http_request *rq, const struct triple_text *t)
{
    uint32_t s = 0, r = 0, u = 0;
    weft_error err;
    weft_error_clear(&err);
    char hint[256];
    snprintf(hint, sizeof hint, "%s", hint_node);
    if (http_links_node(rq, "source", t->source, t->source_len, &s, &err) != WEFT_OK ||
        http_links_node(rq, "target", t->target, t->target_len, &u, &err) != WEFT_OK)
        return item_error_json(&err, hint);
    if (http_links_relation(rq, t->relation, t->relation_len, &r, &err) != WEFT_OK) {
        http_links_relation_hint(&rq->model->links, hint, sizeof hint);
        return item_error_json(&err, hint);
    }
    return triple_json(rq->model, s, r, u);
}

void http_links_score(const http_request *rq, http_reply *out)
{
    json_t *body = http_route_body(rq, out);
    if (!body)
        return;
    static const char *const keys[] = { "triples", NULL };
    const json_t *items = http_route_known_keys(body, keys, "the body", out)
                              ? batch_items(rq, body, "triples", out)
                              : NULL;
    size_t n_items = items ? json_array_size(items) : 0;
    struct triple_text *texts = items ? weft_calloc_array(n_items, sizeof *texts) : NULL;
    bool ok = texts != NULL;
    if (items && !texts)
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory for %zu triples",
                         n_items);
    for (size_t i = 0; ok && i < n_items; i++)
        ok = read_triple(json_array_get(items, i), i, &texts[i], out);
    json_t *results = ok ? json_array() : NULL;
    for (size_t i = 0; results && i < n_items; i++)
        if (json_array_append_new(results, score_one(rq, &texts[i]))) {
            json_decref(results);
            results = NULL;
        }
    if (ok)
        batch_reply(out, "scores", results);
    free(texts);
    json_decref(body);
}
