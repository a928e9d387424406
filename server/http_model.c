/* GET /healthz and GET /v1/model: the process is up; what the live snapshot is. */
#include "http.h"

#include "weft/model.h"
#include "weft/names.h"

/* 200 while the process serves requests, whether or not a snapshot is live: liveness only.
 * The daemon adds "version", which is null until the first snapshot is live. */
void http_model_healthz(const http_request *rq, http_reply *out)
{
    (void)rq;
    out->status = MHD_HTTP_OK;
    out->body = json_pack("{s:s}", "status", "ok");
}

/* {"kind", "nodes", "relations", "dim"} of the link model being served. */
static json_t *links_part_json(const http_model *m)
{
    if (!m->has_links)
        return json_null();
    const weft_link_view *v = &m->links;
    return json_pack("{s:s, s:I, s:I, s:I}", "kind", weft_model_kind_name(v->kind), "nodes",
                     (json_int_t)v->n_nodes, "relations", (json_int_t)v->n_relations, "dim",
                     (json_int_t)v->dim);
}

/* {"kind", "nodes", "classes": [names], "labelled"} of the label model being served. */
static json_t *labels_part_json(const http_model *m)
{
    if (!m->has_labels)
        return json_null();
    const weft_label_view *v = &m->labels;
    json_t *names = json_array();
    for (uint32_t c = 0; names && c < v->n_classes; c++) {
        size_t len = 0;
        const char *name = weft_names_get(&v->classes, c, &len);
        if (json_array_append_new(names, json_stringn(name, len))) {
            json_decref(names);
            names = NULL;
        }
    }
    size_t n_labelled = 0;
    for (size_t i = 0; i < v->n_nodes; i++)
        n_labelled += v->observed[i] != WEFT_LABEL_VIEW_NONE;
    return json_pack("{s:s, s:I, s:o, s:I}", "kind", "gcn", "nodes", (json_int_t)v->n_nodes,
                     "classes", names, "labelled", (json_int_t)n_labelled);
}

/* The live snapshot's manifest as stored (a copy: the stored tree is shared by every
 * request thread and must not be touched, not even by refcounts of its members), with
 * "parts": what the server answers from it, the link model and the label model (null when
 * the snapshot has none). Their hyper-parameters and metrics are in the manifest. */
void http_model_get(const http_request *rq, http_reply *out)
{
    if (!rq->model) {
        http_error_reply(out, HTTP_FAULT_NO_SNAPSHOT, NULL, "no snapshot is live yet");
        return;
    }
    json_t *manifest = json_deep_copy(weft_snapshot_manifest(rq->model->snap));
    if (!json_is_object(manifest)) {
        json_decref(manifest);
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL,
                         "the manifest of version %llu could not be copied",
                         (unsigned long long)rq->model->version);
        return;
    }
    json_t *parts = json_pack("{s:o, s:o}", "links", links_part_json(rq->model), "labels",
                              labels_part_json(rq->model));
    if (!parts || json_object_set_new(manifest, "parts", parts)) {
        json_decref(manifest);
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory describing version %llu",
                         (unsigned long long)rq->model->version);
        return;
    }
    out->status = MHD_HTTP_OK;
    out->body = manifest;
}
