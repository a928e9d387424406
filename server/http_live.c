/* The loader: the one thread that talks to LMDB. It follows the store's head, opens a newly
 * promoted snapshot (weft_snapshot_open checks every CRC and pre-faults the pages), builds
 * its link and label views and publishes them. Request threads only copy the published model and take a
 * snapshot reference under a mutex, so they never wait for LMDB or for a load. */
#include "http.h"

#include <errno.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#include "weft/index.h"
#include "weft/names.h"
#include "weft/store.h"
#include "weft/topk.h"

/* How often the loader looks at the input files' sizes and times for the coverage check. */
#define COVERAGE_CHECK_MS 5000

/* One admin action on its way through the loader. Shared by the request that queued it and
 * the loader; the last of the two to let go frees it (refs, under lock). */
struct admin_job {
    struct admin_job *next;
    http_admin_action action;
    char reason[512];
    http_admin_result result;
    int refs;
};

struct http_live {
    const char *dir;
    unsigned poll_ms;
    bool is_writable;           /* the store is opened for admin writes */
    weft_store *store;          /* loader thread only (and start/stop around it) */
    uint64_t loaded;            /* version the loader last published (0 none) */
    uint64_t refused;           /* version that failed to open; not retried */
    char last_problem[256];     /* last message logged, so a problem is logged once */

    pthread_t thread;
    bool has_thread;
    pthread_mutex_t lock;       /* guards current and is_stopping */
    pthread_cond_t wake;        /* signalled by http_live_stop() */
    bool is_stopping;
    pthread_cond_t done;        /* signalled when an admin job finishes */
    struct admin_job *jobs;     /* queued admin actions, oldest first (under lock) */
    /* The store's history for GET /v1/snapshots, built by the loader, copied by requests
     * (under lock); NULL until first read. */
    json_t *history;
    uint64_t history_live, history_previous;   /* the head it was read at (loader only) */
    struct timespec history_at;                /* when it was read (loader only) */
    /* The published model: the one mutable global state of the server. Set by the loader
     * only; readers copy it and acquire its snapshot while holding lock. NULL when no
     * snapshot is live. The loader owns this copy's reference. */
    http_model *current;
    /* For the model checks (http_health.c) and /metrics. */
    atomic_uint_fast64_t n_swaps, n_load_failures;
    uint64_t failed_version;    /* the last version counted as a load failure (loader only) */
    http_live_failure failure;  /* the last load failure, for /v1/health (written by the
                                   loader under lock, read by requests under lock) */
    bool wants_drift;           /* the current model was loaded with no model held: measure
                                   its drift from drift_previous at the next poll (loader) */
    uint64_t drift_previous;
    char *inputs;               /* --inputs, comma-separated, or NULL (under lock) */
    unsigned inputs_gen;        /* bumped by http_live_set_inputs (under lock) */
    unsigned coverage_gen;      /* the inputs_gen coverage was last measured with (loader) */
    uint64_t coverage_sig;      /* sizes and times of the files it read (loader) */
    struct timespec coverage_at;   /* when the loader last looked at them */
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
        if (rc == WEFT_ERR_NOT_FOUND && m->has_links)   /* a link model alone */
            rc = WEFT_OK;
    }
    if (rc == WEFT_OK) {   /* node types are optional; broken ones refuse the snapshot */
        weft_err trc = weft_snapshot_types_view(m->snap, &m->types, &part_err);
        m->has_types = trc == WEFT_OK;
        if (trc != WEFT_OK && trc != WEFT_ERR_NOT_FOUND)
            rc = trc;
    }
    if (rc == WEFT_OK && m->has_links)   /* an index listed but broken refuses it too */
        rc = weft_link_index_view_of(m->snap, &m->links, &m->index, &part_err);
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

static double unix_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec / 1e9;
}

/* Publish a copy of the current model with @p checks: the same version and snapshot (one
 * more reference), new figures. Not a swap. Loader only. */
