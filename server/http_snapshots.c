/* GET /v1/snapshots: the store's history. POST /v1/snapshots/{version}/promote and
 * POST /v1/snapshots/rollback: the admin routes.
 * Request threads never call LMDB: the history is a list the loader keeps (http_live.c), and
 * an admin action is handed to the loader, which writes to the store and follows the new
 * head at once, while the request waits for it with a deadline. */
#include "http.h"

#include <nettle/sha2.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

#include "cmd.h"

/* ---- GET /v1/snapshots ---- */

/* The summary of one manifest: what `weft snapshots list --json` gives, plus whether it is
 * live, its parent and the gate's verdict. */
static json_t *entry_json(const json_t *m, uint64_t live, uint64_t previous)
{
    json_t *e = cmd_snapshots_summary_json(m, previous);
    if (!e)
        return NULL;
    uint64_t version = (uint64_t)json_integer_value(json_object_get(m, "version"));
    const json_t *parent = json_object_get(m, "parent");
    const json_t *gate = json_object_get(m, "gate");
    json_t *verdict = json_is_object(gate)
                          ? json_pack("{s:b, s:O?}", "passed",
                                      json_is_true(json_object_get(gate, "passed")), "reason",
                                      json_object_get(gate, "reason"))
                          : json_null();
    bool bad = json_object_set_new(e, "is_live", json_boolean(version == live)) != 0;
    bad |= json_object_set_new(e, "parent", json_is_integer(parent) ? json_copy((json_t *)parent)
                                                                     : json_null()) != 0;
    bad |= json_object_set_new(e, "gate", verdict) != 0;
    if (bad) {
        json_decref(e);
        return NULL;
    }
    return e;
}

weft_err http_snapshots_read(weft_store *s, json_t **out, weft_error *err)
{
    uint64_t live = 0, previous = 0;
    json_t *all = NULL;
    weft_err rc = weft_store_head(s, &live, &previous, err);
    if (rc == WEFT_OK)
        rc = weft_store_list(s, &all, err);
    if (rc != WEFT_OK)
        return rc;
    char at[32];
    time_t now = time(NULL);
    struct tm tm;
    gmtime_r(&now, &tm);
    strftime(at, sizeof at, "%Y-%m-%dT%H:%M:%SZ", &tm);
    json_t *rows = json_array();
    size_t i;
    json_t *m;
    json_array_foreach(all, i, m)
        if (!rows || json_array_append_new(rows, entry_json(m, live, previous))) {
            json_decref(rows);
            rows = NULL;
            break;
        }
    json_decref(all);
    json_t *list = rows ? json_pack("{s:o, s:o, s:s, s:o}", "live",
                                    live ? json_integer((json_int_t)live) : json_null(),
                                    "previous",
                                    previous ? json_integer((json_int_t)previous) : json_null(),
                                    "listed_at", at, "snapshots", rows)
                        : NULL;
    if (!list)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory listing the store");
    *out = list;
    return WEFT_OK;
}

void http_snapshots_get(const http_request *rq, http_reply *out)
{
    json_t *list = http_live_snapshots(rq->live);
    if (!list) {
        http_error_reply(out, HTTP_FAULT_NO_SNAPSHOT,
                         "the server reads the store's history once the store exists; it "
                         "retries on its own",
                         "the store's history has not been read yet");
        return;
    }
    out->status = MHD_HTTP_OK;
    out->body = list;
}

/* ---- the admin routes ---- */

/* Whether the request carries the admin token as "Authorization: Bearer TOKEN". The token's
 * SHA-256 is compared with the configured one byte by byte without stopping early, so the
 * time taken says nothing about how much of it was right (nor, through hashing, its length).
 * Fills @p out with 404 (admin routes off) or 401 (missing or wrong token). */
static bool is_admin(const http_request *rq, http_reply *out)
{
    if (!rq->settings->has_admin_token) {
        http_error_reply(out, HTTP_FAULT_NOT_FOUND,
                         "the admin routes are off: start weft serve with --admin-token-file "
                         "FILE; 'weft snapshots promote|rollback' works on the store directly",
                         "admin routes are not enabled on this server");
        return false;
    }
    const char *auth = MHD_lookup_connection_value(rq->conn, MHD_HEADER_KIND,
                                                   MHD_HTTP_HEADER_AUTHORIZATION);
    static const char scheme[] = "Bearer ";
    if (!auth || strncmp(auth, scheme, sizeof scheme - 1) != 0) {
        out->is_auth_challenge = true;
        http_error_reply(out, HTTP_FAULT_UNAUTHORIZED, NULL,
                         "this admin route needs a bearer token");
        return false;
    }
    const char *token = auth + sizeof scheme - 1;
    uint8_t digest[SHA256_DIGEST_SIZE];
    struct sha256_ctx ctx;
    sha256_init(&ctx);
    sha256_update(&ctx, strlen(token), (const uint8_t *)token);
    sha256_digest(&ctx, sizeof digest, digest);
    volatile uint8_t diff = 0;
    for (size_t i = 0; i < sizeof digest; i++)
        diff |= (uint8_t)(digest[i] ^ rq->settings->admin_token_sha256[i]);
    if (diff != 0) {
        out->is_auth_challenge = true;
        http_error_reply(out, HTTP_FAULT_UNAUTHORIZED,
                         "the token is the content of the server's --admin-token-file, "
                         "without surrounding white space",
                         "the bearer token is wrong");
        return false;
    }
    return true;
}

