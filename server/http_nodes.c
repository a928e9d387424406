/* GET /v1/nodes/{name}: what the live snapshot knows of one node: its type, its degrees and a
 * sample of its neighbours (from the known links of the link model, or else the label
 * model's adjacency), its observed and predicted label, and which model parts know it.
 * GET /v1/nodes/{name}/similar: the nodes whose entity rows (link model) are closest to its
 * own by cosine. Both read only the published views (no LMDB). */
#include "http.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/graph.h"
#include "weft/kernels.h"
#include "weft/labels.h"
#include "weft/names.h"
#include "weft/topk.h"

static const char hint_node[] =
    "node names are case-sensitive and must match the training edge files exactly; a name "
    "with '/' or '?' is given percent-encoded (%2F, %3F)";

/** Most neighbours GET /v1/nodes/{name} lists. */
#define NODE_MAX_NEIGHBOURS 1000

/* The node table of the live snapshot: the link model's and the label model's are the same
 * table (a snapshot holds one), so either view serves. */
static const weft_names_view *node_table(const http_model *m)
{
    return m->has_links ? &m->links.nodes : &m->labels.nodes;
}

static json_t *name_json(const weft_names_view *names, uint32_t id)
{
    size_t len = 0;
    const char *name = weft_names_get(names, id, &len);
    return json_stringn(name, len);
}

/* The node named by the path, or @p out filled (404). */
static bool find_node(const http_request *rq, uint32_t *id, http_reply *out)
{
    const http_model *m = rq->model;
    if (weft_names_find(node_table(m), rq->path_arg, rq->path_arg_len, id))
        return true;
    http_error_reply(out, HTTP_FAULT_NOT_FOUND, hint_node, "node '%s' is not in snapshot %llu",
                     rq->path_arg, (unsigned long long)m->version);
    return false;
}

/* ---- GET /v1/nodes/{name} ---- */

static json_t *type_json(const http_model *m, uint32_t node)
{
    if (!m->has_types || m->types.of_node[node] == WEFT_TYPES_NONE)
        return json_null();
    return name_json(&m->types.names, m->types.of_node[node]);
}

/* Up to @p limit entries of row @p node of @p c, in row order (by relation, then neighbour). */
static bool add_row(json_t *list, const weft_link_view *v, const weft_csr *c, uint32_t node,
                    const char *direction, size_t limit)
{
    uint64_t first = c->off[node], end = c->off[node + 1];
    for (uint64_t e = first; e < end && json_array_size(list) < limit; e++) {
        json_t *j = json_pack("{s:o, s:o, s:s}", "node", name_json(&v->nodes, c->nbr[e]),
                              "relation", name_json(&v->relations, c->rel[e]), "direction",
                              direction);
        if (json_array_append_new(list, j))
            return false;
    }
    return true;
}

/* "degree" and "neighbours" from the known links: out-links first, then in-links. A graph
 * trained --undirected stores each edge both ways: its links are listed once, as "out", and
 * total counts each edge once. */
static bool add_links(json_t *body, const http_model *m, uint32_t node, size_t limit)
{
    const weft_link_view *v = &m->links;
    const json_t *graph = json_object_get(weft_snapshot_manifest(m->snap), "graph");
    bool is_undirected = json_is_true(json_object_get(graph, "undirected"));
    size_t n_out = (size_t)(v->known_out.off[node + 1] - v->known_out.off[node]);
    size_t n_in = (size_t)(v->known_in.off[node + 1] - v->known_in.off[node]);
    json_t *list = json_array();
    bool ok = list && add_row(list, v, &v->known_out, node, "out", limit) &&
              (is_undirected || add_row(list, v, &v->known_in, node, "in", limit));
    ok = json_object_set_new(body, "degree",
                             json_pack("{s:I, s:I, s:I, s:s, s:b}", "out", (json_int_t)n_out,
                                       "in", (json_int_t)n_in, "total",
                                       (json_int_t)(is_undirected ? n_out : n_out + n_in),
                                       "from", "known_links", "undirected", is_undirected))
             == 0 && ok;
    ok = json_object_set_new(body, "neighbours", list) == 0 && ok;
    return ok;
}

/* The same from the label model's adjacency A' (symmetric, no relations), its self entry
 * left out: each neighbour is listed once with direction "both". */
static bool add_adjacency(json_t *body, const weft_label_view *v, uint32_t node, size_t limit)
{
    json_t *list = json_array();
    size_t n = 0;
    bool ok = list != NULL;
    for (uint64_t e = v->adj_off[node]; ok && e < v->adj_off[node + 1]; e++) {
        if (v->adj_col[e] == node)
            continue;
        n++;
        if (json_array_size(list) < limit)
            ok = json_array_append_new(list, json_pack("{s:o, s:n, s:s}", "node",
                                                       name_json(&v->nodes, v->adj_col[e]),
                                                       "relation", "direction", "both")) == 0;
    }
    ok = json_object_set_new(body, "degree",
                             json_pack("{s:I, s:I, s:I, s:s, s:b}", "out", (json_int_t)n, "in",
                                       (json_int_t)n, "total", (json_int_t)n, "from",
                                       "label_adjacency", "undirected", true)) == 0 && ok;
    ok = json_object_set_new(body, "neighbours", list) == 0 && ok;
    return ok;
}

/* {"observed": {class, part} or null, "predicted", "probability"}, or null without a label
 * model. */