static void amend(http_live *live, const http_checks *checks)
{
    http_model *copy = live->current ? malloc(sizeof *copy) : NULL;
    if (!copy)
        return;
    *copy = *live->current;
    copy->checks = *checks;
    weft_snapshot_acquire(copy->snap);
    publish(live, copy);
}

/* Drift of the current model (loaded with no model held: at start-up, or after the map was
 * remapped) from the store's previous version, opened only for this. Runs at the loader's
 * next poll, so that start-up does not wait for it. */
static void drift_from_store(http_live *live)
{
    if (!live->wants_drift || !live->current)
        return;
    live->wants_drift = false;
    uint64_t previous = live->drift_previous;
    http_model now = *live->current;
    weft_error err;
    weft_error_clear(&err);
    http_model *before = NULL;
    if (!previous || previous == now.version) {
        now.checks.drift = HTTP_MEASURE_NONE;
        snprintf(now.checks.drift_note, sizeof now.checks.drift_note,
                 "the store has no previous version to compare with");
    } else if (load(live, previous, &before, &err) != WEFT_OK) {
        now.checks.drift = HTTP_MEASURE_FAILED;
        snprintf(now.checks.drift_note, sizeof now.checks.drift_note,
                 "the previous version %llu could not be loaded: %.80s",
                 (unsigned long long)previous, err.msg);
    } else {
        http_checks_drift(&now, before);
        weft_snapshot_release(before->snap);
        free(before);
    }
    amend(live, &now.checks);
}

static char *inputs_copy(http_live *live, unsigned *gen, bool *is_short);
static void cover(http_live *live, http_model *m, char *buf, unsigned gen);

/* Reads of the new matrix just before the swap (see warm): WARM_PASSES scans, fewer when
 * they would read more than WARM_BYTES (at least one). */
enum { WARM_PASSES = 32 };
#define WARM_BYTES ((size_t)1 << 30)

/* Read what a link query reads, as a query reads it, just before the swap: the matrix
 * through the scan kernel, and the index's codes through the index's. The blobs are mapped
 * by then (the checks read every one), but the checks and the drift leave the caches
 * holding whatever they read last, the old matrix among it; after this they hold the new
 * rows much as after the queries that follow a swap (bench/swap_first_query.py measures
 * it). Best effort: out of memory, no warming. */
static void warm(const http_model *m)
{
    const weft_link_view *v = &m->links;
    if (!m->has_links || v->n_nodes == 0 || v->dim == 0)
        return;
    enum { K = 10 };
    float *q = malloc(v->dim * sizeof *q), score[K];
    uint32_t id[K];
    if (!q)
        return;
    size_t bytes = v->n_nodes * v->dim * sizeof(float);
    size_t passes = WARM_BYTES / bytes < WARM_PASSES ? WARM_BYTES / bytes : WARM_PASSES;
    weft_model_query(&v->model, 0, 0, false, q);
    for (size_t pass = 0; pass < (passes ? passes : 1); pass++) {
        weft_topk_scan(v->entity, v->n_nodes, v->dim, q, K, NULL, id, score);
        weft_error err;
        size_t n = 0;
        const weft_link_index_view *ix = &m->index;
        if (ix->kind == WEFT_LINK_INDEX_INT8)
            weft_index_int8_search(&ix->codes, v->entity, q, K, ix->oversample, NULL, id, score,
                                   &n, &err);
        else if (weft_link_index_is_clustered(ix->kind))
            weft_index_ivf_search(&ix->ivf, v->entity, q, K, ix->nprobe, ix->oversample, NULL,
                                  id, score, &n, &err);
    }
    free(q);
}

/* Make @p m live: measure it (blobs, norms, drift from the model it replaces, coverage of
 * the inputs) and warm it before the swap, so that requests keep the old model meanwhile
 * and the first requests on the new one share no core with the measuring. */
