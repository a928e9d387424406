/* GET /healthz and GET /v1/model: the process is up; what the live snapshot is. */
#include "http.h"

/* 200 while the process serves requests, whether or not a snapshot is live: liveness only.
 * The daemon adds "version", which is null until the first snapshot is live. */
void http_model_healthz(const http_request *rq, http_reply *out)
{
    (void)rq;
    out->status = MHD_HTTP_OK;
    out->body = json_pack("{s:s}", "status", "ok");
}

/* The live snapshot's manifest as stored (a copy: the stored tree is shared by every
 * request thread and must not be touched, not even by refcounts of its members). */
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
    out->status = MHD_HTTP_OK;
    out->body = manifest;
}