static json_t *label_json(const http_model *m, uint32_t node)
{
    if (!m->has_labels)
        return json_null();
    const weft_label_view *v = &m->labels;
    const float *p = v->prob + (size_t)node * v->n_classes;
    uint32_t best = 0;
    for (uint32_t c = 1; c < v->n_classes; c++)
        if (p[c] > p[best])
            best = c;
    uint32_t seen = v->observed[node];
    json_t *observed = seen == WEFT_LABEL_VIEW_NONE
                           ? json_null()
                           : json_pack("{s:o, s:s}", "class", name_json(&v->classes, seen),
                                       "part",
                                       weft_labels_part_name((weft_label_part)v->part[node]));
    return json_pack("{s:o, s:o, s:f}", "observed", observed, "predicted",
                     name_json(&v->classes, best), "probability", (double)p[best]);
}

void http_nodes_get(const http_request *rq, http_reply *out)
{
    const http_model *m = rq->model;   /* the route needs a snapshot (http_route.c) */
    uint32_t node = 0;
    weft_error err;
    weft_error_clear(&err);
    size_t limit = 0;
    if (!find_node(rq, &node, out))
        return;
    if (http_route_arg_count(rq, "neighbours", HTTP_DEFAULT_K, NODE_MAX_NEIGHBOURS, &limit, &err)
        != WEFT_OK) {
        char hint[120];
        snprintf(hint, sizeof hint, "neighbours is how many neighbours to list: 1 to %d, "
                                    "default %d", NODE_MAX_NEIGHBOURS, HTTP_DEFAULT_K);
        http_error_from(out, &err, hint);
        return;
    }
    json_t *body = json_object();
    bool ok = body != NULL;
    ok = ok && json_object_set_new(body, "node", name_json(node_table(m), node)) == 0;
    ok = ok && json_object_set_new(body, "type", type_json(m, node)) == 0;
    ok = ok && (m->has_links ? add_links(body, m, node, limit)
                             : add_adjacency(body, &m->labels, node, limit));
    ok = ok && json_object_set_new(body, "label", label_json(m, node)) == 0;
    /* One node table per snapshot: a node it holds is known to every part it has. */
    ok = ok && json_object_set_new(body, "parts",
                                   json_pack("{s:b, s:b}", "links", m->has_links, "labels",
                                             m->has_labels)) == 0;
    if (!ok) {
        json_decref(body);
        body = NULL;
    }
    out->status = MHD_HTTP_OK;
    out->body = body;
}

/* ---- GET /v1/nodes/{name}/similar ---- */

/* The k rows of largest cosine with row @p node, itself left out (and, with @p of_node, any
 * row not of @p type). A zero row has no direction: it is never listed. One pass over the
 * matrix, O(n d). */
static size_t nearest(const weft_link_view *v, uint32_t node, const uint32_t *of_node,
                      uint32_t type, size_t k, uint32_t *id, float *sim)
{
    size_t n = v->n_nodes, d = v->dim;
    const float *q = v->entity + (size_t)node * d;
    double qq = 0;
    for (size_t i = 0; i < d; i++)
        qq += (double)q[i] * q[i];
    weft_topk t;
    weft_topk_init(&t, k, id, sim);
    if (qq <= 0)
        return 0;
    for (size_t c = 0; c < n; c++) {
        if (c == node || (of_node && of_node[c] != type))
            continue;
        const float *row = v->entity + c * d;
        double rr = 0;
        for (size_t j = 0; j < d; j++)
            rr += (double)row[j] * row[j];
        if (rr > 0)
            weft_topk_push(&t, (uint32_t)c, (float)(weft_kernel_dot(row, q, d) / sqrt(qq * rr)));
    }
    return weft_topk_finish(&t);
}

void http_nodes_similar(const http_request *rq, http_reply *out)
{
    const http_model *m = rq->model;   /* the route needs links (http_route.c) */
    const weft_link_view *v = &m->links;
    uint32_t node = 0, type = 0;
    weft_error err;
    weft_error_clear(&err);
    size_t k = 0;
    const char *type_name = NULL;
    size_t type_len = 0;
    char hint[256];
    if (!find_node(rq, &node, out))
        return;
    if (http_route_arg_count(rq, "k", HTTP_DEFAULT_K, rq->settings->max_k, &k, &err) != WEFT_OK) {
        snprintf(hint, sizeof hint, "k is how many nodes to return: 1 to %zu, default %d",
                 rq->settings->max_k, HTTP_DEFAULT_K);
        http_error_from(out, &err, hint);
        return;
    }
    if (http_route_arg(rq, "candidate_type", &type_name, &type_len, &err) != WEFT_OK ||
        (type_name && http_links_type(rq, type_name, type_len, &type, &err) != WEFT_OK)) {
        http_error_from(out, &err, "candidate_type limits the answer to the nodes of one "
                                   "type (weft train --types FILE)");
        return;
    }
    uint32_t *id = weft_alloc_array(k, sizeof *id);
    float *sim = weft_alloc_array(k, sizeof *sim);
    json_t *list = id && sim ? json_array() : NULL;
    size_t n = list ? nearest(v, node, type_name ? m->types.of_node : NULL, type, k, id, sim)
                    : 0;
    for (size_t i = 0; list && i < n; i++)
        if (json_array_append_new(list, json_pack("{s:o, s:f}", "node",
                                                  name_json(&v->nodes, id[i]), "similarity",
                                                  (double)sim[i]))) {
            json_decref(list);
            list = NULL;
        }
    free(id);
    free(sim);
    json_t *body = list ? json_pack("{s:o, s:I, s:o, s:o}", "node", name_json(&v->nodes, node),
                                    "k", (json_int_t)k, "candidate_type",
                                    type_name ? json_stringn(type_name, type_len) : json_null(),
                                    "similar", list)
                        : NULL;
    out->status = MHD_HTTP_OK;
    out->body = body;
}