static void make_live(http_live *live, http_model *m, uint64_t previous)
{
    weft_error err;
    weft_error_clear(&err);
    if (http_checks_scan(m, &err) != WEFT_OK)
        http_log("version %llu: its checks are incomplete: %s", (unsigned long long)m->version,
                 err.msg);
    const http_model *held = live->current;   /* only the loader changes it */
    if (held)
        http_checks_drift(m, held);
    unsigned gen;
    bool is_short;
    char *buf = inputs_copy(live, &gen, &is_short);
    if (!is_short)   /* else watch_inputs measures it at the next poll */
        cover(live, m, buf, gen);
    free(buf);
    warm(m);
    m->checks.loaded = unix_now();
    publish(live, m);
    atomic_fetch_add(&live->n_swaps, 1);
    live->wants_drift = held == NULL;
    live->drift_previous = previous;
}

/* Count a version that failed to load, once per version (a transient failure is retried at
 * every poll), and keep why for /v1/health. */
static void count_failure(http_live *live, uint64_t version, const weft_error *err)
{
    pthread_mutex_lock(&live->lock);
    http_live_failure *f = &live->failure;
    if (f->version != version || !f->is_current)
        f->at = unix_now();
    f->version = version;
    f->is_current = true;
    const char *why = err->msg[0] ? err->msg : weft_err_name(err->code);
    snprintf(f->message, sizeof f->message, "%.159s", why);
    pthread_mutex_unlock(&live->lock);
    if (live->failed_version == version)
        return;
    live->failed_version = version;
    atomic_fetch_add(&live->n_load_failures, 1);
}

/* The store's live version is @p version again after a failure: a refused one (it stays the
 * live version the server cannot serve), or one that is served or gone (the failure is past). */
static void settle_failure(http_live *live, uint64_t version)
{
    bool is_current = version && version == live->refused && version == live->failure.version;
    if (live->failure.is_current == is_current)   /* only the loader writes it */
        return;
    pthread_mutex_lock(&live->lock);
    live->failure.is_current = is_current;
    pthread_mutex_unlock(&live->lock);
}

static void refresh_history(http_live *live, bool is_forced);

/* One poll: open the store if needed, read the head, follow a change. */
static void poll_once(http_live *live)
{
    weft_error err;
    weft_error_clear(&err);
    if (!live->store
        && weft_store_open(live->dir, live->is_writable ? 0 : WEFT_STORE_READONLY, 0,
                           &live->store, &err) != WEFT_OK) {
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
    if (version == live->loaded || version == 0 || version == live->refused)
        settle_failure(live, version);
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
        count_failure(live, version, &err);
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
    settle_failure(live, version);
    refresh_history(live, false);   /* now, not just after the swap, when requests want the core */
    http_log("serving version %llu%s", (unsigned long long)version, parts_note(m));
    make_live(live, m, previous);
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
    while (!live->is_stopping && !live->jobs && rc != ETIMEDOUT)
        rc = pthread_cond_timedwait(&live->wake, &live->lock, &until);
    bool is_stopping = live->is_stopping;
    pthread_mutex_unlock(&live->lock);
    return is_stopping;
}

/* ---- the store's history and admin actions (loader thread) ---- */

static double ms_since(const struct timespec *t)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    return (double)(now.tv_sec - t->tv_sec) * 1e3 + (double)(now.tv_nsec - t->tv_nsec) / 1e6;
}

/* Reread the history when @p is_forced, when the head moved since it was read, or when it
 * is older than HTTP_SNAPSHOTS_REFRESH_MS (a version written without a promotion leaves the
 * head alone). A failed read keeps the list there was. */
static void refresh_history(http_live *live, bool is_forced)
{
    if (!live->store)
        return;
    weft_error err;
    weft_error_clear(&err);
    uint64_t head = 0, previous = 0;
    if (weft_store_head(live->store, &head, &previous, &err) != WEFT_OK)
        return;
    if (!is_forced && live->history && head == live->history_live &&
        previous == live->history_previous && ms_since(&live->history_at) < HTTP_SNAPSHOTS_REFRESH_MS)
        return;
    json_t *list = NULL;
    if (http_snapshots_read(live->store, &list, &err) != WEFT_OK) {
        log_problem(live, "cannot read the store's history", &err);
        return;
    }
    live->history_live = head;
    live->history_previous = previous;
    clock_gettime(CLOCK_MONOTONIC, &live->history_at);
    pthread_mutex_lock(&live->lock);
    json_t *old = live->history;
    live->history = list;
    pthread_mutex_unlock(&live->lock);
    json_decref(old);
}

