/* Model checks: what the loader measures of a snapshot (non-finite floats, the spread of the
 * embedding norms, drift from the version served before, coverage of the input files' nodes)
 * and how GET /v1/health judges it, with GET /readyz.
 *
 * The thresholds are our choice, not from a source; DEVELOPERS.md ("Observability") lists
 * them with the reasoning:
 *   snapshot age             warn past --max-age (default 7 days), fail past twice that
 *   gate and baselines       the manifest's verdicts: a model that does not beat its
 *                            baselines fails; a snapshot promoted past the gate warns
 *   non-finite values        any NaN or infinity in an f32 blob fails
 *   embedding norm spread    p99 / p1 of the entity rows' L2 norms: warn above 100 (rows
 *                            that barely moved from their initialisation beside trained
 *                            ones), fail above 10,000 or when p1 is 0
 *   drift (links)            mean overlap of the top-10 lists of 100 probe nodes: warn below
 *                            0.2 (measured: dot on Cora retrained with seeds 2, 3, 4 overlaps
 *                            0.375, 0.314, 0.330 with the run before; unrelated rankings
 *                            would overlap about 10 / 2708)
 *   drift (labels)           share of nodes keeping their predicted class: warn below 0.8
 *                            (measured: the GCN on Cora, seeds 1 and 2, agree on 93.3%)
 *   input coverage           share of the input files' nodes in the node table: warn below
 *                            0.95, fail below 0.5
 *   snapshot load            listed once a promoted version failed to load (a CRC-32 or
 *                            structure problem, a store error): warns while the store's live
 *                            version is one the server refused and serves an older one */
#include "http.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/gemm.h"
#include "weft/io.h"
#include "weft/model.h"
#include "weft/names.h"
#include "weft/rng.h"
#include "weft/topk.h"

#define NORM_RATIO_WARN 100.0
#define NORM_RATIO_FAIL 10000.0
#define DRIFT_PROBES 100
#define DRIFT_K 10
#define DRIFT_SEED 0x6472696674ull   /* "drift": the probe set is the same at every load */
#define DRIFT_LINKS_WARN 0.2
#define DRIFT_LABELS_WARN 0.8
#define COVERAGE_WARN 0.95
#define COVERAGE_FAIL 0.5
/* Entity rows scored per product when ranking the probes. */
#define DRIFT_BLOCK 2048

const char *http_check_status_name(http_check_status s)
{
    return s == HTTP_CHECK_FAIL ? "fail" : s == HTTP_CHECK_WARN ? "warn" : "ok";
}

/* ---- measured at load (loader thread) ---- */

/* Days from 1970-01-01 to year-month-day in the proleptic Gregorian calendar (the
 * days_from_civil algorithm of H. Hinnant, "chrono-compatible low-level date algorithms"). */
static long days_from_civil(long y, long m, long d)
{
    y -= m <= 2;
    long era = (y >= 0 ? y : y - 399) / 400;
    long yoe = y - era * 400;
    long doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
    long doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    return era * 146097 + doe - 719468;
}

/* "2026-12-02T03:59:19Z" (as the store writes "created") in Unix seconds; NaN otherwise. */
static double parse_utc(const char *text)
{
    int y, mo, d, h, mi, s;
    char z = 0;
    if (!text || sscanf(text, "%4d-%2d-%2dT%2d:%2d:%2d%c", &y, &mo, &d, &h, &mi, &s, &z) != 7
        || z != 'Z' || mo < 1 || mo > 12 || d < 1 || d > 31 || h > 23 || mi > 59 || s > 60)
        return NAN;
    return (double)days_from_civil(y, mo, d) * 86400.0 + h * 3600.0 + mi * 60.0 + s;
}

/* NaN and infinities have every exponent bit set (IEEE 754 binary32). */
static size_t count_nonfinite(const uint32_t *bits, size_t n)
{
    size_t count = 0;
    for (size_t i = 0; i < n; i++)
        count += (bits[i] & 0x7f800000u) == 0x7f800000u;
    return count;
}

