/* GET / and GET /assets/{file}: the analyst page. Its files (web/) are compiled into the
 * binary: web/embed.sh turns each into a byte array in $(BUILD)/gen/web_assets.inc, which is
 * included below, so the page needs no file beside the binary, no network and no build step
 * where it runs. The page reads everything else from the JSON routes. */
#include "http.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* One file of web/, as web/embed.sh writes it. */
struct web_asset {
    const char *name;            /* the file name, "app.js" */
    const unsigned char *data;
    size_t len;
    const char *etag;            /* "\"<CRC (POSIX cksum)>-<bytes>\"" */
};

#include "web_assets.inc"   /* static const struct web_asset web_assets[WEB_N_ASSETS] */

/* Script and styles only from this server's own files (no inline script or style, no
 * other origin), JSON only from this server, no plugins, no framing. */
static const char page_csp[] =
    "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

static const struct {
    const char *suffix;
    const char *type;
} content_types[] = {
    { ".html", "text/html; charset=utf-8" },
    { ".css", "text/css; charset=utf-8" },
    { ".js", "text/javascript; charset=utf-8" },
    { ".svg", "image/svg+xml" },
};

static const char *content_type_of(const char *name)
{
    size_t len = strlen(name);
    for (size_t i = 0; i < sizeof content_types / sizeof content_types[0]; i++) {
        size_t n = strlen(content_types[i].suffix);
        if (len > n && !strcmp(name + len - n, content_types[i].suffix))
            return content_types[i].type;
    }
    return "application/octet-stream";
}

static const struct web_asset *asset_named(const char *name)
{
    for (size_t i = 0; i < WEB_N_ASSETS; i++)
        if (!strcmp(web_assets[i].name, name))
            return &web_assets[i];
    return NULL;
}

static void add_header(http_reply *out, const char *name, const char *value)
{
    if (out->n_headers < HTTP_REPLY_MAX_HEADERS) {
        out->headers[out->n_headers][0] = name;
        out->headers[out->n_headers][1] = value;
        out->n_headers++;
    }
}

/* The client's If-None-Match names @p etag (a list of tags, or "*"). */
static bool is_not_modified(const http_request *rq, const char *etag)
{
    const char *v = MHD_lookup_connection_value(rq->conn, MHD_HEADER_KIND,
                                                MHD_HTTP_HEADER_IF_NONE_MATCH);
    return v && (strstr(v, etag) || !strcmp(v, "*"));
}

/* 200 with the file, or 304 when the client holds this very version of it. Revalidated on
 * every load (no-cache), so a new binary's page is never mixed with an old one's script. */
static void serve(const http_request *rq, const struct web_asset *a, http_reply *out)
{
    bool is_fresh = is_not_modified(rq, a->etag);
    size_t len = is_fresh ? 0 : a->len;
    char *text = malloc(len + 1);
    if (!text) {
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "no memory for %s", a->name);
        return;
    }
    memcpy(text, a->data, len);
    out->status = is_fresh ? MHD_HTTP_NOT_MODIFIED : MHD_HTTP_OK;
    out->text = text;
    out->text_len = len;
    out->content_type = content_type_of(a->name);
    add_header(out, MHD_HTTP_HEADER_ETAG, a->etag);
    add_header(out, MHD_HTTP_HEADER_CACHE_CONTROL, "no-cache");
    add_header(out, "Content-Security-Policy", page_csp);
    add_header(out, "X-Content-Type-Options", "nosniff");
    add_header(out, "Referrer-Policy", "no-referrer");
}

void http_page_index(const http_request *rq, http_reply *out)
{
    const struct web_asset *a = asset_named("index.html");
    if (!a) {
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "this binary was built without web/");
        return;
    }
    serve(rq, a, out);
}

void http_page_asset(const http_request *rq, http_reply *out)
{
    const struct web_asset *a = asset_named(rq->path_arg);
    if (!a) {
        char hint[200];
        size_t used = (size_t)snprintf(hint, sizeof hint, "the page's files are:");
        for (size_t i = 0; i < WEB_N_ASSETS && used < sizeof hint; i++)
            used += (size_t)snprintf(hint + used, sizeof hint - used, " /assets/%s",
                                     web_assets[i].name);
        http_error_reply(out, HTTP_FAULT_NOT_FOUND, hint, "no file /assets/%s", rq->path_arg);
        return;
    }
    serve(rq, a, out);
}