/* Drop one reference to @p job (under lock); the last frees it. */
static void job_unref(struct admin_job *job)
{
    if (--job->refs == 0)
        free(job);
}

/* Carry out @p job on the store, then follow the new head at once. */
static void run_job(http_live *live, struct admin_job *job)
{
    http_admin_result *r = &job->result;
    const http_admin_action *a = &job->action;
    weft_error_clear(&r->err);
    weft_store_change how = { a->reason, a->is_forced };
    if (!live->store)
        weft_error_set(&r->err, WEFT_ERR_STORE, "the store %s is not open yet", live->dir);
    else if (a->is_rollback)
        weft_store_rollback(live->store, &how, NULL, &r->err);
    else
        weft_store_promote_with(live->store, a->version, &how, &r->err);
    if (r->err.code == WEFT_OK) {
        if (a->is_rollback)
            http_log("admin: rolled back%s%s", a->reason ? ": " : "", a->reason ? a->reason : "");
        else
            http_log("admin: promoted version %llu%s%s%s", (unsigned long long)a->version,
                     a->is_forced ? " (forced)" : "", a->reason ? ": " : "",
                     a->reason ? a->reason : "");
        poll_once(live);
    }
    refresh_history(live, true);
    weft_error ignored;
    if (live->store)
        weft_store_head(live->store, &r->live, &r->previous, &ignored);
    r->serving = live->loaded;
}

/* Run every queued job, oldest first, and wake the requests waiting for them. */
static void run_jobs(http_live *live)
{
    for (;;) {
        pthread_mutex_lock(&live->lock);
        struct admin_job *job = live->jobs;
        if (job)
            live->jobs = job->next;
        pthread_mutex_unlock(&live->lock);
        if (!job)
            return;
        run_job(live, job);
        pthread_mutex_lock(&live->lock);
        job->result.is_done = true;
        pthread_cond_broadcast(&live->done);
        job_unref(job);
        pthread_mutex_unlock(&live->lock);
    }
}

/* ---- the input files of the coverage check (loader thread) ---- */

/* The files to read: --inputs, else the edge files the live manifest names (roles edges,
 * valid, test) that can be read from here. Paths point into @p buf or the manifest. */
static size_t input_paths(const http_model *m, char *buf, const char **paths, size_t max)
{
    size_t n = 0;
    if (buf) {
        char *save = NULL;
        for (char *p = strtok_r(buf, ",", &save); p && n < max; p = strtok_r(NULL, ",", &save))
            if (*p)
                paths[n++] = p;
        return n;
    }
    const json_t *inputs = json_object_get(weft_snapshot_manifest(m->snap), "inputs");
    size_t i;
    const json_t *in;
    json_array_foreach(inputs, i, in) {
        const char *role = json_string_value(json_object_get(in, "role"));
        const char *path = json_string_value(json_object_get(in, "path"));
        struct stat st;
        if (n < max && role && path && stat(path, &st) == 0
            && (!strcmp(role, "edges") || !strcmp(role, "valid") || !strcmp(role, "test")))
            paths[n++] = path;
    }
    return n;
}