static void scan_blobs(http_model *m)
{
    http_checks *c = &m->checks;
    const char *name;
    const json_t *entry;
    json_t *blobs = json_object_get(weft_snapshot_manifest(m->snap), "blobs");
    json_object_foreach(blobs, name, entry) {
        weft_blob b;
        if (!weft_snapshot_blob(m->snap, name, &b) || b.dtype != WEFT_DTYPE_F32)
            continue;
        size_t n = b.nbytes / sizeof(float);
        size_t bad = count_nonfinite(b.data, n);
        c->n_floats += n;
        c->n_nonfinite += bad;
        if (bad && !c->nonfinite_blob[0])
            snprintf(c->nonfinite_blob, sizeof c->nonfinite_blob, "%s", name);
    }
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Percentile @p q (0..1) of sorted @p v[0..n), interpolating linearly between the two
 * nearest ranks (numpy.percentile's default, "linear"). */
static double percentile(const double *v, size_t n, double q)
{
    double pos = q * (double)(n - 1);
    size_t lo = (size_t)pos;
    if (lo + 1 >= n)
        return v[n - 1];
    return v[lo] + (v[lo + 1] - v[lo]) * (pos - (double)lo);
}

/* L2 norms of the entity rows with finite values (summed in double), their percentiles. */
static weft_err scan_norms(http_model *m, weft_error *err)
{
    const weft_link_view *v = &m->links;
    double *norm = weft_alloc_array(v->n_nodes, sizeof *norm);
    if (!norm)
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory to measure %zu row norms",
                              v->n_nodes);
    size_t n = 0;
    for (size_t i = 0; i < v->n_nodes; i++) {
        const float *row = v->entity + i * v->dim;
        double sum = 0;
        for (size_t j = 0; j < v->dim; j++)
            sum += (double)row[j] * row[j];
        if (isfinite(sum))
            norm[n++] = sqrt(sum);
    }
    qsort(norm, n, sizeof *norm, cmp_double);
    http_checks *c = &m->checks;
    c->norm_rows = n;
    for (size_t i = 0; i < n && norm[i] == 0; i++)
        c->norm_zero_rows++;
    if (n) {
        c->norm_p01 = percentile(norm, n, 0.01);
        c->norm_p50 = percentile(norm, n, 0.50);
        c->norm_p99 = percentile(norm, n, 0.99);
    }
    free(norm);
    return WEFT_OK;
}

weft_err http_checks_scan(http_model *m, weft_error *err)
{
    http_checks *c = &m->checks;
    memset(c, 0, sizeof *c);
    const json_t *manifest = weft_snapshot_manifest(m->snap);
    c->created = parse_utc(json_string_value(json_object_get(manifest, "created")));
    c->loaded = NAN;
    c->norm_p01 = c->norm_p50 = c->norm_p99 = NAN;
    c->drift_links = c->drift_labels = NAN;
    c->drift = HTTP_MEASURE_PENDING;
    c->coverage = HTTP_MEASURE_PENDING;
    scan_blobs(m);
    return m->has_links ? scan_norms(m, err) : WEFT_OK;
}

/* ---- drift ---- */

static int cmp_u32(const void *a, const void *b)
{
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return (x > y) - (x < y);
}

/* Best DRIFT_K targets of each probe p (anchor[p], relation rel[p]; skipped when !use[p])
 * among the rows of @p v, leaving out known links and, unless the graph has self-loops, the
 * anchor itself: what GET /v1/links/predict answers. Scores in blocks of DRIFT_BLOCK rows,
 * one product per block for all probes, so the matrix is read once.
 * @param ids  (n_probes, DRIFT_K), best first; @p counts (n_probes) entries each */
static weft_err rank_probes(const weft_link_view *v, const uint32_t *anchor, const uint32_t *rel,
                            const bool *use, size_t n_probes, uint32_t *ids, size_t *counts,
                            weft_error *err)
{
    float *q = weft_alloc_array(n_probes * v->dim, sizeof *q);
    float *scores = weft_alloc_array(n_probes * DRIFT_BLOCK, sizeof *scores);
    float *top_score = weft_alloc_array(n_probes * DRIFT_K, sizeof *top_score);
    weft_topk *tops = weft_alloc_array(n_probes, sizeof *tops);
    if (!q || !scores || !top_score || !tops) {
        free(q);
        free(scores);
        free(top_score);
        free(tops);
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory to rank the drift probes");
    }
    for (size_t p = 0; p < n_probes; p++) {
        if (use[p])
            weft_model_query(&v->model, anchor[p], rel[p], false, q + p * v->dim);
        else
            memset(q + p * v->dim, 0, v->dim * sizeof *q);
        weft_topk_init(&tops[p], DRIFT_K, ids + p * DRIFT_K, top_score + p * DRIFT_K);
    }
    for (size_t b0 = 0; b0 < v->n_nodes; b0 += DRIFT_BLOCK) {
        size_t nb = v->n_nodes - b0 < DRIFT_BLOCK ? v->n_nodes - b0 : DRIFT_BLOCK;
        /* scores (n_probes, nb) = q (n_probes, dim) . entity[b0 .. b0 + nb)^T */
        weft_gemm(false, true, n_probes, nb, v->dim, 1.0f, q, v->dim, v->entity + b0 * v->dim,
                  v->dim, 0.0f, scores, nb, 1);
        for (size_t p = 0; p < n_probes; p++) {
            if (!use[p])
                continue;
            uint64_t first = 0;
            size_t n_known = 0;
            weft_csr_range(&v->known_out, anchor[p], rel[p], &first, &n_known);
            const uint32_t *known = v->known_out.nbr + first;
            for (size_t j = 0; j < nb; j++) {
                uint32_t id = (uint32_t)(b0 + j);
                float s = scores[p * nb + j];
                if (isnan(s) || !weft_topk_would_enter(&tops[p], id, s))
                    continue;
                if (id == anchor[p] && !v->has_self_loops)
                    continue;
                if (n_known && bsearch(&id, known, n_known, sizeof id, cmp_u32))
                    continue;
                weft_topk_push(&tops[p], id, s);
            }
        }
    }
    for (size_t p = 0; p < n_probes; p++)
        counts[p] = use[p] ? weft_topk_finish(&tops[p]) : 0;
    free(q);
    free(scores);
    free(top_score);
    free(tops);
    return WEFT_OK;
}

/* The probes: up to DRIFT_PROBES nodes present in both models, drawn with a fixed seed
 * (a partial Fisher-Yates shuffle of the common nodes), each with relation p mod R of the
 * new model, skipped when the old one lacks that relation. */
struct probes {
    size_t n;
    uint32_t *now_node, *before_node;   /* (n) the same node in each model */
    uint32_t *now_rel, *before_rel;
    bool *use;
};

static void probes_fini(struct probes *pr)
{
    free(pr->now_node);
    free(pr->before_node);
    free(pr->now_rel);
    free(pr->before_rel);
    free(pr->use);
}

static weft_err probes_pick(const weft_link_view *now, const weft_link_view *before,
                            struct probes *pr, weft_error *err)
{
    memset(pr, 0, sizeof *pr);
    size_t n_common = 0;
    pr->now_node = weft_alloc_array(now->n_nodes, sizeof *pr->now_node);
    pr->before_node = weft_alloc_array(now->n_nodes, sizeof *pr->before_node);
    if (!pr->now_node || !pr->before_node) {
        probes_fini(pr);
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the drift probes");
    }
    for (uint32_t i = 0; i < now->n_nodes; i++) {
        size_t len = 0;
        const char *name = weft_names_get(&now->nodes, i, &len);
        uint32_t j;
        if (weft_names_find(&before->nodes, name, len, &j)) {
            pr->now_node[n_common] = i;
            pr->before_node[n_common++] = j;
        }
    }
    pr->n = n_common < DRIFT_PROBES ? n_common : DRIFT_PROBES;
    weft_rng rng;
    weft_rng_seed(&rng, DRIFT_SEED);
    for (size_t i = 0; i < pr->n; i++) {
        size_t j = i + weft_rng_below(&rng, (uint32_t)(n_common - i));
        uint32_t t = pr->now_node[i];
        pr->now_node[i] = pr->now_node[j];
        pr->now_node[j] = t;
        t = pr->before_node[i];
        pr->before_node[i] = pr->before_node[j];
        pr->before_node[j] = t;
    }
    pr->now_rel = weft_alloc_array(pr->n, sizeof *pr->now_rel);
    pr->before_rel = weft_alloc_array(pr->n, sizeof *pr->before_rel);
    pr->use = weft_alloc_array(pr->n, sizeof *pr->use);
    if (!pr->now_rel || !pr->before_rel || !pr->use) {
        probes_fini(pr);
        return weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the drift probes");
    }
    for (size_t p = 0; p < pr->n; p++) {
        pr->now_rel[p] = (uint32_t)(p % now->n_relations);
        size_t len = 0;
        const char *rel = weft_names_get(&now->relations, pr->now_rel[p], &len);
        pr->use[p] = weft_names_find(&before->relations, rel, len, &pr->before_rel[p]);
        if (!pr->use[p])
            pr->before_rel[p] = 0;
    }
    return WEFT_OK;
}

/* Mean overlap of the two models' top-10 lists over the usable probes: for each probe, the
 * targets in both lists (matched by name) over the longer list's length. */
static weft_err link_drift(const weft_link_view *now, const weft_link_view *before,
                           http_checks *c, weft_error *err)
{
    struct probes pr;
    weft_err rc = probes_pick(now, before, &pr, err);
    if (rc != WEFT_OK)
        return rc;
    if (pr.n == 0) {   /* no node in both */
        probes_fini(&pr);
        c->drift_probes = 0;
        c->drift_links = NAN;
        return WEFT_OK;
    }
    uint32_t *now_ids = weft_alloc_array(pr.n * DRIFT_K + 1, sizeof *now_ids);
    uint32_t *before_ids = weft_alloc_array(pr.n * DRIFT_K + 1, sizeof *before_ids);
    size_t *now_n = weft_alloc_array(pr.n + 1, sizeof *now_n);
    size_t *before_n = weft_alloc_array(pr.n + 1, sizeof *before_n);
    if (!now_ids || !before_ids || !now_n || !before_n)
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "no memory for the drift probes");
    if (rc == WEFT_OK)
        rc = rank_probes(now, pr.now_node, pr.now_rel, pr.use, pr.n, now_ids, now_n, err);
    if (rc == WEFT_OK)
        rc = rank_probes(before, pr.before_node, pr.before_rel, pr.use, pr.n, before_ids,
                         before_n, err);
    double sum = 0;
    size_t used = 0;
    for (size_t p = 0; rc == WEFT_OK && p < pr.n; p++) {
        size_t longer = now_n[p] > before_n[p] ? now_n[p] : before_n[p];
        if (!pr.use[p] || longer == 0)
            continue;
        size_t shared = 0;
        for (size_t i = 0; i < before_n[p]; i++) {
            size_t len = 0;
            const char *name = weft_names_get(&before->nodes, before_ids[p * DRIFT_K + i], &len);
            uint32_t id;
            if (!weft_names_find(&now->nodes, name, len, &id))
                continue;
            for (size_t j = 0; j < now_n[p]; j++)
                shared += now_ids[p * DRIFT_K + j] == id;
        }
        sum += (double)shared / (double)longer;
        used++;
    }
    if (rc == WEFT_OK) {
        c->drift_probes = used;
        c->drift_links = used ? sum / (double)used : NAN;
    }
    free(now_ids);
    free(before_ids);
    free(now_n);
    free(before_n);
    probes_fini(&pr);
    return rc;
}

