/* GET /v1/map: the live snapshot's node embeddings projected to two dimensions by PCA
 * (core/pca.c), each point with its name, node type and labels, for the page's map. */
#include "http.h"

#include <stdlib.h>

#include "weft/alloc.h"
#include "weft/names.h"
#include "weft/pca.h"

/* The rows come from a fixed seed, so that the same snapshot always gives the same map. */
#define MAP_SEED 1

/* What the map projects: the link model's entity rows, else the label model's last-layer
 * messages (a label model alone has no other per-node vectors). */
struct map_source {
    const char *blob;          /* the blob's name, for the answer */
    const float *x;            /* (n, d) */
    size_t n, d;
    const weft_names_view *names;
};

static void map_source_of(const http_model *m, struct map_source *s)
{
    if (m->has_links)
        *s = (struct map_source){ "entity", m->links.entity, m->links.n_nodes, m->links.dim,
                                  &m->links.nodes };
    else
        *s = (struct map_source){ "label.message", m->labels.message, m->labels.n_nodes,
                                  m->labels.n_classes, &m->labels.nodes };
}

static json_t *name_json(const weft_names_view *names, uint32_t id)
{
    size_t len = 0;
    const char *s = weft_names_get(names, id, &len);
    return json_stringn(s, len);
}

/* ["a", "b", ...] of every name in @p names; NULL when out of memory. */
static json_t *names_json(const weft_names_view *names, size_t n)
{
    json_t *a = json_array();
    for (size_t i = 0; a && i < n; i++)
        if (json_array_append_new(a, name_json(names, (uint32_t)i))) {
            json_decref(a);
            return NULL;
        }
    return a;
}

/* {"name", "x", "y", "type", "label", "observed"} of node @p id at (@p x, @p y). */
static json_t *point_json(const http_model *m, const struct map_source *s, uint32_t id,
                          float x, float y)
{
    const weft_types_view *t = &m->types;
    const weft_label_view *l = &m->labels;
    bool has_type = m->has_types && id < t->n_nodes && t->of_node[id] != WEFT_TYPES_NONE;
    bool has_label = m->has_labels && id < l->n_nodes;
    bool has_observed = has_label && l->observed[id] != WEFT_LABEL_VIEW_NONE;
    return json_pack("{s:o, s:f, s:f, s:o, s:o, s:o}", "name", name_json(s->names, id), "x",
                     (double)x, "y", (double)y, "type",
                     has_type ? name_json(&t->names, t->of_node[id]) : json_null(), "label",
                     has_label ? name_json(&l->classes, http_labels_predicted_class(l, id))
                               : json_null(),
                     "observed",
                     has_observed ? name_json(&l->classes, l->observed[id]) : json_null());
}

/* The whole answer for rows @p rows (@p m_rows of them) at @p xy (m_rows, 2). */
static json_t *map_json(const http_model *m, const struct map_source *s, const uint32_t *rows,
                        size_t m_rows, const float *xy, const weft_pca_fit *fit)
{
    json_t *points = json_array();
    for (size_t i = 0; points && i < m_rows; i++)
        if (json_array_append_new(points, point_json(m, s, rows[i], xy[2 * i], xy[2 * i + 1]))) {
            json_decref(points);
            points = NULL;
        }
    double share[2] = { 0.0, 0.0 };
    for (size_t j = 0; j < 2 && fit->total > 0.0; j++)
        share[j] = fit->variance[j] / fit->total;
    json_t *types = m->has_types ? names_json(&m->types.names, m->types.n_types) : json_null();
    json_t *classes =
        m->has_labels ? names_json(&m->labels.classes, m->labels.n_classes) : json_null();
    json_t *relations =
        m->has_links ? names_json(&m->links.relations, m->links.n_relations) : json_null();
    return json_pack("{s:s, s:I, s:I, s:I, s:b, s:I, s:[f, f], s:[f, f], s:f, s:o, s:o, "
                     "s:o, s:o, s:o}",
                     "from", s->blob, "nodes", (json_int_t)s->n, "dim", (json_int_t)s->d,
                     "points_total", (json_int_t)m_rows, "sampled", m_rows < s->n, "seed",
                     (json_int_t)MAP_SEED, "explained_variance", fit->variance[0],
                     fit->variance[1], "explained_variance_ratio", share[0], share[1],
                     "total_variance", fit->total, "types", types, "classes", classes,
                     "relations", relations, "points", points, "caution",
                     m->has_labels ? json_string(http_labels_caution) : json_null());
}

void http_map_get(const http_request *rq, http_reply *out)
{
    const http_model *m = rq->model;
    weft_error err;
    size_t max_points = 0;
    if (http_route_arg_count(rq, "max_points", HTTP_MAP_DEFAULT_POINTS, HTTP_MAP_MAX_POINTS,
                             &max_points, &err) != WEFT_OK) {
        http_error_from(out, &err, "max_points is how many nodes the map shows, at most "
                                   "this server's limit; a sample when the snapshot has more");
        return;
    }
    struct map_source s;
    map_source_of(m, &s);
    size_t m_rows = max_points < s.n ? max_points : s.n;
    uint32_t *rows = weft_alloc_array(m_rows, sizeof *rows);
    float *xy = weft_alloc_array(m_rows, 2 * sizeof *xy);
    weft_pca_fit fit;
    if (!rows || !xy) {
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "no memory for a map of %zu points",
                         m_rows);
        goto done;
    }
    weft_pca_sample(rows, s.n, m_rows, MAP_SEED);
    if (weft_pca_project(xy, &fit, s.x, rows, m_rows, s.d, 2, &err) != WEFT_OK) {
        http_error_reply(out, HTTP_FAULT_INTERNAL, "GET /v1/health checks the stored values",
                         "the %s rows of version %llu cannot be projected: %s", s.blob,
                         (unsigned long long)m->version, err.msg);
        goto done;
    }
    out->status = MHD_HTTP_OK;
    out->body = map_json(m, &s, rows, m_rows, xy, &fit);
done:
    free(rows);
    free(xy);
}
