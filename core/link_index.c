/* A link model's approximate index in a snapshot (include/weft/link_index.h). */
#include "weft/link_index.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "weft/alloc.h"
#include "weft/rng.h"
#include "weft/topk.h"

enum { PROBE_K = 10 };

/* The probe set's seed: fixed, so every snapshot of a model is measured on the same anchors. */
#define PROBE_SEED 0x70726f6265736574ull

static const char *const kind_names[] = { "exact", "int8", "ivf", "ivf-pq" };

const char *weft_link_index_kind_name(weft_link_index_kind kind)
{
    return (unsigned)kind < sizeof kind_names / sizeof kind_names[0] ? kind_names[kind] : NULL;
}

bool weft_link_index_kind_parse(const char *name, weft_link_index_kind *out)
{
    for (size_t i = 0; name && i < sizeof kind_names / sizeof kind_names[0]; i++)
        if (!strcmp(name, kind_names[i])) {
            *out = (weft_link_index_kind)i;
            return true;
        }
    return false;
}

weft_link_index_settings weft_link_index_defaults(weft_link_index_kind kind)
{
    /* 16 for product codes: on WN18RR's DistMult rows and test queries their recall@10 was
     * about 0.97 with 80 candidates and 0.99 with 160 (a numpy study while they were designed;
     * bench/index.sh measures the default). */
    return (weft_link_index_settings){ .kind = kind,
                                       .oversample = kind == WEFT_LINK_INDEX_IVF_PQ ? 16 : 4,
                                       .iters = 10,
                                       .recall_floor = 0.95, .seed = 1, .n_threads = 1 };
}

static double seconds_now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

void weft_link_index_fini(weft_link_index *ix)
{
    free(ix->code);
    free(ix->scale);
    weft_index_ivf_fini(&ix->ivf);
    memset(ix, 0, sizeof *ix);
}

/* The probe queries and their exact top 10. */
struct probes {
    size_t n, d;
    float *q;            /* (n, d) */
    uint32_t *want;      /* (n, PROBE_K) */
    size_t *n_want;
};

static void probes_fini(struct probes *p)
{
    free(p->q);
    free(p->want);
    free(p->n_want);
}

static weft_err probes_init(struct probes *p, const weft_link_model *m, weft_error *err)
{
    memset(p, 0, sizeof *p);
    p->n = m->n_entities < WEFT_LINK_INDEX_PROBES ? m->n_entities : WEFT_LINK_INDEX_PROBES;
    p->d = m->dim;
    p->q = weft_alloc_array(p->n ? p->n : 1, p->d * sizeof *p->q);
    p->want = weft_alloc_array(p->n ? p->n : 1, PROBE_K * sizeof *p->want);
    p->n_want = weft_alloc_array(p->n ? p->n : 1, sizeof *p->n_want);
    float score[PROBE_K];
    if (!p->q || !p->want || !p->n_want) {
        probes_fini(p);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the index's probes");
    }
    weft_rng rng;
    weft_rng_seed(&rng, PROBE_SEED);
    for (size_t i = 0; i < p->n; i++) {
        uint32_t anchor = weft_rng_below(&rng, (uint32_t)m->n_entities);
        uint32_t r = m->n_relations ? (uint32_t)(i % m->n_relations) : 0;
        weft_model_query(m, anchor, r, i % 2 == 1, p->q + i * p->d);
        p->n_want[i] = weft_topk_scan(m->entity, m->n_entities, p->d, p->q + i * p->d, PROBE_K,
                                      NULL, p->want + i * PROBE_K, score);
    }
    return WEFT_OK;
}