/* Share of the nodes in both label models whose predicted class (by name) is the same. */
static void label_drift(const weft_label_view *now, const weft_label_view *before,
                        http_checks *c)
{
    size_t common = 0, same = 0;
    for (uint32_t i = 0; i < now->n_nodes; i++) {
        size_t len = 0;
        const char *name = weft_names_get(&now->nodes, i, &len);
        uint32_t j;
        if (!weft_names_find(&before->nodes, name, len, &j))
            continue;
        common++;
        size_t now_len = 0, before_len = 0;
        const char *a = weft_names_get(&now->classes,
                                       http_labels_predicted_class(now, (uint32_t)i), &now_len);
        const char *b = weft_names_get(&before->classes,
                                       http_labels_predicted_class(before, (uint32_t)j),
                                       &before_len);
        same += now_len == before_len && !memcmp(a, b, now_len);
    }
    c->drift_nodes = common;
    c->drift_labels = common ? (double)same / (double)common : NAN;
}

void http_checks_drift(http_model *m, const http_model *before)
{
    http_checks *c = &m->checks;
    c->drift_from = before->version;
    c->drift_note[0] = '\0';
    weft_error err;
    weft_error_clear(&err);
    bool has_any = false;
    if (m->has_links && before->has_links) {
        has_any = true;
        if (link_drift(&m->links, &before->links, c, &err) != WEFT_OK) {
            c->drift = HTTP_MEASURE_FAILED;
            snprintf(c->drift_note, sizeof c->drift_note, "%.150s", err.msg);
            return;
        }
    }
    if (m->has_labels && before->has_labels) {
        has_any = true;
        label_drift(&m->labels, &before->labels, c);
    }
    c->drift = has_any ? HTTP_MEASURE_DONE : HTTP_MEASURE_NONE;
    if (!has_any)
        snprintf(c->drift_note, sizeof c->drift_note,
                 "version %llu holds no model of the same kind (links or labels)",
                 (unsigned long long)before->version);
}

