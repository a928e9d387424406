/* What every request leaves behind: counters and latency histograms by route and status
 * (relaxed atomic additions, no lock on the request path), and GET /metrics, which renders
 * them with the live snapshot's figures in the Prometheus text exposition format 0.0.4
 * (https://prometheus.io/docs/instrumenting/exposition_formats/; checked by promtool and by a
 * real Prometheus server in tests/e2e/test_metrics.sh). */
#include "http.h"

#include <arpa/inet.h>
#include <math.h>
#include <netinet/in.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>
#include <unistd.h>

#include "weft/io.h"

/* Statuses counted one by one; any other counts as "other". */
static const unsigned counted_status[] = { 200, 400, 401, 404, 405, 413, 422, 500, 503 };
#define N_STATUS (sizeof counted_status / sizeof counted_status[0] + 1)

/* Upper bounds of the latency buckets in seconds, and the same as printed in le="...": the
 * label is part of a series' identity, so it is written one fixed way. From 100 us (a cached
 * answer) to 10 s (the connection timeout). */
static const double bucket_le[] = { 0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.01,
                                    0.025,  0.05,    0.1,    0.25,  0.5,    1,     2.5,
                                    5,      10 };
static const char *const bucket_text[] = { "0.0001", "0.00025", "0.0005", "0.001", "0.0025",
                                           "0.005",  "0.01",    "0.025",  "0.05",  "0.1",
                                           "0.25",   "0.5",     "1",      "2.5",   "5",
                                           "10" };
#define N_BUCKETS (sizeof bucket_le / sizeof bucket_le[0])

/* One (route, status) cell: the count per bucket (not cumulative; the last one is above the
 * largest bound) and the sum of durations in nanoseconds. The count is the sum of the
 * buckets, so a scrape always sees a histogram whose +Inf bucket equals its count. */
struct cell {
    atomic_uint_fast64_t bucket[N_BUCKETS + 1];
    atomic_uint_fast64_t sum_ns;
};

/* Cells by slot and status. Slots: 2 per route row (its method, and any other method on its
 * path: a 405), then one for paths no route has. */
struct http_metrics {
    size_t n_routes, n_slots;
    struct cell *cells;        /* (n_slots, N_STATUS) */
    atomic_long in_flight;
};

weft_err http_metrics_new(http_metrics **out, weft_error *err)
{
    http_metrics *m = calloc(1, sizeof *m);
    if (!m)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the request counters");
    m->n_routes = http_route_count();
    m->n_slots = 2 * m->n_routes + 1;
    m->cells = calloc(m->n_slots * N_STATUS, sizeof *m->cells);
    if (!m->cells) {
        free(m);
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the request counters");
    }
    for (size_t i = 0; i < m->n_slots * N_STATUS; i++) {
        for (size_t b = 0; b <= N_BUCKETS; b++)
            atomic_init(&m->cells[i].bucket[b], 0);
        atomic_init(&m->cells[i].sum_ns, 0);
    }
    atomic_init(&m->in_flight, 0);
    *out = m;
    return WEFT_OK;
}

void http_metrics_free(http_metrics *m)
{
    if (!m)
        return;
    free(m->cells);
    free(m);
}

void http_metrics_begin(http_metrics *m)
{
    atomic_fetch_add_explicit(&m->in_flight, 1, memory_order_relaxed);
}

long http_metrics_in_flight(const http_metrics *m)
{
    return atomic_load_explicit(&m->in_flight, memory_order_relaxed);
}

static size_t status_index(unsigned status)
{
    for (size_t i = 0; i < N_STATUS - 1; i++)
        if (counted_status[i] == status)
            return i;
    return N_STATUS - 1;
}

static size_t slot_of(const http_metrics *m, size_t route, bool is_wrong_method)
{
    if (route >= m->n_routes)
        return 2 * m->n_routes;
    return 2 * route + (is_wrong_method ? 1 : 0);
}

void http_metrics_end(http_metrics *m, size_t route, bool is_wrong_method, unsigned status,
                      double seconds, bool is_answered)
{
    atomic_fetch_sub_explicit(&m->in_flight, 1, memory_order_relaxed);
    if (!is_answered)
        return;
    struct cell *c = &m->cells[slot_of(m, route, is_wrong_method) * N_STATUS
                               + status_index(status)];
    size_t b = 0;
    while (b < N_BUCKETS && seconds > bucket_le[b])
        b++;
    atomic_fetch_add_explicit(&c->bucket[b], 1, memory_order_relaxed);
    double ns = seconds > 0 ? seconds * 1e9 : 0;
    atomic_fetch_add_explicit(&c->sum_ns, (uint_fast64_t)ns, memory_order_relaxed);
}