/* Recall@10 of @p ix (nprobe as set in it) on @p p. */
static weft_err measure(const weft_link_index *ix, const weft_link_model *m,
                        const struct probes *p, double *recall, weft_error *err)
{
    double sum = 0.0;
    for (size_t i = 0; i < p->n; i++) {
        uint32_t got[PROBE_K];
        float score[PROBE_K];
        size_t n_got = 0;
        const float *q = p->q + i * p->d;
        weft_err rc;
        if (weft_link_index_is_clustered(ix->kind))
            rc = weft_index_ivf_search(&ix->ivf.ivf, m->entity, q, PROBE_K, ix->nprobe,
                                       ix->oversample, NULL, got, score, &n_got, err);
        else {
            weft_index_codes c = { .n = ix->n, .d = ix->d, .code = ix->code,
                                   .scale = ix->scale };
            rc = weft_index_int8_search(&c, m->entity, q, PROBE_K, ix->oversample, NULL, got,
                                        score, &n_got, err);
        }
        if (rc != WEFT_OK)
            return rc;
        size_t hit = 0;
        for (size_t a = 0; a < p->n_want[i]; a++)
            for (size_t b = 0; b < n_got; b++)
                if (p->want[i * PROBE_K + a] == got[b]) {
                    hit++;
                    break;
                }
        sum += p->n_want[i] ? (double)hit / (double)p->n_want[i] : 1.0;
    }
    *recall = p->n ? sum / (double)p->n : 1.0;
    return WEFT_OK;
}

/* The smallest power of two of lists reaching @p target (or every list), measured. */
static weft_err tune_nprobe(weft_link_index *ix, const weft_link_model *m,
                            const struct probes *p, double target, weft_error *err)
{
    size_t n_lists = ix->ivf.ivf.n_lists;
    for (size_t np = 1;; np = np * 2 < n_lists ? np * 2 : n_lists) {
        ix->nprobe = np;
        weft_err rc = measure(ix, m, p, &ix->recall, err);
        if (rc != WEFT_OK || ix->recall >= target || np == n_lists)
            return rc;
    }
}

weft_err weft_link_index_build(const weft_link_model *m, const weft_link_index_settings *s,
                               weft_link_index *out, weft_error *err)
{
    memset(out, 0, sizeof *out);
    out->kind = s->kind;
    if (s->kind == WEFT_LINK_INDEX_EXACT)
        return WEFT_OK;
    if (!weft_link_index_kind_name(s->kind) || s->oversample < 1 || s->oversample > 1000
        || !(s->recall_floor >= 0.0 && s->recall_floor <= 1.0))
        return weft_error_set(err, WEFT_ERR_INVALID, "index settings out of range");
    if (m->n_entities == 0 || m->n_entities >= UINT32_MAX)
        return weft_error_set(err, WEFT_ERR_INVALID, "an index needs 1 to 2^32 - 1 rows");
    size_t n = m->n_entities, d = m->dim;
    out->n = n;
    out->d = d;
    out->oversample = s->oversample;
    out->recall_floor = s->recall_floor;
    struct probes p;
    weft_err rc = probes_init(&p, m, err);
    if (rc != WEFT_OK)
        return rc;
    out->n_probes = p.n;
    double t0 = seconds_now(), tuning = 0.0;
    if (s->kind == WEFT_LINK_INDEX_INT8) {
        out->code = weft_alloc_array(weft_index_code_bytes(n, d), 1);
        out->scale = weft_alloc_array(n, sizeof *out->scale);
        if (!out->code || !out->scale) {
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for an int8 index");
            goto done;
        }
        weft_index_encode(m->entity, n, d, out->code, out->scale);
        out->build_seconds = seconds_now() - t0;
        out->bytes = weft_index_code_bytes(n, d) + n * sizeof *out->scale;
        rc = measure(out, m, &p, &out->recall, err);
    } else {
        bool is_pq = s->kind == WEFT_LINK_INDEX_IVF_PQ;
        rc = weft_index_ivf_build(m->entity, n, d, s->n_lists, s->iters ? s->iters : 10, s->seed,
                                  s->n_threads ? s->n_threads : 1,
                                  is_pq ? WEFT_INDEX_LISTS_PQ4 : WEFT_INDEX_LISTS_INT8, &out->ivf,
                                  err);
        if (rc != WEFT_OK)
            goto done;
        double t1 = seconds_now();
        if (s->nprobe) {
            out->nprobe = s->nprobe < out->ivf.ivf.n_lists ? s->nprobe : out->ivf.ivf.n_lists;
            rc = measure(out, m, &p, &out->recall, err);
        } else {
            rc = tune_nprobe(out, m, &p, s->recall_floor + (1.0 - s->recall_floor) / 2.0, err);
            tuning = seconds_now() - t1;
        }
        out->build_seconds = (t1 - t0) + tuning;
        const weft_index_ivf *v = &out->ivf.ivf;
        size_t nl = v->n_lists;
        out->bytes = nl * (d + 1) * sizeof(float) + (nl + 1) * sizeof(uint64_t)
                     + n * sizeof(uint32_t);
        if (is_pq)
            out->bytes += v->pq.n_sub * WEFT_INDEX_PQ_CODEWORDS * v->pq.sub_dims * sizeof(float)
                          + (nl + 1) * sizeof(uint64_t)
                          + v->pq.list_block[nl] * weft_index_pq_block_bytes(v->pq.n_sub);
        else
            out->bytes += n * sizeof(float) + weft_index_code_bytes(n, d);
    }
done:
    probes_fini(&p);
    if (rc != WEFT_OK)
        weft_link_index_fini(out);
    return rc;
}