/* ---- coverage ---- */

/* Intern the node names of one edge file (the first and the last field of each line). */
static weft_err read_names(const char *path, weft_names *names, weft_error *err)
{
    weft_io_reader *rd = NULL;
    weft_err rc = weft_io_open(path, &rd, err);
    bool eof = false;
    weft_io_record rec;
    while (rc == WEFT_OK && (rc = weft_io_next(rd, &rec, &eof, err)) == WEFT_OK && !eof) {
        if (rec.n_fields < 2)
            continue;
        size_t ends[2] = { 0, rec.n_fields - 1 };
        for (int e = 0; e < 2 && rc == WEFT_OK; e++) {
            size_t f = ends[e];
            uint32_t id;
            if (rec.len[f] > 0 && rec.len[f] <= WEFT_IO_MAX_NAME)
                rc = weft_names_intern(names, rec.field[f], rec.len[f], &id, NULL, err);
        }
    }
    weft_io_close(rd);
    return rc;
}

void http_checks_coverage(http_model *m, const char *const *paths, size_t n_paths)
{
    http_checks *c = &m->checks;
    c->coverage_names = c->coverage_found = 0;
    if (n_paths == 0) {
        c->coverage = HTTP_MEASURE_NONE;
        snprintf(c->coverage_note, sizeof c->coverage_note,
                 "no input file to read: the manifest names none that can be read from here; "
                 "give weft serve --inputs FILE,...");
        return;
    }
    weft_names names;
    weft_error err;
    weft_error_clear(&err);
    weft_err rc = weft_names_init(&names, &err);
    bool has_names = rc == WEFT_OK;
    for (size_t i = 0; rc == WEFT_OK && i < n_paths; i++)
        rc = read_names(paths[i], &names, &err);
    if (rc != WEFT_OK) {
        c->coverage = HTTP_MEASURE_FAILED;
        snprintf(c->coverage_note, sizeof c->coverage_note, "%.190s", err.msg);
        if (has_names)
            weft_names_fini(&names);
        return;
    }
    const weft_names_view *nodes = m->has_links ? &m->links.nodes : &m->labels.nodes;
    weft_names_view read = weft_names_as_view(&names);
    for (uint32_t i = 0; i < read.n; i++) {
        size_t len = 0;
        const char *name = weft_names_get(&read, i, &len);
        uint32_t id;
        c->coverage_found += weft_names_find(nodes, name, len, &id);
    }
    c->coverage_names = read.n;
    weft_names_fini(&names);
    c->coverage = HTTP_MEASURE_DONE;
    size_t used = (size_t)snprintf(c->coverage_note, sizeof c->coverage_note, "read %s",
                                   paths[0]);
    if (n_paths > 1 && used < sizeof c->coverage_note)
        snprintf(c->coverage_note + used, sizeof c->coverage_note - used, " and %zu more",
                 n_paths - 1);
}