/* FNV-1a over each path with its size and modification time: changes when a file does. */
static uint64_t files_signature(const char *const *paths, size_t n)
{
    uint64_t h = 1469598103934665603ull;
    for (size_t i = 0; i < n; i++) {
        struct stat st;
        uint64_t v[3] = { 0, 0, 0 };
        if (stat(paths[i], &st) == 0) {
            v[0] = (uint64_t)st.st_size;
            v[1] = (uint64_t)st.st_mtim.tv_sec;
            v[2] = (uint64_t)st.st_mtim.tv_nsec;
        }
        const unsigned char *bytes[2] = { (const unsigned char *)paths[i],
                                          (const unsigned char *)v };
        size_t lens[2] = { strlen(paths[i]), sizeof v };
        for (int k = 0; k < 2; k++)
            for (size_t j = 0; j < lens[k]; j++)
                h = (h ^ bytes[k][j]) * 1099511628211ull;
    }
    return h;
}

/* Measure coverage for a newly live version, for new --inputs, and when an input file
 * changed (looked at every COVERAGE_CHECK_MS); publish the figures with amend(). */
/* A copy of --inputs (NULL: none given, or *is_short when out of memory) and its
 * generation. */
static char *inputs_copy(http_live *live, unsigned *gen, bool *is_short)
{
    pthread_mutex_lock(&live->lock);
    *gen = live->inputs_gen;
    char *buf = live->inputs ? strdup(live->inputs) : NULL;
    *is_short = live->inputs && !buf;
    pthread_mutex_unlock(&live->lock);
    return buf;
}

/* Measure @p m's coverage of the input files (--inputs @p buf, else the manifest's) and
 * keep their signature, so that watch_inputs notices when they change. Loader only. */
static void cover(http_live *live, http_model *m, char *buf, unsigned gen)
{
    clock_gettime(CLOCK_MONOTONIC, &live->coverage_at);
    const char *paths[64];
    size_t n = input_paths(m, buf, paths, sizeof paths / sizeof paths[0]);
    http_checks_coverage(m, paths, n);
    live->coverage_sig = files_signature(paths, n);
    live->coverage_gen = gen;
}

/* Measure the coverage again when --inputs changed or, every COVERAGE_CHECK_MS, when the
 * files did (their sizes and times). */
static void watch_inputs(http_live *live)
{
    if (!live->current)
        return;
    unsigned gen;
    bool is_short;
    char *buf = inputs_copy(live, &gen, &is_short);
    bool is_due = live->current->checks.coverage == HTTP_MEASURE_PENDING
                  || gen != live->coverage_gen;
    if (is_short || (!is_due && ms_since(&live->coverage_at) < COVERAGE_CHECK_MS)) {
        free(buf);
        return;
    }
    clock_gettime(CLOCK_MONOTONIC, &live->coverage_at);
    const char *paths[64];
    size_t n = input_paths(live->current, buf, paths, sizeof paths / sizeof paths[0]);
    if (is_due || files_signature(paths, n) != live->coverage_sig) {
        http_model now = *live->current;
        cover(live, &now, buf, gen);
        amend(live, &now.checks);
    }
    free(buf);
}

weft_err http_live_set_inputs(http_live *live, const char *inputs, weft_error *err)
{
    char *copy = inputs ? strdup(inputs) : NULL;
    if (inputs && !copy)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for --inputs");
    pthread_mutex_lock(&live->lock);
    free(live->inputs);
    live->inputs = copy;
    live->inputs_gen++;
    pthread_mutex_unlock(&live->lock);
    return WEFT_OK;
}

void http_live_get_counts(http_live *live, http_live_counts *out)
{
    out->swaps = atomic_load(&live->n_swaps);
    out->load_failures = atomic_load(&live->n_load_failures);
}

static void *loader_main(void *arg)
{
    http_live *live = arg;
    while (!wait_or_stop(live, live->poll_ms)) {
        run_jobs(live);
        poll_once(live);
        drift_from_store(live);
        watch_inputs(live);
        refresh_history(live, false);
    }
    return NULL;
}