/* The optional body {"force"?, "reason"?} into @p a (force only when @p takes_force); an
 * absent body means neither. Fills @p out (400, 422) when it is wrong. @p owner keeps the
 * parsed body alive for a->reason; the caller json_decref()s it. */
static bool read_action(const http_request *rq, bool takes_force, http_admin_action *a,
                        json_t **owner, http_reply *out)
{
    *owner = NULL;
    if (!rq->body || rq->body_len == 0)
        return true;
    json_t *body = http_route_body(rq, out);
    if (!body)
        return false;
    *owner = body;
    static const char *const with_force[] = { "force", "reason", NULL };
    static const char *const reason_only[] = { "reason", NULL };
    if (!http_route_known_keys(body, takes_force ? with_force : reason_only, "the body", out))
        return false;
    const json_t *force = json_object_get(body, "force");
    const json_t *reason = json_object_get(body, "reason");
    if (force && !json_is_boolean(force)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL, "'force' must be true or false");
        return false;
    }
    if (reason && !json_is_null(reason) &&
        (!json_is_string(reason) || json_string_length(reason) > 400)) {
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE, NULL,
                         "'reason' must be a string of at most 400 bytes");
        return false;
    }
    a->is_forced = json_is_true(force);
    a->reason = json_string_value(reason);
    if (a->reason && !a->reason[0])
        a->reason = NULL;
    return true;
}

static json_t *version_json(uint64_t v)
{
    return v ? json_integer((json_int_t)v) : json_null();
}

/* Hand @p a to the loader and answer with what came of it. */
static void act(const http_request *rq, const http_admin_action *a, http_reply *out)
{
    http_admin_result r;
    http_live_admin(rq->live, a, HTTP_ADMIN_WAIT_MS, &r);
    if (!r.is_done) {
        http_error_reply(out, HTTP_FAULT_BUSY, NULL,
                         "the store did not finish the %s within %d s",
                         a->is_rollback ? "rollback" : "promotion", HTTP_ADMIN_WAIT_MS / 1000);
        return;
    }
    switch (r.err.code) {
    case WEFT_OK:
        break;
    case WEFT_ERR_NOT_FOUND:
        http_error_from(out, &r.err, a->is_rollback
                                         ? "there is no previous version; promote a version "
                                           "by number instead (GET /v1/snapshots lists them)"
                                         : "GET /v1/snapshots lists the stored versions");
        return;
    case WEFT_ERR_INVALID:
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE,
                         "send {\"force\": true, \"reason\": \"why\"} to promote a rejected "
                         "version anyway (recorded in its manifest)",
                         "%s", r.err.msg);
        return;
    case WEFT_ERR_CORRUPT:
        http_error_reply(out, HTTP_FAULT_UNPROCESSABLE,
                         "'weft snapshots verify' shows every problem; nothing was changed",
                         "%s", r.err.msg);
        return;
    default:
        http_error_from(out, &r.err, "nothing was changed unless GET /v1/snapshots says so; "
                                     "the server log has the details");
        return;
    }
    json_t *body = json_pack("{s:s, s:o, s:o, s:o, s:b, s:s?}", "action",
                             a->is_rollback ? "rollback" : "promote", "live",
                             version_json(r.live), "previous", version_json(r.previous),
                             "serving", version_json(r.serving), "forced", a->is_forced,
                             "reason", a->reason);
    /* Answered from the version now served, not the one live when the request came in. */
    if (body && json_object_set_new(body, "version", version_json(r.serving))) {
        json_decref(body);
        body = NULL;
    }
    out->status = MHD_HTTP_OK;
    out->body = body;
}

/* The {version} of the path: a whole number from 1. */
static bool path_version(const http_request *rq, uint64_t *out, http_reply *reply)
{
    const char *s = rq->path_arg;
    uint64_t v = 0;
    bool ok = s && s[0];
    for (size_t i = 0; ok && s[i]; i++) {
        ok = s[i] >= '0' && s[i] <= '9' && v <= (UINT64_MAX - 9) / 10;
        v = v * 10 + (uint64_t)(s[i] - '0');
    }
    if (!ok || v == 0 || v > (uint64_t)INT64_MAX) {
        http_error_reply(reply, HTTP_FAULT_BAD_REQUEST,
                         "POST /v1/snapshots/{version}/promote takes a version number, as GET "
                         "/v1/snapshots lists them",
                         "'%.40s' is not a version number", s ? s : "");
        return false;
    }
    *out = v;
    return true;
}

void http_snapshots_promote(const http_request *rq, http_reply *out)
{
    http_admin_action a = { 0 };
    json_t *owner = NULL;
    if (is_admin(rq, out) && path_version(rq, &a.version, out) &&
        read_action(rq, true, &a, &owner, out))
        act(rq, &a, out);
    json_decref(owner);
}

void http_snapshots_rollback(const http_request *rq, http_reply *out)
{
    http_admin_action a = { .is_rollback = true };
    json_t *owner = NULL;
    if (is_admin(rq, out) && read_action(rq, false, &a, &owner, out))
        act(rq, &a, out);
    json_decref(owner);
}
