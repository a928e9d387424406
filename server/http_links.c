/* GET /v1/links/predict: the k best new targets for a source node under one relation. */
#include "http.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "weft/alloc.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/names.h"
#include "weft/topk.h"

static const char hint_node[] =
    "node names are case-sensitive and must match the training edge files exactly";
static const char hint_source[] = "give the source node as ?source=NAME";

/* One parsed and resolved query. */
struct predict_query {
    uint32_t source;
    uint32_t relation;
    size_t k;
};

/* "this model's relations: a, b, c" (or only their count when they do not fit). */
static void relation_hint(const weft_link_view *v, char *buf, size_t size)
{
    size_t used = (size_t)snprintf(buf, size, "this model's relations: ");
    for (uint32_t r = 0; r < v->n_relations && used < size; r++)
        used += (size_t)snprintf(buf + used, size - used, "%s%s", r ? ", " : "",
                                 weft_names_get(&v->relations, r, NULL));
    if (used >= size)
        snprintf(buf, size, "this model has %zu relations; give one as ?relation=NAME",
                 v->n_relations);
}

static weft_err resolve_source(const http_request *rq, const weft_link_view *v, uint32_t *id,
                               weft_error *err)
{
    const char *name = NULL;
    size_t len = 0;
    weft_err rc = http_route_arg(rq, "source", &name, &len, err);
    if (rc != WEFT_OK)
        return rc;
    if (!name || len == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "the query parameter 'source' is missing");
    if (!weft_names_find(&v->nodes, name, len, id))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "node '%s' is not in snapshot %llu",
                              name, (unsigned long long)rq->model->version);
    return WEFT_OK;
}

/* The relation may be left out when the model has exactly one. */
static weft_err resolve_relation(const http_request *rq, const weft_link_view *v, uint32_t *id,
                                 weft_error *err)
{
    const char *name = NULL;
    size_t len = 0;
    weft_err rc = http_route_arg(rq, "relation", &name, &len, err);
    if (rc != WEFT_OK)
        return rc;
    if (!name) {
        if (v->n_relations != 1)
            return weft_error_set(err, WEFT_ERR_INVALID,
                                  "the query parameter 'relation' is needed: the model has "
                                  "%zu relations", v->n_relations);
        *id = 0;
        return WEFT_OK;
    }
    if (!weft_names_find(&v->relations, name, len, id))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "relation '%s' is not in snapshot %llu",
                              name, (unsigned long long)rq->model->version);
    return WEFT_OK;
}

/* One {"target", "score", "probability"} entry. A non-finite score (a broken model; top-k
 * never admits NaN, but +-Inf can pass) is null, since JSON has no such numbers. */
static json_t *prediction_json(const weft_link_view *v, uint32_t target, float score)
{
    size_t len = 0;
    const char *name = weft_names_get(&v->nodes, target, &len);
    json_t *p = json_object();
    bool is_finite = isfinite(score);
    bool bad = !p;
    bad |= json_object_set_new(p, "target", json_stringn(name, len)) != 0;
    bad |= json_object_set_new(p, "score", is_finite ? json_real(score) : json_null()) != 0;
    if (v->is_probability)
        bad |= json_object_set_new(p, "probability", is_finite ? json_real(weft_model_sigmoid(score))
                                                               : json_null()) != 0;
    if (bad) {
        json_decref(p);
        return NULL;
    }
    return p;
}

static json_t *predictions_json(const weft_link_view *v, const uint32_t *id, const float *score,
                                size_t n)
{
    json_t *list = json_array();
    for (size_t i = 0; list && i < n; i++) {
        if (json_array_append_new(list, prediction_json(v, id[i], score[i])) != 0) {
            json_decref(list);
            list = NULL;
        }
    }
    return list;
}

/* Best q.k targets of q.source, leaving out links already known and, unless the graph has
 * self-loops, the source itself. Every link model scores a target t as query . e_t
 * (include/weft/model.h); @p query (dim) is the workspace for the query vector. */
static weft_err score_targets(const weft_link_view *v, const struct predict_query *q,
                              float *query, uint32_t *id, float *score, size_t *n,
                              weft_error *err)
{
    if (!weft_model_kind_name(v->kind))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "link model kind %d is not served",
                              (int)v->kind);
    weft_model_query(&v->model, q->source, q->relation, false, query);
    uint64_t first = 0;
    size_t n_known = 0;
    weft_csr_range(&v->known_out, q->source, q->relation, &first, &n_known);
    weft_topk_exclude ex = {
        .sorted = n_known ? v->known_out.nbr + first : NULL,
        .n_sorted = n_known,
        .has_self = !v->has_self_loops,
        .self = q->source,
    };
    *n = weft_topk_scan(v->entity, v->n_nodes, v->dim, query, q->k, &ex, id, score);
    return WEFT_OK;
}

static json_t *response_json(const weft_link_view *v, const struct predict_query *q,
                             const uint32_t *id, const float *score, size_t n)
{
    size_t src_len = 0, rel_len = 0;
    const char *src = weft_names_get(&v->nodes, q->source, &src_len);
    const char *rel = weft_names_get(&v->relations, q->relation, &rel_len);
    json_t *body = json_object();
    bool bad = !body;
    bad |= json_object_set_new(body, "source", json_stringn(src, src_len)) != 0;
    bad |= json_object_set_new(body, "relation", json_stringn(rel, rel_len)) != 0;
    bad |= json_object_set_new(body, "direction", json_string("out")) != 0;
    bad |= json_object_set_new(body, "k", json_integer((json_int_t)q->k)) != 0;
    bad |= json_object_set_new(body, "predictions", predictions_json(v, id, score, n)) != 0;
    if (bad) {
        json_decref(body);
        return NULL;
    }
    return body;
}

void http_links_predict(const http_request *rq, http_reply *out)
{
    const weft_link_view *v = &rq->model->links;   /* the route needs links (http_route.c) */
    struct predict_query q = { 0 };
    weft_error err;
    weft_error_clear(&err);
    char hint[256];
    if (resolve_source(rq, v, &q.source, &err) != WEFT_OK) {
        http_error_from(out, &err, err.code == WEFT_ERR_NOT_FOUND ? hint_node : hint_source);
        return;
    }
    if (resolve_relation(rq, v, &q.relation, &err) != WEFT_OK) {
        relation_hint(v, hint, sizeof hint);
        http_error_from(out, &err, hint);
        return;
    }
    if (http_route_arg_count(rq, "k", HTTP_DEFAULT_K, rq->settings->max_k, &q.k, &err)
        != WEFT_OK) {
        snprintf(hint, sizeof hint, "k is how many predictions to return: 1 to %zu, default %d",
                 rq->settings->max_k, HTTP_DEFAULT_K);
        http_error_from(out, &err, hint);
        return;
    }
    uint32_t *id = weft_alloc_array(q.k, sizeof *id);
    float *score = weft_alloc_array(q.k, sizeof *score);
    float *query = weft_alloc_array(v->dim, sizeof *query);
    size_t n = 0;
    if (!id || !score || !query)
        weft_error_set(&err, WEFT_ERR_NOMEM, "no memory for %zu predictions", q.k);
    else
        score_targets(v, &q, query, id, score, &n, &err);
    if (err.code == WEFT_OK) {
        out->status = MHD_HTTP_OK;
        out->body = response_json(v, &q, id, score, n);
    } else {
        http_error_from(out, &err, NULL);
    }
    free(id);
    free(score);
    free(query);
}