/* ---- rendering ---- */

/* One cell as read at one moment. */
struct cell_read {
    uint64_t bucket[N_BUCKETS + 1];
    uint64_t count;
    double sum;
};

static void read_cell(struct cell *c, struct cell_read *r)
{
    r->count = 0;
    for (size_t b = 0; b <= N_BUCKETS; b++) {
        r->bucket[b] = atomic_load_explicit(&c->bucket[b], memory_order_relaxed);
        r->count += r->bucket[b];
    }
    r->sum = (double)atomic_load_explicit(&c->sum_ns, memory_order_relaxed) / 1e9;
}

/* The labels of a slot and status: method="GET",route="/v1/model",status="200". Route
 * patterns and methods come from our own table, so they need no escaping. */
static void cell_labels(const http_metrics *m, size_t slot, size_t st, char *buf, size_t size)
{
    const char *method = "other", *path = "unmatched";
    if (slot < 2 * m->n_routes) {
        http_route_info(slot / 2, &method, &path);
        if (slot % 2)
            method = "other";
    }
    char status[16];
    if (st < N_STATUS - 1)
        snprintf(status, sizeof status, "%u", counted_status[st]);
    else
        snprintf(status, sizeof status, "other");
    snprintf(buf, size, "method=\"%s\",route=\"%s\",status=\"%s\"", method, path, status);
}

static void family(FILE *f, const char *name, const char *type, const char *help)
{
    fprintf(f, "# HELP %s %s\n# TYPE %s %s\n", name, help, name, type);
}

/* A sample value: integers exactly, others with 15 significant digits (more than any
 * figure here carries); NaN and infinities as the format spells them. */
static void value(FILE *f, double v)
{
    if (isnan(v))
        fputs("NaN", f);
    else if (isinf(v))
        fputs(v > 0 ? "+Inf" : "-Inf", f);
    else if (v == floor(v) && fabs(v) < 1e15)
        fprintf(f, "%.0f", v);
    else
        fprintf(f, "%.15g", v);
}

static void sample(FILE *f, const char *name, const char *labels, double v)
{
    fputs(name, f);
    if (labels && labels[0])
        fprintf(f, "{%s}", labels);
    fputc(' ', f);
    value(f, v);
    fputc('\n', f);
}

static void requests(FILE *f, http_metrics *m)
{
    size_t n = m->n_slots * N_STATUS;
    struct cell_read *r = malloc(n * sizeof *r);
    if (!r)
        return;
    for (size_t i = 0; i < n; i++)
        read_cell(&m->cells[i], &r[i]);
    char labels[256], with_le[300];
    family(f, "weft_http_requests_total", "counter",
           "HTTP requests answered, by route pattern, method and status.");
    for (size_t i = 0; i < n; i++) {
        if (!r[i].count)
            continue;
        cell_labels(m, i / N_STATUS, i % N_STATUS, labels, sizeof labels);
        sample(f, "weft_http_requests_total", labels, (double)r[i].count);
    }
    family(f, "weft_http_request_duration_seconds", "histogram",
           "Time from a request's headers to the end of its response, by route pattern, "
           "method and status.");
    for (size_t i = 0; i < n; i++) {
        if (!r[i].count)
            continue;
        cell_labels(m, i / N_STATUS, i % N_STATUS, labels, sizeof labels);
        uint64_t below = 0;
        for (size_t b = 0; b < N_BUCKETS; b++) {
            below += r[i].bucket[b];
            snprintf(with_le, sizeof with_le, "%s,le=\"%s\"", labels, bucket_text[b]);
            sample(f, "weft_http_request_duration_seconds_bucket", with_le, (double)below);
        }
        snprintf(with_le, sizeof with_le, "%s,le=\"+Inf\"", labels);
        sample(f, "weft_http_request_duration_seconds_bucket", with_le, (double)r[i].count);
        sample(f, "weft_http_request_duration_seconds_sum", labels, r[i].sum);
        sample(f, "weft_http_request_duration_seconds_count", labels, (double)r[i].count);
    }
    free(r);
    family(f, "weft_http_requests_in_flight", "gauge",
           "HTTP requests started and not yet ended (this scrape included).");
    sample(f, "weft_http_requests_in_flight", NULL,
           (double)atomic_load_explicit(&m->in_flight, memory_order_relaxed));
}

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec / 1e9;
}