/* The code layout a kind's blobs are in. */
static const char *layout_of(weft_link_index_kind kind)
{
    return kind == WEFT_LINK_INDEX_IVF_PQ ? WEFT_INDEX_PQ_CODE_LAYOUT : WEFT_INDEX_CODE_LAYOUT;
}

json_t *weft_link_index_json(const weft_link_index *ix)
{
    json_t *o = json_pack("{s:s, s:s, s:I, s:f, s:f, s:I, s:f, s:I}", "kind",
                          weft_link_index_kind_name(ix->kind), "code_layout",
                          layout_of(ix->kind), "oversample",
                          (json_int_t)ix->oversample, "recall_at_10", ix->recall, "recall_floor",
                          ix->recall_floor, "probe_queries", (json_int_t)ix->n_probes,
                          "build_seconds", ix->build_seconds, "bytes", (json_int_t)ix->bytes);
    const weft_index_ivf *v = &ix->ivf.ivf;
    if (o && weft_link_index_is_clustered(ix->kind)
        && (json_object_set_new(o, "lists", json_integer((json_int_t)v->n_lists))
            || json_object_set_new(o, "nprobe", json_integer((json_int_t)ix->nprobe)))) {
        json_decref(o);
        return NULL;
    }
    if (o && ix->kind == WEFT_LINK_INDEX_IVF_PQ
        && (json_object_set_new(o, "subspaces", json_integer((json_int_t)v->pq.n_sub))
            || json_object_set_new(o, "subspace_dims",
                                   json_integer((json_int_t)v->pq.sub_dims)))) {
        json_decref(o);
        return NULL;
    }
    return o;
}

weft_err weft_link_index_put(weft_store_writer *w, json_t *manifest, const weft_link_index *ix,
                             weft_error *err)
{
    if (ix->kind == WEFT_LINK_INDEX_EXACT)
        return WEFT_OK;
    json_t *link = json_object_get(manifest, "link"), *rec = weft_link_index_json(ix);
    if (!json_is_object(link) || !rec || json_object_set_new(link, "index", rec))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory writing the manifest");
    size_t n = ix->n, d = ix->d, row_shape[1] = { n };
    size_t code_shape[2] = { weft_index_blocks(n), weft_index_block_bytes(d) };
    bool is_ivf = weft_link_index_is_clustered(ix->kind);
    const weft_index_ivf *v = &ix->ivf.ivf;
    weft_err rc;
    if (ix->kind == WEFT_LINK_INDEX_IVF_PQ) {
        const weft_index_pq *pq = &v->pq;
        size_t cb_shape[2] = { pq->n_sub, WEFT_INDEX_PQ_CODEWORDS * pq->sub_dims };
        size_t block_shape[1] = { v->n_lists + 1 };
        size_t pq_shape[2] = { pq->list_block[v->n_lists],
                               weft_index_pq_block_bytes(pq->n_sub) };
        if ((rc = weft_store_writer_put(w, "index.pq_codebook", WEFT_DTYPE_F32, 2, cb_shape,
                                        pq->codebook, err))
            || (rc = weft_store_writer_put(w, "index.pq_list_block", WEFT_DTYPE_U64, 1,
                                           block_shape, pq->list_block, err))
            || (rc = weft_store_writer_put(w, "index.pq_code", WEFT_DTYPE_U8, 2, pq_shape,
                                           pq->code, err)))
            return rc;
    } else if ((rc = weft_store_writer_put(w, "index.code", WEFT_DTYPE_U8, 2, code_shape,
                                           is_ivf ? v->codes.code : ix->code, err))
               || (rc = weft_store_writer_put(w, "index.scale", WEFT_DTYPE_F32, 1, row_shape,
                                              is_ivf ? v->codes.scale : ix->scale, err)))
        return rc;
    if (!is_ivf)
        return WEFT_OK;
    size_t centroid_shape[2] = { v->n_lists, d + 1 }, off_shape[1] = { v->n_lists + 1 };
    if ((rc = weft_store_writer_put(w, "index.centroid", WEFT_DTYPE_F32, 2, centroid_shape,
                                    v->centroid, err))
        || (rc = weft_store_writer_put(w, "index.list_off", WEFT_DTYPE_U64, 1, off_shape,
                                       v->list_off, err)))
        return rc;
    return weft_store_writer_put(w, "index.row_id", WEFT_DTYPE_U32, 1, row_shape, v->row_id,
                                 err);
}

