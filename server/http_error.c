/* What a failure means to a client: the one table from an error to an HTTP status and the
 * JSON body {"error": {"code": "...", "message": "...", "hint": "..."}}. */
#include "http.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "weft/io.h"

/* Indexed by http_fault. Codes are part of the API (openapi/openapi.yaml lists them); a
 * standard hint must stay true for every route that can return it. */
static const struct fault_row {
    unsigned status;
    const char *code;
    const char *hint;
} fault_table[] = {
    [HTTP_FAULT_BAD_REQUEST] = { MHD_HTTP_BAD_REQUEST, "bad_request",
                                 "the message names the argument at fault" },
    [HTTP_FAULT_NOT_FOUND] = { MHD_HTTP_NOT_FOUND, "not_found",
                               "names are case-sensitive and must match the training data" },
    [HTTP_FAULT_METHOD] = { MHD_HTTP_METHOD_NOT_ALLOWED, "method_not_allowed",
                            "the Allow header lists the methods this path takes" },
    [HTTP_FAULT_TOO_LARGE] = { MHD_HTTP_CONTENT_TOO_LARGE, "too_large",
                               "ask for less; the limits are set when the server starts" },
    [HTTP_FAULT_INTERNAL] = { MHD_HTTP_INTERNAL_SERVER_ERROR, "internal",
                              "the server log has the details" },
    [HTTP_FAULT_NO_SNAPSHOT] = { MHD_HTTP_SERVICE_UNAVAILABLE, "no_snapshot",
                                 "no snapshot is live yet: run 'weft train --store DIR ...'; "
                                 "the server picks it up without a restart" },
    [HTTP_FAULT_UNAUTHORIZED] = { MHD_HTTP_UNAUTHORIZED, "unauthorized",
                                  "send the admin token as 'Authorization: Bearer TOKEN'" },
    [HTTP_FAULT_UNPROCESSABLE] = { MHD_HTTP_UNPROCESSABLE_CONTENT, "unprocessable",
                                   "the message names the field at fault" },
    [HTTP_FAULT_BUSY] = { MHD_HTTP_SERVICE_UNAVAILABLE, "busy",
                          "the action may still complete: GET /v1/snapshots shows the store's "
                          "head" },
};

/* How a weft error code reaches a client. */
static http_fault fault_of(weft_err code)
{
    switch (code) {
    case WEFT_ERR_PARSE:
    case WEFT_ERR_INVALID: return HTTP_FAULT_BAD_REQUEST;
    case WEFT_ERR_NOT_FOUND: return HTTP_FAULT_NOT_FOUND;
    case WEFT_ERR_LIMIT: return HTTP_FAULT_TOO_LARGE;
    case WEFT_OK:
    case WEFT_ERR_NOMEM:
    case WEFT_ERR_IO:
    case WEFT_ERR_CORRUPT:
    case WEFT_ERR_STORE: return HTTP_FAULT_INTERNAL;
    }
    return HTTP_FAULT_INTERNAL;
}

/* A JSON string of @p s, cutting at most a few bytes off the end when a truncated message
 * ended inside a UTF-8 sequence; NULL when the text is still not UTF-8 (never echoed). */
static json_t *text_or_null(const char *s)
{
    size_t len = strlen(s);
    for (size_t cut = 0; cut < 4 && cut <= len; cut++)
        if (weft_io_utf8_valid(s, len - cut))
            return json_stringn(s, len - cut);
    return NULL;
}

static void reply_with(http_reply *r, http_fault fault, const char *hint, const char *message)
{
    const struct fault_row *row = &fault_table[fault];
    json_t *text = text_or_null(message);
    if (!text)
        text = json_string("the request holds text that is not UTF-8");
    json_t *error = json_object();
    json_t *body = json_object();
    bool bad = !error || !body;
    bad |= json_object_set_new(error, "code", json_string(row->code)) != 0;
    bad |= json_object_set_new(error, "message", text) != 0;
    bad |= json_object_set_new(error, "hint", text_or_null(hint ? hint : row->hint)) != 0;
    bad |= json_object_set_new(body, "error", error) != 0;   /* takes error even on failure */
    json_decref(r->body);
    r->status = row->status;
    r->body = bad ? NULL : body;
    if (bad)
        json_decref(body);
}

void http_error_reply(http_reply *r, http_fault fault, const char *hint, const char *fmt, ...)
{
    char message[256];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(message, sizeof message, fmt, ap);
    va_end(ap);
    reply_with(r, fault, hint, message);
}

void http_error_from(http_reply *r, const weft_error *err, const char *hint)
{
    reply_with(r, fault_of(err->code), hint, err->msg[0] ? err->msg : weft_err_name(err->code));
}
