/* GET /v1/labels/predict: a node's class probabilities from the label model (a GCN), with
 * the label the training input gave it, if any.
 * GET /v1/labels/explain: the exact split of the node's class logits over the terms of the
 * last mixing step, logit_v = sum over the row of A' of A'_vu * message_u + bias
 * (weft_gcn_attribute), the neighbours that pushed the predicted class most listed first.
 * Both read only the label view's arrays: no LMDB, no allocation beyond the row at hand. */
#include "http.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "weft/alloc.h"
#include "weft/labels.h"
#include "weft/model_gcn.h"
#include "weft/names.h"

/* Sent with every prediction and explanation (and GET /v1/map, which shows labels too). */
const char http_labels_caution[] =
    "Probabilistic output of a model trained on past labels: it can be wrong and can encode "
    "bias in those labels. Have a person review it before acting on it; local law and "
    "data-protection rules decide what it may be used for.";

static const char hint_node[] =
    "node names are case-sensitive and must match the training edge files exactly";
static const char hint_missing[] = "give the node as ?node=NAME";

static weft_err resolve_node(const http_request *rq, const weft_label_view *v, uint32_t *id,
                             weft_error *err)
{
    const char *name = NULL;
    size_t len = 0;
    weft_err rc = http_route_arg(rq, "node", &name, &len, err);
    if (rc != WEFT_OK)
        return rc;
    if (!name || len == 0)
        return weft_error_set(err, WEFT_ERR_INVALID, "the query parameter 'node' is missing");
    if (!weft_names_find(&v->nodes, name, len, id))
        return weft_error_set(err, WEFT_ERR_NOT_FOUND, "node '%s' is not in snapshot %llu",
                              name, (unsigned long long)rq->model->version);
    return WEFT_OK;
}

/* The node of ?node=; false after filling @p out with the error. The route needs labels
 * (http_route.c), so rq->model->labels is there. */
static bool request_node(const http_request *rq, http_reply *out, uint32_t *node)
{
    weft_error err;
    weft_error_clear(&err);
    if (resolve_node(rq, &rq->model->labels, node, &err) == WEFT_OK)
        return true;
    http_error_from(out, &err, err.code == WEFT_ERR_NOT_FOUND ? hint_node : hint_missing);
    return false;
}

uint32_t http_labels_predicted_class(const weft_label_view *v, uint32_t node)
{
    const float *p = v->prob + (size_t)node * v->n_classes;
    uint32_t best = 0;
    for (uint32_t c = 1; c < v->n_classes; c++)
        if (p[c] > p[best])
            best = c;
    return best;
}

static json_t *node_json(const weft_label_view *v, uint32_t node)
{
    size_t len = 0;
    const char *name = weft_names_get(&v->nodes, node, &len);
    return json_stringn(name, len);
}

static json_t *class_json(const weft_label_view *v, uint32_t c)
{
    size_t len = 0;
    const char *name = weft_names_get(&v->classes, c, &len);
    return json_stringn(name, len);
}

/* A JSON number, or null for what JSON cannot hold (the view's values are all finite; a sum
 * of them could still overflow). */