/* Blob @p name of @p dtype with shape (@p d0) or (@p d0, @p d1) (@p d1 == 0: one dimension). */
static weft_err need(const weft_snapshot *snap, const char *name, weft_dtype dtype, size_t d0,
                     size_t d1, weft_blob *out, weft_error *err)
{
    size_t ndim = d1 ? 2 : 1;
    if (!weft_snapshot_blob(snap, name, out))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "the manifest lists an index but blob "
                              "'%s' is missing", name);
    if (out->dtype != dtype || out->ndim != ndim || out->shape[0] != d0
        || (d1 && out->shape[1] != d1))
        return weft_error_set(err, WEFT_ERR_CORRUPT, "index blob '%s' has the wrong dtype or "
                              "shape for the model", name);
    return WEFT_OK;
}

/* The product-quantised lists of @p snap for the lists of @p ivf (checked), into ivf->pq. */
static weft_err pq_view_of(const weft_snapshot *snap, const json_t *rec, weft_index_ivf *ivf,
                           weft_error *err)
{
    size_t d = ivf->d, nl = ivf->n_lists;
    size_t s = weft_index_pq_sub_dims(d), n_sub = weft_index_pq_subspaces(d);
    if (json_integer_value(json_object_get(rec, "subspaces")) != (json_int_t)n_sub
        || json_integer_value(json_object_get(rec, "subspace_dims")) != (json_int_t)s)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "the manifest's product-quantised index "
                              "record does not have %zu subspaces of %zu values for %zu "
                              "dimensions", n_sub, s, d);
    weft_blob cb, lb, code;
    weft_err rc;
    if ((rc = need(snap, "index.pq_codebook", WEFT_DTYPE_F32, n_sub,
                   WEFT_INDEX_PQ_CODEWORDS * s, &cb, err))
        || (rc = need(snap, "index.pq_list_block", WEFT_DTYPE_U64, nl + 1, 0, &lb, err)))
        return rc;
    const uint64_t *b = lb.data;
    if (b[0] != 0)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "index code blocks do not start at 0");
    for (size_t l = 0; l < nl; l++) {
        uint64_t rows = ivf->list_off[l + 1] - ivf->list_off[l];
        if (b[l + 1] < b[l]
            || b[l + 1] - b[l] != (rows + WEFT_INDEX_PQ_BLOCK_ROWS - 1) / WEFT_INDEX_PQ_BLOCK_ROWS)
            return weft_error_set(err, WEFT_ERR_CORRUPT, "index list %zu has the wrong number "
                                  "of code blocks", l);
    }
    if ((rc = need(snap, "index.pq_code", WEFT_DTYPE_U8, b[nl], weft_index_pq_block_bytes(n_sub),
                   &code, err)))
        return rc;
    ivf->list_codes = WEFT_INDEX_LISTS_PQ4;
    ivf->pq = (weft_index_pq){ .n_sub = n_sub, .sub_dims = s, .codebook = cb.data,
                               .list_block = b, .code = code.data };
    return WEFT_OK;
}