static void snapshot_figures(FILE *f, const http_request *rq, double now)
{
    const http_model *mod = rq->model;
    family(f, "weft_snapshot_version", "gauge", "Version of the live snapshot (0: none).");
    sample(f, "weft_snapshot_version", NULL, mod ? (double)mod->version : 0);
    family(f, "weft_snapshot_age_seconds", "gauge",
           "Seconds since the live snapshot was written to the store (its manifest's created).");
    if (mod && isfinite(mod->checks.created))
        sample(f, "weft_snapshot_age_seconds", NULL, now - mod->checks.created);
    family(f, "weft_snapshot_loaded_timestamp_seconds", "gauge",
           "Unix time at which this server made the live snapshot live.");
    if (mod)
        sample(f, "weft_snapshot_loaded_timestamp_seconds", NULL, mod->checks.loaded);
    http_live_counts counts = { 0, 0 };
    if (rq->live)
        http_live_get_counts(rq->live, &counts);
    family(f, "weft_snapshot_swaps_total", "counter",
           "Snapshots this server made live, the first one included.");
    sample(f, "weft_snapshot_swaps_total", NULL, (double)counts.swaps);
    family(f, "weft_snapshot_load_failures_total", "counter",
           "Promoted versions this server could not load (checksum, structure, store errors).");
    sample(f, "weft_snapshot_load_failures_total", NULL, (double)counts.load_failures);
}

/* The test metrics of a model part as the manifest records them: models.<part>.metrics
 * (or the top-level metrics of a manifest written before the models object). */
static const json_t *part_metrics(const json_t *manifest, const char *part, bool is_only_part)
{
    const json_t *m = json_object_get(json_object_get(json_object_get(manifest, "models"),
                                                      part),
                                      "metrics");
    if (!m && is_only_part && !json_object_get(manifest, "models"))
        m = json_object_get(manifest, "metrics");
    return json_is_object(m) ? m : NULL;
}

static const char *const link_metric_names[] = { "mrr", "mean_rank", "hits@1", "hits@3",
                                                 "hits@10", "auc", "ap", NULL };
static const char *const label_metric_names[] = { "accuracy", "macro_f1", "ece", "log_loss",
                                                  NULL };

/* Samples of one part: @p what is "test" (the model) or a baseline's name. */
static void part_samples(FILE *f, const char *name, const char *part, const char *baseline,
                         const json_t *test, const char *const *names)
{
    char labels[160];
    for (const char *const *n = names; *n; n++) {
        const json_t *v = json_object_get(test, *n);
        if (!json_is_number(v))
            continue;
        if (baseline)
            snprintf(labels, sizeof labels, "part=\"%s\",baseline=\"%s\",metric=\"%s\"", part,
                     baseline, *n);
        else
            snprintf(labels, sizeof labels, "part=\"%s\",metric=\"%s\"", part, *n);
        sample(f, name, labels, json_number_value(v));
    }
}

static void model_figures(FILE *f, const http_model *mod)
{
    const json_t *manifest = mod ? weft_snapshot_manifest(mod->snap) : NULL;
    const json_t *parts[2] = { NULL, NULL };
    static const char *const part_name[2] = { "link", "labels" };
    static const char *const *const part_names[2] = { link_metric_names, label_metric_names };
    if (mod && mod->has_links)
        parts[0] = part_metrics(manifest, "link", !mod->has_labels);
    if (mod && mod->has_labels)
        parts[1] = part_metrics(manifest, "labels", !mod->has_links);

    family(f, "weft_model_test_metric", "gauge",
           "Test-split metrics of the live snapshot's models, as recorded at training.");
    for (int p = 0; p < 2; p++)
        if (parts[p])
            part_samples(f, "weft_model_test_metric", part_name[p], NULL,
                         json_object_get(parts[p], "test"), part_names[p]);
    family(f, "weft_model_baseline_test_metric", "gauge",
           "The same metrics of the trivial baselines each model must beat.");
    for (int p = 0; p < 2; p++) {
        const json_t *baselines = parts[p] ? json_object_get(parts[p], "baselines") : NULL;
        const char *key;
        const json_t *b;
        json_object_foreach((json_t *)baselines, key, b) {
            bool is_plain = strspn(key, "abcdefghijklmnopqrstuvwxyz_0123456789") == strlen(key);
            if (is_plain && strlen(key) < 64)
                part_samples(f, "weft_model_baseline_test_metric", part_name[p], key, b,
                             part_names[p]);
        }
    }
    family(f, "weft_model_beats_baselines", "gauge",
           "1 when the model beat its baselines on test at training, else 0.");
    for (int p = 0; p < 2; p++) {
        const json_t *beats = parts[p] ? json_object_get(parts[p], "beats_baselines") : NULL;
        char labels[40];
        snprintf(labels, sizeof labels, "part=\"%s\"", part_name[p]);
        if (json_is_boolean(beats))
            sample(f, "weft_model_beats_baselines", labels, json_is_true(beats) ? 1 : 0);
    }
}