static json_t *number_json(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

/* {class: x[c]} over every class, in class order. */
static json_t *per_class_json(const weft_label_view *v, const float *x)
{
    json_t *o = json_object();
    for (uint32_t c = 0; o && c < v->n_classes; c++)
        if (json_object_set_new(o, weft_names_get(&v->classes, c, NULL), number_json(x[c]))) {
            json_decref(o);
            o = NULL;
        }
    return o;
}

/* A new body with the members every label response starts with: "node", "predicted". */
static json_t *body_json(const weft_label_view *v, uint32_t node, uint32_t predicted)
{
    return json_pack("{s:o, s:o}", "node", node_json(v, node), "predicted",
                     class_json(v, predicted));
}

/* Add the members every label response ends with, "snapshot" and "caution", to @p body;
 * returns @p body, or NULL (and @p body is released) when that or an earlier step failed. */
static json_t *body_finish(json_t *body, bool bad, const http_request *rq)
{
    bad |= json_object_set_new(body, "snapshot",
                               json_integer((json_int_t)rq->model->version)) != 0;
    bad |= json_object_set_new(body, "caution", json_string(http_labels_caution)) != 0;
    if (bad) {
        json_decref(body);
        return NULL;
    }
    return body;
}

/* ---- GET /v1/labels/predict ---- */

struct ranked_class {
    float p;
    uint32_t c;
};

/* Highest probability first, then the lower class id. */
static int by_probability(const void *a, const void *b)
{
    const struct ranked_class *x = a, *y = b;
    if (x->p != y->p)
        return x->p > y->p ? -1 : 1;
    return x->c < y->c ? -1 : x->c > y->c;
}

static json_t *classes_json(const weft_label_view *v, uint32_t node)
{
    struct ranked_class *r = weft_alloc_array(v->n_classes, sizeof *r);
    if (!r)
        return NULL;
    for (uint32_t c = 0; c < v->n_classes; c++)
        r[c] = (struct ranked_class){ v->prob[(size_t)node * v->n_classes + c], c };
    qsort(r, v->n_classes, sizeof *r, by_probability);
    json_t *list = json_array();
    for (size_t i = 0; list && i < v->n_classes; i++)
        if (json_array_append_new(list, json_pack("{s:o, s:o}", "class", class_json(v, r[i].c),
                                                  "probability", number_json(r[i].p)))) {
            json_decref(list);
            list = NULL;
        }
    free(r);
    return list;
}

/* {"class", "part"} of the label the training input gave @p node, or null. */
static json_t *observed_json(const weft_label_view *v, uint32_t node)
{
    uint32_t c = v->observed[node];
    if (c == WEFT_LABEL_VIEW_NONE)
        return json_null();
    return json_pack("{s:o, s:s}", "class", class_json(v, c), "part",
                     weft_labels_part_name((weft_label_part)v->part[node]));
}

/* {"node", "predicted", "probability", "classes", "observed"} of @p node; NULL when out of
 * memory. */
static json_t *prediction_json(const weft_label_view *v, uint32_t node)
{
    uint32_t predicted = http_labels_predicted_class(v, node);
    json_t *body = body_json(v, node, predicted);
    bool bad = !body;
    bad |= json_object_set_new(body, "probability",
                               number_json(v->prob[(size_t)node * v->n_classes + predicted]))
           != 0;
    bad |= json_object_set_new(body, "classes", classes_json(v, node)) != 0;
    bad |= json_object_set_new(body, "observed", observed_json(v, node)) != 0;
    if (bad) {
        json_decref(body);
        return NULL;
    }
    return body;
}

void http_labels_predict(const http_request *rq, http_reply *out)
{
    const weft_label_view *v = &rq->model->labels;
    uint32_t node = 0;
    if (!request_node(rq, out, &node))
        return;
    json_t *body = prediction_json(v, node);
    out->status = MHD_HTTP_OK;
    out->body = body_finish(body, !body, rq);
}

/* ---- POST /v1/labels/predict ---- */

/* One item of "nodes": its prediction, or {"error", "status"} when the snapshot does not
 * know the node (404) or the name is empty (400), as GET would answer. */
static json_t *batch_item_json(const http_request *rq, const json_t *name)
{
    const weft_label_view *v = &rq->model->labels;
    uint32_t node = 0;
    weft_error err;
    weft_error_clear(&err);
    const char *s = json_string_value(name);
    size_t len = json_string_length(name);
    if (len == 0)
        weft_error_set(&err, WEFT_ERR_INVALID, "a node name is empty");
    else if (!weft_names_find(&v->nodes, s, len, &node))
        weft_error_set(&err, WEFT_ERR_NOT_FOUND, "node '%s' is not in snapshot %llu", s,
                       (unsigned long long)rq->model->version);
    if (err.code == WEFT_OK)
        return prediction_json(v, node);
    http_reply r = { 0 };
    http_error_from(&r, &err, err.code == WEFT_ERR_NOT_FOUND ? hint_node : NULL);
    if (r.body && json_object_set_new(r.body, "status", json_integer((json_int_t)r.status))) {
        json_decref(r.body);
        return NULL;
    }
    return r.body;
}

/* {"nodes": [names]} -> {"results": [...], "snapshot", "caution"}, in order. The body's shape
 * is checked first (422, or 413 past --max-batch); an unknown node answers in its place. */
void http_labels_predict_batch(const http_request *rq, http_reply *out)
{
    json_t *body = http_route_body(rq, out);
    if (!body)
        return;
    static const char *const keys[] = { "nodes", NULL };
    const json_t *nodes = json_object_get(body, "nodes");
    size_t n = json_array_size(nodes), max = rq->settings->max_batch;
    char hint[160];
    snprintf(hint, sizeof hint, "send {\"nodes\": [\"name\", ...]} with 1 to %zu names", max);
    bool ok = http_route_known_keys(body, keys, "the body", out);
    if (ok && (!json_is_array(nodes) || n == 0)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, hint,
                         "'nodes' must be a non-empty array of node names");
        ok = false;
    } else if (ok && n > max) {
        snprintf(hint, sizeof hint, "this server takes at most %zu items per call (weft serve "
                                    "--max-batch): split the batch", max);
        http_error_reply(out, HTTP_FAULT_TOO_LARGE, hint, "'nodes' holds %zu items", n);
        ok = false;
    }
    for (size_t i = 0; ok && i < n; i++)
        if (!json_is_string(json_array_get(nodes, i))) {
            http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, hint, "nodes[%zu] must be a string",
                             i);
            ok = false;
        }
    json_t *results = ok ? json_array() : NULL;
    for (size_t i = 0; results && i < n; i++)
        if (json_array_append_new(results, batch_item_json(rq, json_array_get(nodes, i)))) {
            json_decref(results);
            results = NULL;
        }
    if (ok) {
        json_t *answer = json_object();
        bool bad = !answer || !results;
        bad |= json_object_set_new(answer, "results", results) != 0;
        out->status = MHD_HTTP_OK;
        out->body = body_finish(answer, bad, rq);
        if (!out->body)
            http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory building the answer");
    }
    json_decref(body);
}

