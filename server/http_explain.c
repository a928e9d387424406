/* GET /v1/links/explain: why the link model scores (source, relation, target) as it does,
 * told with the known graph:
 *   - the model's score of the triple (and its probability when the loss defines one);
 *   - similar sources: the nodes that already link to the target under the relation, most
 *     similar to the source first, by the cosine of their entity rows (a model that scores
 *     by inner products gives similar rows similar scores);
 *   - two-step paths source -> x -> target in the known graph, under any relations, ranked
 *     by the sum of the model's scores of the two hops (the product of their exp(score)),
 *     highest first; ties: lower x, then lower relation ids.
 * Everything is read from the link view (no LMDB); the work is O(degree * dim). */
#include "http.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"
#include "weft/graph.h"
#include "weft/model.h"
#include "weft/names.h"
#include "weft/topk.h"

static const char hint_node[] =
    "node names are case-sensitive and must match the training edge files exactly";

static json_t *name_json(const weft_names_view *names, uint32_t id)
{
    size_t len = 0;
    const char *name = weft_names_get(names, id, &len);
    return json_stringn(name, len);
}

static json_t *number_json(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

/* cos(e_a, e_b) in double; NaN when either row is zero. */
static double cosine(const float *a, const float *b, size_t d)
{
    double ab = 0, aa = 0, bb = 0;
    for (size_t i = 0; i < d; i++) {
        ab += (double)a[i] * b[i];
        aa += (double)a[i] * a[i];
        bb += (double)b[i] * b[i];
    }
    return aa > 0 && bb > 0 ? ab / sqrt(aa * bb) : NAN;
}

/* One row entry of a CSR: a neighbour and the relation that links it. */
struct hop {
    uint32_t node, rel;
};

static int by_node(const void *a, const void *b)
{
    const struct hop *x = a, *y = b;
    if (x->node != y->node)
        return x->node < y->node ? -1 : 1;
    return x->rel < y->rel ? -1 : x->rel > y->rel;
}

/* Row @p v of @p c as hops sorted by (node, relation); caller frees. NULL when out of memory. */
static struct hop *row_by_node(const weft_csr *c, uint32_t v, size_t *n)
{
    uint64_t first = c->off[v];
    *n = (size_t)(c->off[v + 1] - first);
    struct hop *h = weft_alloc_array(*n ? *n : 1, sizeof *h);
    if (!h)
        return NULL;
    for (size_t i = 0; i < *n; i++)
        h[i] = (struct hop){ c->nbr[first + i], c->rel[first + i] };
    qsort(h, *n, sizeof *h, by_node);
    return h;
}

/* ---- similar sources ---- */

static json_t *similar_sources_json(const weft_link_view *v, uint32_t source, uint32_t rel,
                                    uint32_t target, size_t k, size_t *total, weft_error *err)
{
    uint64_t first = 0;
    size_t n = 0;
    weft_csr_range(&v->known_in, target, rel, &first, &n);
    const uint32_t *from = v->known_in.nbr + first;
    uint32_t *id = weft_alloc_array(k, sizeof *id);
    float *sim = weft_alloc_array(k, sizeof *sim);
    json_t *list = json_array();
    if (!id || !sim || !list) {
        weft_error_set(err, WEFT_ERR_NOMEM, "no memory to explain");
        free(id);
        free(sim);
        json_decref(list);
        return NULL;
    }
    weft_topk t;
    weft_topk_init(&t, k, id, sim);
    const float *es = v->entity + (size_t)source * v->dim;
    *total = 0;
    for (size_t i = 0; i < n; i++) {
        if (from[i] == source)
            continue;
        (*total)++;
        double c = cosine(es, v->entity + (size_t)from[i] * v->dim, v->dim);
        weft_topk_push(&t, from[i], isnan(c) ? -2.0f : (float)c);   /* zero rows last */
    }
    size_t m = weft_topk_finish(&t);
    for (size_t i = 0; list && i < m; i++) {
        float s = weft_model_score(&v->model, id[i], rel, target);
        json_t *e = json_pack("{s:o, s:o, s:o}", "source", name_json(&v->nodes, id[i]),
                              "similarity", sim[i] < -1.5f ? json_null() : number_json(sim[i]),
                              "score", number_json(s));
        if (json_array_append_new(list, e)) {
            json_decref(list);
            list = NULL;
        }
    }
    free(id);
    free(sim);
    if (!list)
        weft_error_set(err, WEFT_ERR_NOMEM, "no memory to explain");
    return list;
}

/* ---- two-step paths ---- */

/* One path source -(first.rel)-> first.node -(second_rel)-> target. */
struct path {
    struct hop first;
    uint32_t second_rel;
    float s1, s2;
};

static json_t *hop_json(const weft_link_view *v, uint32_t from, uint32_t rel, uint32_t to,
                        float score)
{
    json_t *h = json_pack("{s:o, s:o, s:o, s:o}", "source", name_json(&v->nodes, from),
                          "relation", name_json(&v->relations, rel), "target",
                          name_json(&v->nodes, to), "score", number_json(score));
    if (h && v->is_probability)
        json_object_set_new(h, "probability",
                            isfinite(score) ? json_real(weft_model_sigmoid(score)) : json_null());
    return h;
}

static json_t *path_json(const weft_link_view *v, uint32_t source, uint32_t target,
                         const struct path *p)
{
    json_t *hops = json_array();
    if (!hops || json_array_append_new(hops, hop_json(v, source, p->first.rel, p->first.node,
                                                      p->s1)) ||
        json_array_append_new(hops, hop_json(v, p->first.node, p->second_rel, target, p->s2))) {
        json_decref(hops);
        return NULL;
    }
    return json_pack("{s:o, s:o, s:o}", "via", name_json(&v->nodes, p->first.node), "strength",
                     number_json((double)p->s1 + p->s2), "hops", hops);
}

/* Every path, found by joining the source's out-row and the target's in-row on the middle
 * node (both sorted by node); the best k by s1 + s2 are listed. */
static json_t *paths_json(const weft_link_view *v, uint32_t source, uint32_t target, size_t k,
                          size_t *total, weft_error *err)
{
    size_t n_out = 0, n_in = 0, n_paths = 0, cap = 0;
    struct hop *out = row_by_node(&v->known_out, source, &n_out);
    struct hop *in = row_by_node(&v->known_in, target, &n_in);
    struct path *paths = NULL;
    uint32_t *id = weft_alloc_array(k, sizeof *id);
    float *strength = weft_alloc_array(k, sizeof *strength);
    json_t *list = NULL;
    if (!out || !in || !id || !strength)
        goto done;
    for (size_t i = 0, j = 0; i < n_out && j < n_in;) {
        uint32_t x = out[i].node;
        if (x < in[j].node) {
            i++;
            continue;
        }
        if (x > in[j].node) {
            j++;
            continue;
        }
        size_t i_end = i, j_end = j;
        while (i_end < n_out && out[i_end].node == x)
            i_end++;
        while (j_end < n_in && in[j_end].node == x)
            j_end++;
        for (size_t a = i; x != source && x != target && a < i_end; a++)
            for (size_t b = j; b < j_end; b++) {
                if (n_paths == cap && weft_grow_array((void **)&paths, &cap, n_paths + 1,
                                                      sizeof *paths) != 0)
                    goto done;
                paths[n_paths++] = (struct path){ out[a], in[b].rel, 0, 0 };
            }
        i = i_end;
        j = j_end;
    }
    weft_topk t;
    weft_topk_init(&t, k, id, strength);
    for (size_t p = 0; p < n_paths; p++) {   /* path index order: by x, r1, r2 */
        struct path *q = &paths[p];
        q->s1 = weft_model_score(&v->model, source, q->first.rel, q->first.node);
        q->s2 = weft_model_score(&v->model, q->first.node, q->second_rel, target);
        weft_topk_push(&t, (uint32_t)p, q->s1 + q->s2);
    }
    size_t m = weft_topk_finish(&t);
    list = json_array();
    for (size_t i = 0; list && i < m; i++)
        if (json_array_append_new(list, path_json(v, source, target, &paths[id[i]]))) {
            json_decref(list);
            list = NULL;
        }
    *total = n_paths;
done:
    if (!list)
        weft_error_set(err, WEFT_ERR_NOMEM, "no memory to explain");
    free(out);
    free(in);
    free(paths);
    free(id);
    free(strength);
    return list;
}

/* ---- the route ---- */

void http_links_explain(const http_request *rq, http_reply *out)
{
    const http_model *m = rq->model;   /* the route needs links (http_route.c) */
    const weft_link_view *v = &m->links;
    weft_error err;
    weft_error_clear(&err);
    const char *source = NULL, *target = NULL, *relation = NULL;
    size_t source_len = 0, target_len = 0, relation_len = 0, k = 0;
    uint32_t s = 0, r = 0, t = 0;
    char hint[256];
    snprintf(hint, sizeof hint, "give ?source=NAME&target=NAME, and &relation=NAME when the "
                                "model has several");
    if (http_route_arg(rq, "source", &source, &source_len, &err) ||
        http_route_arg(rq, "target", &target, &target_len, &err) ||
        http_route_arg(rq, "relation", &relation, &relation_len, &err) ||
        http_links_node(rq, "source", source, source_len, &s, &err) ||
        http_links_node(rq, "target", target, target_len, &t, &err)) {
        http_error_from(out, &err, err.code == WEFT_ERR_NOT_FOUND ? hint_node : hint);
        return;
    }
    if (http_links_relation(rq, relation, relation_len, &r, &err) != WEFT_OK) {
        http_links_relation_hint(v, hint, sizeof hint);
        http_error_from(out, &err, hint);
        return;
    }
    if (http_route_arg_count(rq, "k", HTTP_DEFAULT_K, HTTP_EXPLAIN_MAX_K, &k, &err) != WEFT_OK) {
        snprintf(hint, sizeof hint, "k is how many similar sources and paths to list: 1 to %d, "
                                    "default %d", HTTP_EXPLAIN_MAX_K, HTTP_DEFAULT_K);
        http_error_from(out, &err, hint);
        return;
    }
    size_t n_similar = 0, n_paths = 0;
    json_t *similar = similar_sources_json(v, s, r, t, k, &n_similar, &err);
    json_t *paths = similar ? paths_json(v, s, t, k, &n_paths, &err) : NULL;
    if (!similar || !paths) {
        json_decref(similar);
        http_error_from(out, &err, NULL);
        return;
    }
    float score = weft_model_score(&v->model, s, r, t);
    json_t *body = json_pack("{s:o, s:o, s:o, s:I, s:o, s:b, s:o, s:I, s:o, s:I}", "source",
                             name_json(&v->nodes, s), "relation", name_json(&v->relations, r),
                             "target", name_json(&v->nodes, t), "k", (json_int_t)k, "score",
                             number_json(score), "known", weft_csr_has(&v->known_out, s, r, t),
                             "similar_sources", similar, "similar_sources_total",
                             (json_int_t)n_similar, "paths", paths, "paths_total",
                             (json_int_t)n_paths);
    if (body && v->is_probability &&
        json_object_set_new(body, "probability",
                            isfinite(score) ? json_real(weft_model_sigmoid(score))
                                            : json_null())) {
        json_decref(body);
        body = NULL;
    }
    out->status = MHD_HTTP_OK;
    out->body = body;
}