static void health_figures(FILE *f, const http_request *rq, double now)
{
    http_check checks[HTTP_MAX_CHECKS];
    size_t n = http_health_evaluate(rq, now, checks);
    http_check_status worst = HTTP_CHECK_OK;
    for (size_t i = 0; i < n; i++)
        if (checks[i].status > worst)
            worst = checks[i].status;
    char labels[80];
    family(f, "weft_health_status", "gauge",
           "Overall verdict of GET /v1/health: 0 ok, 1 warn, 2 fail.");
    sample(f, "weft_health_status", NULL, (double)worst);
    family(f, "weft_health_check_status", "gauge",
           "Verdict of each /v1/health check: 0 ok, 1 warn, 2 fail.");
    for (size_t i = 0; i < n; i++) {
        snprintf(labels, sizeof labels, "check=\"%s\"", checks[i].name);
        sample(f, "weft_health_check_status", labels, (double)checks[i].status);
    }
    family(f, "weft_health_check_value", "gauge",
           "The figure each /v1/health check measured (its unit is the check's).");
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(checks[i].value))
            continue;
        snprintf(labels, sizeof labels, "check=\"%s\"", checks[i].name);
        sample(f, "weft_health_check_value", labels, checks[i].value);
    }
}

/* Process start time in Unix seconds: boot time (/proc/stat btime) plus the process's start
 * in clock ticks after boot (/proc/self/stat field 22, proc(5)). NaN when unreadable. */
static double process_start_time(void)
{
    double btime = NAN, ticks = NAN;
    FILE *f = fopen("/proc/stat", "r");
    if (f) {
        char line[256];
        while (fgets(line, sizeof line, f))
            if (!strncmp(line, "btime ", 6))
                btime = strtod(line + 6, NULL);
        fclose(f);
    }
    f = fopen("/proc/self/stat", "r");
    if (f) {
        char buf[1024];
        size_t n = fread(buf, 1, sizeof buf - 1, f);
        buf[n] = '\0';
        fclose(f);
        /* the command name (field 2) may hold spaces and parentheses: count from its end */
        char *p = strrchr(buf, ')');
        for (int field = 2; p && field < 22; field++)
            p = strchr(p + 1, ' ');
        if (p)
            ticks = strtod(p + 1, NULL);
    }
    long hz = sysconf(_SC_CLK_TCK);
    return hz > 0 ? btime + ticks / (double)hz : NAN;
}

static void process_figures(FILE *f)
{
    long page = sysconf(_SC_PAGESIZE);
    unsigned long size = 0, resident = 0;
    FILE *statm = fopen("/proc/self/statm", "r");
    bool has_statm = statm && fscanf(statm, "%lu %lu", &size, &resident) == 2 && page > 0;
    if (statm)
        fclose(statm);
    family(f, "weft_process_resident_memory_bytes", "gauge",
           "Resident memory of the process in bytes (/proc/self/statm; the snapshot's mapped "
           "pages count once touched).");
    if (has_statm)
        sample(f, "weft_process_resident_memory_bytes", NULL, (double)resident * (double)page);
    family(f, "weft_process_virtual_memory_bytes", "gauge",
           "Virtual memory of the process in bytes (the store's whole map counts).");
    if (has_statm)
        sample(f, "weft_process_virtual_memory_bytes", NULL, (double)size * (double)page);
    family(f, "weft_process_start_time_seconds", "gauge",
           "Start time of the process, Unix seconds.");
    double start = process_start_time();
    if (isfinite(start))
        sample(f, "weft_process_start_time_seconds", NULL, start);
    struct rusage ru;
    family(f, "weft_process_cpu_seconds_total", "counter",
           "CPU time the process has used, user and system, in seconds.");
    if (getrusage(RUSAGE_SELF, &ru) == 0)
        sample(f, "weft_process_cpu_seconds_total", NULL,
               (double)ru.ru_utime.tv_sec + (double)ru.ru_utime.tv_usec / 1e6
                   + (double)ru.ru_stime.tv_sec + (double)ru.ru_stime.tv_usec / 1e6);
}

