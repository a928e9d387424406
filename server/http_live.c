/* The loader: the one thread that talks to LMDB. It follows the store's head, opens a newly
 * promoted snapshot (weft_snapshot_open checks every CRC and pre-faults the pages), builds
 * its link and label views and publishes them. Request threads only copy the published model and take a
 * snapshot reference under a mutex, so they never wait for LMDB or for a load. */
#include "http.h"

#include <errno.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/store.h"

struct http_live {
    const char *dir;
    unsigned poll_ms;
    weft_store *store;          /* loader thread only (and start/stop around it) */
    uint64_t loaded;            /* version the loader last published (0 none) */
    uint64_t refused;           /* version that failed to open; not retried */
    char last_problem[256];     /* last message logged, so a problem is logged once */

    pthread_t thread;
    bool has_thread;
    pthread_mutex_t lock;       /* guards current and is_stopping */
    pthread_cond_t wake;        /* signalled by http_live_stop() */
    bool is_stopping;
    /* The published model: the one mutable global state of the server. Set by the loader
     * only; readers copy it and acquire its snapshot while holding lock. NULL when no
     * snapshot is live. The loader owns this copy's reference. */
    http_model *current;
};

/* Log @p err unless it repeats the last problem logged (a store that is not there yet would
 * otherwise fill the log at every poll). */
static void log_problem(http_live *live, const char *what, const weft_error *err)
{
    if (!strcmp(live->last_problem, err->msg))
        return;
    snprintf(live->last_problem, sizeof live->last_problem, "%s", err->msg);
    http_log("%s: %s", what, err->msg[0] ? err->msg : weft_err_name(err->code));
}

/* Swap in @p next (may be NULL: nothing live) and release the model it replaces. Requests
 * that still hold the old snapshot keep it alive until their last release. */
static void publish(http_live *live, http_model *next)
{
    pthread_mutex_lock(&live->lock);
    http_model *old = live->current;
    live->current = next;
    pthread_mutex_unlock(&live->lock);
    live->loaded = next ? next->version : 0;
    if (old) {
        weft_snapshot_release(old->snap);
        free(old);
    }
}

/* Open @p version and build what requests need from it: its link model, its label model,
 * or both. A part that is there but inconsistent keeps the whole snapshot from being served;
 * so does a snapshot that holds neither. */
static weft_err load(http_live *live, uint64_t version, http_model **out, weft_error *err)
{
    http_model *m = calloc(1, sizeof *m);
    if (!m)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory to load version %llu",
                              (unsigned long long)version);
    weft_err rc = weft_snapshot_open(live->store, version, &m->snap, err);
    if (rc != WEFT_OK) {
        free(m);
        return rc;
    }
    m->version = version;
    weft_error part_err;   /* a missing part is no error: its message is dropped */
    weft_error_clear(&part_err);
    rc = weft_snapshot_link_view(m->snap, &m->links, &part_err);
    m->has_links = rc == WEFT_OK;
    if (rc == WEFT_OK || rc == WEFT_ERR_NOT_FOUND) {
        rc = weft_snapshot_label_view(m->snap, &m->labels, &part_err);
        m->has_labels = rc == WEFT_OK;
    }
    if (rc == WEFT_ERR_NOT_FOUND)
        rc = m->has_links ? WEFT_OK
                          : weft_error_set(&part_err, WEFT_ERR_CORRUPT,
                                           "version %llu holds neither a link model nor a "
                                           "label model", (unsigned long long)version);
    if (rc != WEFT_OK) {
        weft_snapshot_release(m->snap);
        free(m);
        if (err)
            *err = part_err;
        return rc;
    }
    *out = m;
    return WEFT_OK;
}

/* " (link model only)" and the like, for the log line of a newly served version. */
static const char *parts_note(const http_model *m)
{
    if (m->has_links && m->has_labels)
        return " (link and label models)";
    return m->has_links ? " (link model only)" : " (label model only)";
}