weft_err weft_link_index_view_of(const weft_snapshot *snap, const weft_link_view *v,
                                 weft_link_index_view *out, weft_error *err)
{
    memset(out, 0, sizeof *out);
    const json_t *rec = json_object_get(json_object_get(weft_snapshot_manifest(snap), "link"),
                                        "index");
    if (!rec)
        return WEFT_OK;
    weft_link_index_kind kind;
    json_int_t oversample = json_integer_value(json_object_get(rec, "oversample"));
    if (!weft_link_index_kind_parse(json_string_value(json_object_get(rec, "kind")), &kind)
        || oversample < 1 || oversample > 1000)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "the manifest's link index record is "
                              "malformed");
    /* An index of another code layout (an earlier weft's rows one after another) is not
     * read: the snapshot is served by the exact scan, as if it held none. */
    const char *layout = json_string_value(json_object_get(rec, "code_layout"));
    if (kind == WEFT_LINK_INDEX_EXACT || !layout || strcmp(layout, layout_of(kind)))
        return WEFT_OK;
    size_t n = v->n_nodes, d = v->dim;
    weft_blob code, scale;
    weft_err rc;
    weft_index_codes codes = { 0 };
    if (kind != WEFT_LINK_INDEX_IVF_PQ) {
        if ((rc = need(snap, "index.code", WEFT_DTYPE_U8, weft_index_blocks(n),
                       weft_index_block_bytes(d), &code, err))
            || (rc = need(snap, "index.scale", WEFT_DTYPE_F32, n, 0, &scale, err)))
            return rc;
        codes = (weft_index_codes){ .n = n, .d = d, .code = code.data, .scale = scale.data };
    }
    out->oversample = (size_t)oversample;
    out->recall = json_number_value(json_object_get(rec, "recall_at_10"));
    if (kind == WEFT_LINK_INDEX_INT8) {
        out->kind = kind;
        out->codes = codes;
        return WEFT_OK;
    }
    json_int_t n_lists = json_integer_value(json_object_get(rec, "lists"));
    json_int_t nprobe = json_integer_value(json_object_get(rec, "nprobe"));
    if (n_lists < 1 || (uint64_t)n_lists > n || nprobe < 1 || nprobe > n_lists)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "the manifest's clustered index record "
                              "has lists %lld and nprobe %lld for %zu rows",
                              (long long)n_lists, (long long)nprobe, n);
    size_t nl = (size_t)n_lists;
    weft_blob centroid, off, row;
    if ((rc = need(snap, "index.centroid", WEFT_DTYPE_F32, nl, d + 1, &centroid, err))
        || (rc = need(snap, "index.list_off", WEFT_DTYPE_U64, nl + 1, 0, &off, err))
        || (rc = need(snap, "index.row_id", WEFT_DTYPE_U32, n, 0, &row, err)))
        return rc;
    const uint64_t *o = off.data;
    const uint32_t *ids = row.data;
    if (o[0] != 0 || o[nl] != n)
        return weft_error_set(err, WEFT_ERR_CORRUPT, "index lists do not cover the %zu rows", n);
    for (size_t l = 0; l < nl; l++)
        if (o[l + 1] < o[l])
            return weft_error_set(err, WEFT_ERR_CORRUPT, "index list %zu ends before it starts",
                                  l);
    for (size_t i = 0; i < n; i++)
        if (ids[i] >= n)
            return weft_error_set(err, WEFT_ERR_CORRUPT, "index row id %u past the %zu rows",
                                  ids[i], n);
    weft_index_ivf ivf = { .n = n, .d = d, .n_lists = nl, .centroid = centroid.data,
                           .list_off = o, .row_id = ids, .codes = codes };
    if (kind == WEFT_LINK_INDEX_IVF_PQ
        && (rc = pq_view_of(snap, rec, &ivf, err)) != WEFT_OK)
        return rc;
    out->kind = kind;
    out->nprobe = (size_t)nprobe;
    out->ivf = ivf;
    return WEFT_OK;
}