/* ---- judging (request threads; reads only the model copy and its manifest) ---- */

static http_check *add(http_check *out, size_t *n, const char *name, http_check_status status,
                       double value, double threshold)
{
    http_check *c = &out[(*n)++];
    c->name = name;
    c->status = status;
    c->value = value;
    c->threshold = threshold;
    c->message[0] = '\0';
    return c;
}

static void say(http_check *c, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static void say(http_check *c, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(c->message, sizeof c->message, fmt, ap);
    va_end(ap);
}

/* "3.2 days", "5 h", "42 s": an age for people. */
static void human_age(double s, char *buf, size_t size)
{
    if (s >= 2 * 86400)
        snprintf(buf, size, "%.1f days", s / 86400);
    else if (s >= 2 * 3600)
        snprintf(buf, size, "%.1f h", s / 3600);
    else if (s >= 120)
        snprintf(buf, size, "%.0f min", s / 60);
    else
        snprintf(buf, size, "%.0f s", s);
}

static void check_age(const http_request *rq, double now, http_check *out, size_t *n)
{
    const http_checks *k = &rq->model->checks;
    double max = rq->settings->max_age_seconds;
    if (!isfinite(k->created)) {
        say(add(out, n, "snapshot_age", HTTP_CHECK_WARN, NAN, max),
            "the manifest of version %llu has no creation time",
            (unsigned long long)rq->model->version);
        return;
    }
    double age = now - k->created;
    http_check_status st = age > 2 * max ? HTTP_CHECK_FAIL
                           : age > max   ? HTTP_CHECK_WARN
                                         : HTTP_CHECK_OK;
    char a[32], m[32];
    human_age(age, a, sizeof a);
    human_age(max, m, sizeof m);
    say(add(out, n, "snapshot_age", st, age, max),
        "version %llu was written %s ago; the limit is %s (weft serve --max-age), twice it "
        "fails", (unsigned long long)rq->model->version, a, m);
}

static void check_gate(const json_t *manifest, http_check *out, size_t *n)
{
    const json_t *gate = json_object_get(manifest, "gate");
    if (!json_is_object(gate)) {
        say(add(out, n, "gate", HTTP_CHECK_OK, NAN, NAN),
            "no gate record: written before weft train gated snapshots");
        return;
    }
    const char *reason = json_string_value(json_object_get(gate, "reason"));
    if (json_is_true(json_object_get(gate, "passed")))
        say(add(out, n, "gate", HTTP_CHECK_OK, NAN, NAN), "passed the gate at training");
    else if (json_is_true(json_object_get(gate, "forced")))
        say(add(out, n, "gate", HTTP_CHECK_WARN, NAN, NAN),
            "promoted past the gate (forced): %s", reason ? reason : "no reason recorded");
    else
        say(add(out, n, "gate", HTTP_CHECK_WARN, NAN, NAN), "did not pass the gate: %s",
            reason ? reason : "no reason recorded");
}

/* models.<part>.metrics, or the top-level metrics of a manifest without "models". */
static const json_t *metrics_of(const json_t *manifest, const char *part, bool is_only)
{
    const json_t *models = json_object_get(manifest, "models");
    const json_t *m = json_object_get(json_object_get(models, part), "metrics");
    if (!m && !models && is_only)
        m = json_object_get(manifest, "metrics");
    return json_is_object(m) ? m : NULL;
}

/* The model's test @p metric against the best baseline's, judged by the manifest's verdict
 * beats_baselines (which also weighs AUC for links). */
static void check_baselines(const json_t *metrics, const char *name, const char *part,
                            const char *metric, http_check *out, size_t *n)
{
    double value = NAN, best = NAN;
    const char *best_name = NULL;
    const json_t *v = json_object_get(json_object_get(metrics, "test"), metric);
    if (json_is_number(v))
        value = json_number_value(v);
    const char *key;
    const json_t *b;
    json_object_foreach(json_object_get(metrics, "baselines"), key, b) {
        const json_t *bv = json_object_get(b, metric);
        if (json_is_number(bv) && (isnan(best) || json_number_value(bv) > best)) {
            best = json_number_value(bv);
            best_name = key;
        }
    }
    const json_t *beats = json_object_get(metrics, "beats_baselines");
    if (!json_is_boolean(beats)) {
        say(add(out, n, name, HTTP_CHECK_WARN, value, best),
            "the manifest does not say whether the %s model beats its baselines", part);
        return;
    }
    bool is_better = json_is_true(beats);
    say(add(out, n, name, is_better ? HTTP_CHECK_OK : HTTP_CHECK_FAIL, value, best),
        "%s model: test %s %.4g, best baseline (%s) %.4g: %s", part, metric, value,
        best_name ? best_name : "none", best,
        is_better ? "beats its baselines" : "does not beat its baselines");
}

static void check_nonfinite(const http_checks *k, http_check *out, size_t *n)
{
    if (k->n_nonfinite)
        say(add(out, n, "nonfinite_values", HTTP_CHECK_FAIL, (double)k->n_nonfinite, 0),
            "%zu of %zu float values are NaN or infinite, the first in blob '%s'",
            k->n_nonfinite, k->n_floats, k->nonfinite_blob);
    else
        say(add(out, n, "nonfinite_values", HTTP_CHECK_OK, 0, 0),
            "all %zu float values are finite", k->n_floats);
}

static void check_norms(const http_model *m, http_check *out, size_t *n)
{
    const http_checks *k = &m->checks;
    if (!m->has_links || k->norm_rows == 0) {
        say(add(out, n, "embedding_norm_spread", HTTP_CHECK_OK, NAN, NORM_RATIO_WARN),
            m->has_links ? "no entity row with finite values to measure"
                         : "no embedding matrix: the snapshot holds a label model only");
        return;
    }
    if (!(k->norm_p01 > 0)) {
        say(add(out, n, "embedding_norm_spread", HTTP_CHECK_FAIL, NAN, NORM_RATIO_WARN),
            "%zu of %zu entity rows have norm 0 (at least 1%%: untrained or collapsed rows)",
            k->norm_zero_rows, k->norm_rows);
        return;
    }
    double ratio = k->norm_p99 / k->norm_p01;
    http_check_status st = ratio > NORM_RATIO_FAIL ? HTTP_CHECK_FAIL
                           : ratio > NORM_RATIO_WARN ? HTTP_CHECK_WARN
                                                     : HTTP_CHECK_OK;
    say(add(out, n, "embedding_norm_spread", st, ratio, NORM_RATIO_WARN),
        "entity row norms: 1st percentile %.4g, median %.4g, 99th percentile %.4g over %zu "
        "rows; p99/p1 warns above %.0f, fails above %.0f", k->norm_p01, k->norm_p50,
        k->norm_p99, k->norm_rows, NORM_RATIO_WARN, NORM_RATIO_FAIL);
}

/* The link model's index, when the snapshot has one: the recall@10 measured against the
 * exact scan when it was written (include/weft/link_index.h), against its floor. Below the
 * floor only a forced promotion can have made it live. */
static void check_index(const http_model *m, const json_t *manifest, http_check *out,
                        size_t *n)
{
    if (!m->has_links || m->index.kind == WEFT_LINK_INDEX_EXACT)
        return;
    const json_t *rec = json_object_get(json_object_get(manifest, "link"), "index");
    double floor = json_number_value(json_object_get(rec, "recall_floor"));
    json_int_t probes = json_integer_value(json_object_get(rec, "probe_queries"));
    char lists[80] = "";
    if (weft_link_index_is_clustered(m->index.kind))
        snprintf(lists, sizeof lists, ", %zu of %zu lists scanned per query", m->index.nprobe,
                 m->index.ivf.n_lists);
    http_check_status st = m->index.recall >= floor ? HTTP_CHECK_OK : HTTP_CHECK_FAIL;
    say(add(out, n, "index_recall", st, m->index.recall, floor),
        "%s index (oversample %zu%s): recall@10 %.4f against the exact scan on %lld probe "
        "queries when it was written, floor %g; exact=true scans every row",
        weft_link_index_kind_name(m->index.kind), m->index.oversample, lists, m->index.recall,
        (long long)probes, floor);
}

static void check_drift(const http_model *m, http_check *out, size_t *n)
{
    const http_checks *k = &m->checks;
    const char *why = k->drift == HTTP_MEASURE_PENDING
                          ? "not measured yet: the loader compares with the version served "
                            "before this one (at start-up, the store's previous version)"
                          : k->drift_note[0] ? k->drift_note
                                             : "no previous version to compare with";
    bool is_done = k->drift == HTTP_MEASURE_DONE;
    if (m->has_links) {
        if (is_done && k->drift_probes) {
            http_check_status st =
                k->drift_links < DRIFT_LINKS_WARN ? HTTP_CHECK_WARN : HTTP_CHECK_OK;
            say(add(out, n, "drift_links", st, k->drift_links, DRIFT_LINKS_WARN),
                "top-10 link predictions of %zu probe nodes overlap %.1f%% on average with "
                "version %llu's", k->drift_probes, 100 * k->drift_links,
                (unsigned long long)k->drift_from);
        } else {
            say(add(out, n, "drift_links", HTTP_CHECK_OK, NAN, DRIFT_LINKS_WARN), "%s",
                is_done ? "no probe node and relation in both versions" : why);
        }
    }
    if (m->has_labels) {
        if (is_done && k->drift_nodes) {
            http_check_status st =
                k->drift_labels < DRIFT_LABELS_WARN ? HTTP_CHECK_WARN : HTTP_CHECK_OK;
            say(add(out, n, "drift_labels", st, k->drift_labels, DRIFT_LABELS_WARN),
                "%.1f%% of the %zu nodes in both versions keep the class version %llu "
                "predicted", 100 * k->drift_labels, k->drift_nodes,
                (unsigned long long)k->drift_from);
        } else {
            say(add(out, n, "drift_labels", HTTP_CHECK_OK, NAN, DRIFT_LABELS_WARN), "%s",
                is_done ? "no label model in both versions" : why);
        }
    }
}

static void check_coverage(const http_checks *k, http_check *out, size_t *n)
{
    if (k->coverage == HTTP_MEASURE_DONE && k->coverage_names) {
        double share = (double)k->coverage_found / (double)k->coverage_names;
        http_check_status st = share < COVERAGE_FAIL ? HTTP_CHECK_FAIL
                               : share < COVERAGE_WARN ? HTTP_CHECK_WARN
                                                       : HTTP_CHECK_OK;
        say(add(out, n, "input_coverage", st, share, COVERAGE_WARN),
            "%zu of the %zu nodes in the input files are in the node table (%s); below %.0f%% "
            "fails", k->coverage_found, k->coverage_names, k->coverage_note,
            100 * COVERAGE_FAIL);
    } else if (k->coverage == HTTP_MEASURE_FAILED) {
        say(add(out, n, "input_coverage", HTTP_CHECK_WARN, NAN, COVERAGE_WARN),
            "the input files could not be read: %s", k->coverage_note);
    } else {
        say(add(out, n, "input_coverage", HTTP_CHECK_OK, NAN, COVERAGE_WARN), "%s",
            k->coverage == HTTP_MEASURE_PENDING ? "not measured yet"
            : k->coverage == HTTP_MEASURE_DONE  ? "the input files hold no node"
                                                : k->coverage_note);
    }
}

/* Only after a load failure, so that a server that loaded every version lists the same
 * checks as before. The value is the number of versions that failed since the start. */
static void check_load(const http_request *rq, const http_live_failure *f, double now,
                       http_check *out, size_t *n)
{
    if (!f->version)
        return;
    http_live_counts counts;
    http_live_get_counts(rq->live, &counts);
    double failures = (double)counts.load_failures;
    char ago[32];
    human_age(now - f->at, ago, sizeof ago);
    if (f->is_current)
        say(add(out, n, "snapshot_load", HTTP_CHECK_WARN, failures, NAN),
            "the store's live version %llu failed to load %s ago and is not served (%.110s); "
            "version %llu, verified when it was loaded, answers instead",
            (unsigned long long)f->version, ago, f->message,
            (unsigned long long)rq->model->version);
    else
        say(add(out, n, "snapshot_load", HTTP_CHECK_OK, failures, NAN),
            "the store's live version %llu is served; version %llu failed to load %s ago "
            "(%.110s)", (unsigned long long)rq->model->version, (unsigned long long)f->version,
            ago, f->message);
}

size_t http_health_evaluate(const http_request *rq, double now, http_check *out)
{
    size_t n = 0;
    const http_model *m = rq->model;
    http_live_failure failure = { 0 };
    if (rq->live)
        http_live_get_failure(rq->live, &failure);
    if (!m && failure.is_current) {
        say(add(out, &n, "snapshot", HTTP_CHECK_FAIL, NAN, NAN),
            "no snapshot is live: the store's live version %llu failed to load (%.110s); the "
            "server picks up the next version promoted", (unsigned long long)failure.version,
            failure.message);
        return n;
    }
    if (!m) {
        say(add(out, &n, "snapshot", HTTP_CHECK_FAIL, NAN, NAN),
            "no snapshot is live yet: run 'weft train --store DIR ...'; the server picks it "
            "up without a restart");
        return n;
    }
    const json_t *manifest = weft_snapshot_manifest(m->snap);
    check_load(rq, &failure, now, out, &n);
    check_age(rq, now, out, &n);
    check_gate(manifest, out, &n);
    if (m->has_links)
        check_baselines(metrics_of(manifest, "link", !m->has_labels), "baselines_links", "link",
                        "mrr", out, &n);
    if (m->has_labels)
        check_baselines(metrics_of(manifest, "labels", !m->has_links), "baselines_labels",
                        "label", "accuracy", out, &n);
    check_nonfinite(&m->checks, out, &n);
    check_norms(m, out, &n);
    check_index(m, manifest, out, &n);
    check_drift(m, out, &n);
    check_coverage(&m->checks, out, &n);
    return n;
}

/* ---- handlers ---- */

static json_t *number_or_null(double v)
{
    return isfinite(v) ? json_real(v) : json_null();
}

static json_t *check_json(const http_check *c)
{
    /* values that are whole numbers (counts, seconds) print as integers */
    json_t *value = isfinite(c->value) && c->value == floor(c->value) && fabs(c->value) < 1e15
                        ? json_integer((json_int_t)c->value)
                        : number_or_null(c->value);
    json_t *threshold = isfinite(c->threshold) && c->threshold == floor(c->threshold)
                                && fabs(c->threshold) < 1e15
                            ? json_integer((json_int_t)c->threshold)
                            : number_or_null(c->threshold);
    json_t *message = json_string(c->message);
    if (!message)   /* a note quoting a file path that is not UTF-8 */
        message = json_string("(the message is not valid UTF-8)");
    return json_pack("{s:s, s:s, s:o, s:o, s:o}", "name", c->name, "status",
                     http_check_status_name(c->status), "value", value, "threshold", threshold,
                     "message", message);
}

static double now_unix(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec / 1e9;
}

/* {"status": worst of the checks, "checks": [...]}; 200 for ok and warn, 503 for fail. */
void http_health_get(const http_request *rq, http_reply *out)
{
    http_check checks[HTTP_MAX_CHECKS];
    size_t n = http_health_evaluate(rq, now_unix(), checks);
    http_check_status worst = HTTP_CHECK_OK;
    json_t *list = json_array();
    for (size_t i = 0; i < n; i++) {
        if (checks[i].status > worst)
            worst = checks[i].status;
        if (list && json_array_append_new(list, check_json(&checks[i])) != 0) {
            json_decref(list);
            list = NULL;
        }
    }
    json_t *body = list ? json_pack("{s:s, s:o}", "status", http_check_status_name(worst),
                                    "checks", list)
                        : NULL;
    if (!body) {
        http_error_reply(out, HTTP_FAULT_INTERNAL, NULL, "out of memory building the checks");
        return;
    }
    out->status = worst == HTTP_CHECK_FAIL ? MHD_HTTP_SERVICE_UNAVAILABLE : MHD_HTTP_OK;
    out->body = body;
}

/* 200 once a snapshot is live (weft_snapshot_open verified every blob's CRC before it was
 * published), 503 before that and while the server drains for shutdown, so that a load
 * balancer stops sending before the listener closes. */
void http_health_readyz(const http_request *rq, http_reply *out)
{
    const char *reason = rq->is_draining ? "the server is shutting down"
                         : !rq->model   ? "no verified snapshot is loaded yet"
                                        : NULL;
    out->status = reason ? MHD_HTTP_SERVICE_UNAVAILABLE : MHD_HTTP_OK;
    out->body = json_pack("{s:b, s:s?}", "ready", reason == NULL, "reason", reason);
}