/* One poll: open the store if needed, read the head, follow a change. */
static void poll_once(http_live *live)
{
    weft_error err;
    weft_error_clear(&err);
    if (!live->store
        && weft_store_open(live->dir, WEFT_STORE_READONLY, 0, &live->store, &err) != WEFT_OK) {
        live->store = NULL;
        log_problem(live, "store not readable yet (will retry)", &err);
        return;
    }
    uint64_t version = 0, previous = 0;
    weft_err rc = weft_store_head(live->store, &version, &previous, &err);
    if (rc == WEFT_ERR_LIMIT) {
        /* A writer grew the store's map beyond ours. Remapping moves the map, so it waits
         * until no snapshot is held: stop handing the current one out (requests answer 503
         * meanwhile), let the requests that hold it finish, remap, then load again. */
        if (live->loaded) {
            http_log("the store's map grew beyond this server's: reloading version %llu once "
                     "the requests in flight are done", (unsigned long long)live->loaded);
            publish(live, NULL);
        }
        if (weft_store_remap(live->store, &err) != WEFT_OK) {
            log_problem(live, "waiting to adopt the store's larger map", &err);
            return;
        }
        rc = weft_store_head(live->store, &version, &previous, &err);
    }
    if (rc != WEFT_OK) {
        log_problem(live, "cannot read the store's head", &err);
        return;
    }
    if (version == live->loaded)
        return;
    if (version == 0) {
        http_log("no version is live any more; predictions answer 503");
        publish(live, NULL);
        return;
    }
    if (version == live->refused)
        return;
    http_model *m = NULL;
    if (load(live, version, &m, &err) != WEFT_OK) {
        /* A stored version never changes, so a checksum or structure failure is final;
         * anything else (LMDB trouble, memory) is tried again at the next poll. */
        if (err.code == WEFT_ERR_CORRUPT || err.code == WEFT_ERR_NOT_FOUND)
            live->refused = version;
        char what[96];
        if (live->loaded)
            snprintf(what, sizeof what, "version %llu not served, version %llu stays live",
                     (unsigned long long)version, (unsigned long long)live->loaded);
        else
            snprintf(what, sizeof what, "version %llu not served",
                     (unsigned long long)version);
        log_problem(live, what, &err);
        return;
    }
    live->last_problem[0] = '\0';
    http_log("serving version %llu%s", (unsigned long long)version, parts_note(m));
    publish(live, m);
}

/* Sleep @p ms or until http_live_stop(); true when stopping. */
static bool wait_or_stop(http_live *live, unsigned ms)
{
    struct timespec until;
    clock_gettime(CLOCK_MONOTONIC, &until);
    until.tv_sec += ms / 1000;
    until.tv_nsec += (long)(ms % 1000) * 1000000L;
    if (until.tv_nsec >= 1000000000L) {
        until.tv_sec += 1;
        until.tv_nsec -= 1000000000L;
    }
    pthread_mutex_lock(&live->lock);
    int rc = 0;
    while (!live->is_stopping && rc != ETIMEDOUT)
        rc = pthread_cond_timedwait(&live->wake, &live->lock, &until);
    bool is_stopping = live->is_stopping;
    pthread_mutex_unlock(&live->lock);
    return is_stopping;
}

static void *loader_main(void *arg)
{
    http_live *live = arg;
    while (!wait_or_stop(live, live->poll_ms))
        poll_once(live);
    return NULL;
}

static weft_err init_sync(http_live *live, weft_error *err)
{
    pthread_condattr_t attr;
    if (pthread_condattr_init(&attr) != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot set up the loader");
    int rc = pthread_condattr_setclock(&attr, CLOCK_MONOTONIC);
    if (rc == 0)
        rc = pthread_cond_init(&live->wake, &attr);
    pthread_condattr_destroy(&attr);
    if (rc != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot set up the loader: %s", strerror(rc));
    rc = pthread_mutex_init(&live->lock, NULL);
    if (rc != 0) {
        pthread_cond_destroy(&live->wake);
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot set up the loader: %s", strerror(rc));
    }
    return WEFT_OK;
}

weft_err http_live_start(const char *dir, unsigned poll_ms, http_live **out, weft_error *err)
{
    http_live *live = calloc(1, sizeof *live);
    if (!live)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the loader");
    live->dir = dir;
    live->poll_ms = poll_ms;
    weft_err rc = init_sync(live, err);
    if (rc != WEFT_OK) {
        free(live);
        return rc;
    }
    poll_once(live);
    int prc = pthread_create(&live->thread, NULL, loader_main, live);
    if (prc != 0) {
        http_live_stop(live);
        return weft_error_set(err, WEFT_ERR_INVALID, "cannot start the loader thread: %s",
                              strerror(prc));
    }
    live->has_thread = true;
    *out = live;
    return WEFT_OK;
}

void http_live_stop(http_live *live)
{
    if (!live)
        return;
    if (live->has_thread) {
        pthread_mutex_lock(&live->lock);
        live->is_stopping = true;
        pthread_cond_signal(&live->wake);
        pthread_mutex_unlock(&live->lock);
        pthread_join(live->thread, NULL);
    }
    publish(live, NULL);
    weft_store_close(live->store);
    pthread_cond_destroy(&live->wake);
    pthread_mutex_destroy(&live->lock);
    free(live);
}

bool http_live_acquire(http_live *live, http_model *out)
{
    pthread_mutex_lock(&live->lock);
    const http_model *m = live->current;
    if (m) {
        *out = *m;
        weft_snapshot_acquire(out->snap);
    }
    pthread_mutex_unlock(&live->lock);
    if (!m)
        memset(out, 0, sizeof *out);
    return m != NULL;
}

void http_model_release(http_model *m)
{
    weft_snapshot_release(m->snap);
    memset(m, 0, sizeof *m);
}