/* ---- GET /v1/labels/explain ---- */

/* One neighbour's term of the row: its entry in the row and its push on the predicted class. */
struct term {
    float push;
    uint32_t node;
    size_t row;      /* index of the entry within the row (the contribution row) */
};

/* Largest push first, then the lower node id. */
static int by_push(const void *a, const void *b)
{
    const struct term *x = a, *y = b;
    if (x->push != y->push)
        return x->push > y->push ? -1 : 1;
    return x->node < y->node ? -1 : x->node > y->node;
}

/* One row's attribution, worked out once per request. */
struct attribution {
    uint32_t node, predicted;
    size_t n_row;          /* entries in row node of A' */
    float *contrib;        /* (n_row, n_classes): A'_vu * message_u */
    float *logit;          /* (n_classes): their sum plus the bias */
    long self;             /* index of the self entry in the row, or -1 */
    struct term *terms;    /* the other entries, by push on the predicted class */
    size_t n_terms;
};

static void attribution_fini(struct attribution *a)
{
    free(a->contrib);
    free(a->logit);
    free(a->terms);
}

static weft_err attribute(const weft_label_view *v, uint32_t node, struct attribution *a,
                          weft_error *err)
{
    size_t c = v->n_classes;
    a->node = node;
    a->predicted = http_labels_predicted_class(v, node);
    a->n_row = (size_t)(v->adj_off[node + 1] - v->adj_off[node]);
    a->contrib = weft_alloc_array(a->n_row ? a->n_row * c : 1, sizeof *a->contrib);
    a->logit = weft_alloc_array(c, sizeof *a->logit);
    a->terms = weft_alloc_array(a->n_row ? a->n_row : 1, sizeof *a->terms);
    if (!a->contrib || !a->logit || !a->terms)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory to explain a row of %zu entries",
                              a->n_row);
    weft_gcn_attribute(a->contrib, a->logit, v->adj_off, v->adj_col, v->adj_val, v->message,
                       v->bias, c, node);
    a->self = -1;
    const uint32_t *col = v->adj_col + v->adj_off[node];
    for (size_t i = 0; i < a->n_row; i++) {
        if (col[i] == node)
            a->self = (long)i;
        else
            a->terms[a->n_terms++] = (struct term){ a->contrib[i * c + a->predicted], col[i], i };
    }
    qsort(a->terms, a->n_terms, sizeof *a->terms, by_push);
    return WEFT_OK;
}

static json_t *self_json(const weft_label_view *v, const struct attribution *a)
{
    if (a->self < 0) {   /* A' without self-loops: the node's own message takes no part */
        float *zero = weft_calloc_array(v->n_classes, sizeof *zero);
        json_t *s = zero ? json_pack("{s:f, s:o}", "weight", 0.0, "contribution",
                                     per_class_json(v, zero))
                         : NULL;
        free(zero);
        return s;
    }
    const float *w = v->adj_val + v->adj_off[a->node] + (size_t)a->self;
    return json_pack("{s:o, s:o}", "weight", number_json(*w), "contribution",
                     per_class_json(v, a->contrib + (size_t)a->self * v->n_classes));
}