void http_metrics_get(const http_request *rq, http_reply *out)
{
    char *text = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&text, &len);
    if (!f) {
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "no memory for the metrics");
        return;
    }
    double now = now_seconds();
    if (rq->metrics)
        requests(f, rq->metrics);
    snapshot_figures(f, rq, now);
    model_figures(f, rq->model);
    health_figures(f, rq, now);
    process_figures(f);
    bool bad = ferror(f) != 0;
    if (fclose(f) != 0 || bad || !text) {
        free(text);
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "no memory for the metrics");
        return;
    }
    out->status = MHD_HTTP_OK;
    out->text = text;
    out->text_len = len;
    out->content_type = "text/plain; version=0.0.4; charset=utf-8";
}

/* ---- the access log ---- */

/* Append @p s as the inside of a JSON string: quotes, backslashes and control bytes
 * escaped; bytes that are not UTF-8 (a client may send any) each become U+FFFD, so that the
 * line always parses. */
static size_t put_json_text(char *buf, size_t used, size_t size, const char *s)
{
    const unsigned char *p = (const unsigned char *)s;
    while (*p && used + 8 < size) {
        size_t n = *p < 0x80 ? 1 : (*p >> 5) == 6 ? 2 : (*p >> 4) == 14 ? 3 : (*p >> 3) == 30 ? 4 : 0;
        size_t avail = strnlen((const char *)p, 4);
        if (n > 1 && n <= avail && weft_io_utf8_valid((const char *)p, n)) {
            memcpy(buf + used, p, n);
            used += n;
            p += n;
        } else if (n != 1) {
            used += (size_t)snprintf(buf + used, size - used, "\\ufffd");
            p++;
        } else if (*p == '"' || *p == '\\') {
            buf[used++] = '\\';
            buf[used++] = (char)*p++;
        } else if (*p < 0x20 || *p == 0x7f) {
            used += (size_t)snprintf(buf + used, size - used, "\\u%04x", *p++);
        } else {
            buf[used++] = (char)*p++;
        }
    }
    return used;
}

static void remote_text(const struct sockaddr *sa, char *buf, size_t size)
{
    snprintf(buf, size, "unknown");
    if (!sa)
        return;
    if (sa->sa_family == AF_INET)
        inet_ntop(AF_INET, &((const struct sockaddr_in *)(const void *)sa)->sin_addr, buf,
                  (socklen_t)size);
    else if (sa->sa_family == AF_INET6)
        inet_ntop(AF_INET6, &((const struct sockaddr_in6 *)(const void *)sa)->sin6_addr, buf,
                  (socklen_t)size);
}

void http_access_log(int fd, const http_access *a)
{
    if (fd < 0)
        return;
    char line[1024], when[40], remote[INET6_ADDRSTRLEN];
    time_t secs = (time_t)a->start;
    struct tm tm;
    gmtime_r(&secs, &tm);
    size_t tlen = strftime(when, sizeof when, "%Y-%m-%dT%H:%M:%S", &tm);
    snprintf(when + tlen, sizeof when - tlen, ".%03dZ",
             (int)((a->start - (double)secs) * 1000) % 1000);
    remote_text(a->remote, remote, sizeof remote);
    const char *method = NULL, *route = NULL;
    if (a->route != HTTP_ROUTE_NONE)
        http_route_info(a->route, &method, &route);
    size_t used = (size_t)snprintf(line, sizeof line, "{\"time\":\"%s\",\"method\":\"", when);
    used = put_json_text(line, used, sizeof line - 200, a->method);
    used += (size_t)snprintf(line + used, sizeof line - used, "\",\"route\":%s%s%s,\"path\":\"",
                             route ? "\"" : "", route ? route : "null", route ? "\"" : "");
    used = put_json_text(line, used, sizeof line - 200, a->path);
    char version[32];
    if (a->has_version)
        snprintf(version, sizeof version, "%llu", (unsigned long long)a->version);
    else
        snprintf(version, sizeof version, "null");
    char status[16];
    if (a->status)
        snprintf(status, sizeof status, "%u", a->status);
    else
        snprintf(status, sizeof status, "null");
    used += (size_t)snprintf(line + used, sizeof line - used,
                             "\",\"status\":%s,\"duration_ms\":%.3f,\"bytes\":%zu,\"version\":%s,"
                             "\"remote\":\"%s\"}\n",
                             status, a->seconds * 1e3, a->bytes, version, remote);
    if (used >= sizeof line)   /* cannot happen: the free text stops 200 bytes early */
        return;
    /* One write per line: lines of concurrent requests never interleave (O_APPEND files,
     * pipes under PIPE_BUF). A failed write is dropped: logging never stops a request. */
    ssize_t rc = write(fd, line, used);
    (void)rc;
}