void http_live_admin(http_live *live, const http_admin_action *a, unsigned timeout_ms,
                     http_admin_result *out)
{
    memset(out, 0, sizeof *out);
    struct admin_job *job = calloc(1, sizeof *job);
    if (!job) {
        out->is_done = true;
        weft_error_set(&out->err, WEFT_ERR_NOMEM, "no memory for an admin action");
        return;
    }
    job->action = *a;
    if (a->reason) {
        snprintf(job->reason, sizeof job->reason, "%s", a->reason);
        job->action.reason = job->reason;
    }
    job->refs = 2;
    struct timespec until;
    clock_gettime(CLOCK_MONOTONIC, &until);
    until.tv_sec += timeout_ms / 1000;
    until.tv_nsec += (long)(timeout_ms % 1000) * 1000000L;
    if (until.tv_nsec >= 1000000000L) {
        until.tv_sec += 1;
        until.tv_nsec -= 1000000000L;
    }
    pthread_mutex_lock(&live->lock);
    struct admin_job **tail = &live->jobs;
    while (*tail)
        tail = &(*tail)->next;
    *tail = job;
    pthread_cond_signal(&live->wake);
    int rc = 0;
    while (!job->result.is_done && rc != ETIMEDOUT)
        rc = pthread_cond_timedwait(&live->done, &live->lock, &until);
    *out = job->result;
    job_unref(job);
    pthread_mutex_unlock(&live->lock);
}

void http_live_get_failure(http_live *live, http_live_failure *out)
{
    pthread_mutex_lock(&live->lock);
    *out = live->failure;
    pthread_mutex_unlock(&live->lock);
}

json_t *http_live_snapshots(http_live *live)
{
    pthread_mutex_lock(&live->lock);
    json_t *copy = live->history ? json_deep_copy(live->history) : NULL;
    pthread_mutex_unlock(&live->lock);
    return copy;
}

static weft_err init_sync(http_live *live, weft_error *err)
{
    pthread_condattr_t attr;
    if (pthread_condattr_init(&attr) != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot set up the loader");
    int rc = pthread_condattr_setclock(&attr, CLOCK_MONOTONIC);
    if (rc == 0)
        rc = pthread_cond_init(&live->wake, &attr);
    if (rc == 0 && (rc = pthread_cond_init(&live->done, &attr)) != 0)
        pthread_cond_destroy(&live->wake);
    pthread_condattr_destroy(&attr);
    if (rc != 0)
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot set up the loader: %s", strerror(rc));
    rc = pthread_mutex_init(&live->lock, NULL);
    if (rc != 0) {
        pthread_cond_destroy(&live->wake);
        pthread_cond_destroy(&live->done);
        return weft_error_set(err, WEFT_ERR_NOMEM, "cannot set up the loader: %s", strerror(rc));
    }
    return WEFT_OK;
}

weft_err http_live_start(const char *dir, unsigned poll_ms, bool is_writable, const char *inputs,
                         http_live **out, weft_error *err)
{
    http_live *live = calloc(1, sizeof *live);
    if (!live)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the loader");
    live->dir = dir;
    live->poll_ms = poll_ms;
    live->is_writable = is_writable;
    atomic_init(&live->n_swaps, 0);
    atomic_init(&live->n_load_failures, 0);
    weft_err rc = init_sync(live, err);
    if (rc != WEFT_OK) {
        free(live);
        return rc;
    }
    if (inputs && (rc = http_live_set_inputs(live, inputs, err)) != WEFT_OK) {
        http_live_stop(live);
        return rc;
    }
    poll_once(live);
    refresh_history(live, true);
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
    /* Requests still waiting (none once the daemon stopped) learn that nothing was done. */
    pthread_mutex_lock(&live->lock);
    while (live->jobs) {
        struct admin_job *job = live->jobs;
        live->jobs = job->next;
        weft_error_set(&job->result.err, WEFT_ERR_STORE, "the server is stopping");
        job->result.is_done = true;
        job_unref(job);
    }
    pthread_cond_broadcast(&live->done);
    pthread_mutex_unlock(&live->lock);
    json_decref(live->history);
    free(live->inputs);
    publish(live, NULL);
    weft_store_close(live->store);
    pthread_cond_destroy(&live->wake);
    pthread_cond_destroy(&live->done);
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