static json_t *neighbour_json(const weft_label_view *v, const struct attribution *a,
                              const struct term *t)
{
    float w = v->adj_val[v->adj_off[a->node] + t->row];
    return json_pack("{s:o, s:o, s:o, s:o}", "node", node_json(v, t->node), "weight",
                     number_json(w), "contribution_to_predicted", number_json(t->push),
                     "contribution", per_class_json(v, a->contrib + t->row * v->n_classes));
}

static json_t *neighbours_json(const weft_label_view *v, const struct attribution *a, size_t k)
{
    json_t *list = json_array();
    for (size_t i = 0; list && i < a->n_terms && i < k; i++)
        if (json_array_append_new(list, neighbour_json(v, a, &a->terms[i]))) {
            json_decref(list);
            list = NULL;
        }
    return list;
}

/* "others": the neighbours past the first k, summed; "check": every term of the predicted
 * class added up in double beside the logit they make. */
static bool add_totals(json_t *body, const weft_label_view *v, const struct attribution *a,
                       size_t k)
{
    double rest = 0, all = 0;
    for (size_t i = 0; i < a->n_terms; i++) {
        all += a->terms[i].push;
        if (i >= k)
            rest += a->terms[i].push;
    }
    if (a->self >= 0)
        all += a->contrib[(size_t)a->self * v->n_classes + a->predicted];
    if (v->bias)
        all += v->bias[a->predicted];
    size_t n_rest = a->n_terms > k ? a->n_terms - k : 0;
    json_t *others = json_pack("{s:I, s:o}", "count", (json_int_t)n_rest,
                               "contribution_to_predicted", number_json(rest));
    json_t *check = json_pack("{s:o, s:o}", "sum_of_terms", number_json(all), "logit",
                              number_json(a->logit[a->predicted]));
    bool bad = json_object_set_new(body, "others", others) != 0;
    bad |= json_object_set_new(body, "check", check) != 0;
    return !bad;
}

static json_t *explain_json(const http_request *rq, const struct attribution *a, size_t k)
{
    const weft_label_view *v = &rq->model->labels;
    json_t *body = body_json(v, a->node, a->predicted);
    bool bad = !body;
    bad |= json_object_set_new(body, "k", json_integer((json_int_t)k)) != 0;
    bad |= json_object_set_new(body, "probabilities",
                               per_class_json(v, v->prob + (size_t)a->node * v->n_classes)) != 0;
    bad |= json_object_set_new(body, "logits", per_class_json(v, a->logit)) != 0;
    bad |= json_object_set_new(body, "bias", v->bias ? per_class_json(v, v->bias)
                                                     : json_null()) != 0;
    bad |= json_object_set_new(body, "self", self_json(v, a)) != 0;
    bad |= json_object_set_new(body, "neighbours", neighbours_json(v, a, k)) != 0;
    bad |= !bad && !add_totals(body, v, a, k);
    return body_finish(body, bad, rq);
}

void http_labels_explain(const http_request *rq, http_reply *out)
{
    const weft_label_view *v = &rq->model->labels;
    uint32_t node = 0;
    if (!request_node(rq, out, &node))
        return;
    size_t k = 0;
    weft_error err;
    weft_error_clear(&err);
    if (http_route_arg_count(rq, "k", HTTP_DEFAULT_K, HTTP_EXPLAIN_MAX_K, &k, &err) != WEFT_OK) {
        char hint[160];
        snprintf(hint, sizeof hint,
                 "k is how many neighbours to list one by one: 1 to %d, default %d; the rest "
                 "are summed in \"others\"",
                 HTTP_EXPLAIN_MAX_K, HTTP_DEFAULT_K);
        http_error_from(out, &err, hint);
        return;
    }
    struct attribution a = { 0 };
    if (attribute(v, node, &a, &err) == WEFT_OK) {
        out->status = MHD_HTTP_OK;
        out->body = explain_json(rq, &a, k);
    } else {
        http_error_from(out, &err, NULL);
    }
    attribution_fini(&a);
}
