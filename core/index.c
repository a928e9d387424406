/* Approximate top-k indexes with exact re-scoring (include/weft/index.h).
 *
 * The int8 scan: a query q is quantised too, q8 = round(q / sq) with sq = max |q| / 127,
 * and row i's approximate score is scale_i sq (sum_j byte_ij q8_j - 128 sum_j q8_j), where
 * byte = code + 128 (so the sum of byte x q8 is what VNNI's unsigned-by-signed product
 * gives, and the offset costs one subtraction per row). Rows are scored 16 at a time, in
 * the blocked layout of include/weft/index.h (a block's 16 sums build up in the 16 lanes of
 * one register, four values of each row per instruction), and a block's scores are compared
 * with the candidate selection's bar before any is offered, as
 * in core/topk.c. The candidates are then re-scored with weft_kernel_dot, so the scores
 * returned, and the order, are those of the exact scan; a list differs from the exact one
 * only where a row of the exact top k was not among the candidates. */
#include "weft/index.h"

#include <math.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>

#include "index_pq.h"
#include "internal.h"
#include "weft/alloc.h"
#include "weft/gemm.h"
#include "weft/kernels.h"
#include "weft/rng.h"

#if defined(__x86_64__) && defined(__GNUC__)
#define WEFT_INDEX_X86 1
#include <immintrin.h>
#endif

/* Rows per block of the k-means assignment: the block's distances to every centroid
 * (BLOCK x k floats) are one matrix product. */
enum { ASSIGN_ROWS = 256 };

enum { BLOCK = WEFT_INDEX_BLOCK_ROWS, GROUP = WEFT_INDEX_GROUP };

static int8_t clamp_code(float v)
{
    long c = lrintf(v);
    return (int8_t)(c > 127 ? 127 : c < -127 ? -127 : c);
}

/* Row @p x (d values) into position @p pos of the blocked codes @p code, its scale into
 * *@p scale. The padding around it is left as it is (128 from weft_index_encode's fill). */
static void encode_row(const float *x, size_t d, uint8_t *code, size_t pos, float *scale)
{
    float m = 0.0f;
    bool is_finite = true;
    for (size_t j = 0; j < d; j++) {
        is_finite &= isfinite(x[j]) != 0;
        float a = fabsf(x[j]);
        m = a > m ? a : m;
    }
    if (!is_finite || m == 0.0f) {
        for (size_t j = 0; j < d; j++)
            code[weft_index_code_at(d, pos, j)] = 128;
        *scale = is_finite ? 0.0f : NAN;
        return;
    }
    float s = m / 127.0f;
    for (size_t j = 0; j < d; j++)
        code[weft_index_code_at(d, pos, j)] = (uint8_t)(clamp_code(x[j] / s) + 128);
    *scale = s;
}

/* Rows @p row_id[p] of @p e (or row p, when row_id is NULL) into position p of @p code. */
static void encode_rows(const float *e, size_t n, size_t d, const uint32_t *row_id,
                        uint8_t *code, float *scale)
{
    memset(code, 128, weft_index_code_bytes(n, d));
    for (size_t p = 0; p < n; p++)
        encode_row(e + (size_t)(row_id ? row_id[p] : p) * d, d, code, p, scale + p);
}

void weft_index_encode(const float *e, size_t n, size_t d, uint8_t *code, float *scale)
{
    encode_rows(e, n, d, NULL, code, scale);
}

/* ---- the int8 scan ---- */

/* A quantised query. */
struct query8 {
    int32_t *q32;        /* the codes, GROUP to a word (the groups of a row; zero padded) */
    float sq;            /* its scale */
    int32_t offset;      /* 128 x sum of the codes: subtracted from each byte x code sum */
};

/* What a scan offers from: positions [p0, p1) of the codes, each position p the row
 * row_id[p] (or p, when row_id is NULL). */
struct scan_range {
    size_t p0, p1;
    const uint32_t *row_id;
};

static uint32_t row_at(const struct scan_range *r, size_t p)
{
    return r->row_id ? r->row_id[p] : (uint32_t)p;
}

/* The byte x code sums of the 16 rows of block @p blk (@p groups groups), portable: a loop
 * the compiler vectorises per instruction set. */
WEFT_CLONES
static void block_sums(const uint8_t *blk, size_t groups, const int32_t *q32, int32_t *out)
{
    for (size_t r = 0; r < BLOCK; r++)
        out[r] = 0;
    for (size_t g = 0; g < groups; g++) {
        const uint8_t *grp = blk + g * (GROUP * BLOCK);
        const int8_t *qg = (const int8_t *)(q32 + g);
        for (size_t r = 0; r < BLOCK; r++)
            for (size_t b = 0; b < GROUP; b++)
                out[r] += (int32_t)grp[r * GROUP + b] * (int32_t)qg[b];
    }
}

/* Score positions [r->p0, r->p1) of @p code and offer those that reach the candidates' bar,
 * portable: a block's sums first, then the bar check of each row in it. */
static void scan_portable(const uint8_t *code, const float *scale, size_t d,
                          const struct query8 *q, const struct scan_range *r,
                          const weft_index_filter *f, weft_topk *t)
{
    size_t groups = weft_index_groups(d), bytes = weft_index_block_bytes(d);
    int32_t sums[BLOCK];
    for (size_t b = r->p0 / BLOCK; b * BLOCK < r->p1; b++) {
        block_sums(code + b * bytes, groups, q->q32, sums);
        size_t lo = b * BLOCK < r->p0 ? r->p0 : b * BLOCK;
        size_t hi = (b + 1) * BLOCK < r->p1 ? (b + 1) * BLOCK : r->p1;
        for (size_t p = lo; p < hi; p++) {
            float s = (float)(sums[p - b * BLOCK] - q->offset) * (scale[p] * q->sq);
            if (s >= weft_index_bar(t))   /* a NaN scale: never >= */
                weft_index_offer(t, f, row_at(r, p), s);
        }
    }
}

#ifdef WEFT_INDEX_X86

#define VNNI __attribute__((target("avx512f,avx512bw,avx512vnni")))

/* The lanes of block @p b that lie in [p0, p1). */
VNNI static inline __mmask16 lanes_in(size_t b, size_t p0, size_t p1)
{
    size_t first = b * BLOCK;
    unsigned lo = first < p0 ? (unsigned)(p0 - first) : 0u;
    unsigned hi = p1 - first < BLOCK ? (unsigned)(p1 - first) : (unsigned)BLOCK;
    return (__mmask16)((0xffffu >> (BLOCK - hi)) & (0xffffu << lo));
}

/* scan_portable with VNNI: a block's 16 sums in one register (four chains of products, a
 * group of every row per instruction), the approximate scores and the bar check there too.
 * The same sums, so the same candidates. */
VNNI static void scan_vnni(const uint8_t *code, const float *scale, size_t d,
                           const struct query8 *q, const struct scan_range *r,
                           const weft_index_filter *f, weft_topk *t)
{
    size_t groups = weft_index_groups(d), bytes = weft_index_block_bytes(d);
    size_t g4 = groups & ~(size_t)3;
    const __m512i offset = _mm512_set1_epi32(q->offset);
    const __m512 sq = _mm512_set1_ps(q->sq);
    __m512 bar = _mm512_set1_ps(weft_index_bar(t));
    for (size_t b = r->p0 / BLOCK; b * BLOCK < r->p1; b++) {
        const uint8_t *blk = code + b * bytes;
        __m512i a0 = _mm512_setzero_si512(), a1 = a0, a2 = a0, a3 = a0;
        size_t g = 0;
        for (; g < g4; g += 4) {
            a0 = _mm512_dpbusd_epi32(a0, _mm512_loadu_si512(blk + (g + 0) * 64),
                                     _mm512_set1_epi32(q->q32[g + 0]));
            a1 = _mm512_dpbusd_epi32(a1, _mm512_loadu_si512(blk + (g + 1) * 64),
                                     _mm512_set1_epi32(q->q32[g + 1]));
            a2 = _mm512_dpbusd_epi32(a2, _mm512_loadu_si512(blk + (g + 2) * 64),
                                     _mm512_set1_epi32(q->q32[g + 2]));
            a3 = _mm512_dpbusd_epi32(a3, _mm512_loadu_si512(blk + (g + 3) * 64),
                                     _mm512_set1_epi32(q->q32[g + 3]));
        }
        for (; g < groups; g++)
            a0 = _mm512_dpbusd_epi32(a0, _mm512_loadu_si512(blk + g * 64),
                                     _mm512_set1_epi32(q->q32[g]));
        __m512i sums = _mm512_add_epi32(_mm512_add_epi32(a0, a1), _mm512_add_epi32(a2, a3));
        __mmask16 in = lanes_in(b, r->p0, r->p1);
        __m512 sc = _mm512_maskz_loadu_ps(in, scale + b * BLOCK);
        __m512 s = _mm512_mul_ps(_mm512_cvtepi32_ps(_mm512_sub_epi32(sums, offset)),
                                 _mm512_mul_ps(sc, sq));
        __mmask16 pass = _mm512_mask_cmp_ps_mask(in, s, bar, _CMP_GE_OQ);   /* NaN: false */
        if (pass) {
            float v[BLOCK];
            _mm512_storeu_ps(v, s);
            for (unsigned bits = pass; bits; bits &= bits - 1) {
                unsigned lane = (unsigned)__builtin_ctz(bits);
                weft_index_offer(t, f, row_at(r, b * BLOCK + lane), v[lane]);
            }
            bar = _mm512_set1_ps(weft_index_bar(t));
        }
    }
}

/* Set by weft_index_allow_native(false): the one mutable global of this module. */
static atomic_bool native_allowed = true;

bool weft_index_native_allowed(void)
{
    return atomic_load(&native_allowed);
}

static bool use_vnni(void)
{
    return weft_index_native_allowed() && __builtin_cpu_supports("avx512vnni")
           && __builtin_cpu_supports("avx512bw");
}

#else

bool weft_index_native_allowed(void)
{
    return false;
}

static bool use_vnni(void)
{
    return false;
}

#endif

bool weft_index_is_native(void)
{
    return use_vnni();
}

void weft_index_allow_native(bool allow)
{
#ifdef WEFT_INDEX_X86
    atomic_store(&native_allowed, allow);
#else
    (void)allow;
#endif
}

static void scan_codes(const uint8_t *code, const float *scale, size_t d,
                       const struct query8 *q, const struct scan_range *r,
                       const weft_index_filter *f, weft_topk *t)
{
    if (r->p0 >= r->p1)
        return;
#ifdef WEFT_INDEX_X86
    if (use_vnni()) {
        scan_vnni(code, scale, d, q, r, f, t);
        return;
    }
#endif
    scan_portable(code, scale, d, q, r, f, t);
}

/* Quantise @p q (d); false when out of memory. A non-finite query is left to the exact path
 * (*is_finite false). */
static bool query8_init(struct query8 *qq, const float *q, size_t d, bool *is_finite)
{
    memset(qq, 0, sizeof *qq);
    float m = 0.0f;
    *is_finite = true;
    for (size_t j = 0; j < d; j++) {
        *is_finite &= isfinite(q[j]) != 0;
        float a = fabsf(q[j]);
        m = a > m ? a : m;
    }
    size_t groups = weft_index_groups(d);
    qq->q32 = calloc(groups ? groups : 1, sizeof *qq->q32);
    if (!qq->q32)
        return false;
    if (!*is_finite || m == 0.0f)   /* zero codes: every approximate score is 0 */
        return true;
    qq->sq = m / 127.0f;
    int8_t *q8 = (int8_t *)qq->q32;
    int32_t sum = 0;
    for (size_t j = 0; j < d; j++) {
        q8[j] = clamp_code(q[j] / qq->sq);
        sum += q8[j];
    }
    qq->offset = 128 * sum;
    return true;
}

/* Re-score rows @p cand[0 .. n) exactly into the best k, best first. */
static size_t rescore_ids(const uint32_t *cand, size_t n, const float *e, size_t d,
                          const float *q, size_t k, uint32_t *id, float *score)
{
    weft_topk t;
    weft_topk_init(&t, k, id, score);
    for (size_t i = 0; i < n; i++)
        weft_topk_push(&t, cand[i], weft_kernel_dot(e + (size_t)cand[i] * d, q, d));
    return weft_topk_finish(&t);
}

/* Re-score the candidates in @p cand exactly into the best k, best first. */
static size_t rescore(const weft_topk *cand, const float *e, size_t d, const float *q,
                      size_t k, uint32_t *id, float *score)
{
    return rescore_ids(cand->id, cand->n, e, d, q, k, id, score);
}

/* Every row that passes @p f, scored exactly: what a non-finite query gets. */
static size_t exact_filtered(const float *e, size_t n, size_t d, const float *q, size_t k,
                             const weft_index_filter *f, uint32_t *id, float *score)
{
    weft_topk t;
    weft_topk_init(&t, k, id, score);
    for (size_t r = 0; r < n; r++)
        if (weft_index_type_passes(f, (uint32_t)r)
            && !weft_topk_is_excluded(f ? f->ex : NULL, (uint32_t)r))
            weft_topk_push(&t, (uint32_t)r, weft_kernel_dot(e + r * d, q, d));
    return weft_topk_finish(&t);
}

/* The candidate buffers: k x oversample entries. */
struct cands {
    weft_topk t;
    uint32_t *id;
    float *score;
};

static weft_err cands_init(struct cands *c, size_t k, size_t oversample, weft_error *err)
{
    size_t kc = k * (oversample ? oversample : 1);
    if (oversample && kc / oversample != k)
        return weft_error_set(err, WEFT_ERR_INVALID, "k x oversample overflows");
    c->id = weft_alloc_array(kc ? kc : 1, sizeof *c->id);
    c->score = weft_alloc_array(kc ? kc : 1, sizeof *c->score);
    if (!c->id || !c->score) {
        free(c->id);
        free(c->score);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu candidates", kc);
    }
    weft_topk_init(&c->t, kc, c->id, c->score);
    return WEFT_OK;
}

static void cands_fini(struct cands *c)
{
    free(c->id);
    free(c->score);
}

/* Bytes of codes per chunk of a shared scan: each chunk is scanned for every query in turn
 * while it sits in the core's L2 cache. */
enum { CHUNK_BYTES = 256 << 10 };

/* One query of weft_index_int8_search_many while it runs. */
struct pending {
    struct query8 qq;
    struct cands cand;
    bool is_scanned;     /* false: answered without the codes (k 0, a non-finite query) */
};

weft_err weft_index_int8_search_many(const weft_index_codes *c, const float *e,
                                     size_t oversample, weft_index_query *qs, size_t m,
                                     weft_error *err)
{
    for (size_t i = 0; i < m; i++)
        qs[i].n_out = 0;
    if (c->n == 0 || m == 0)
        return WEFT_OK;
    struct pending *p = calloc(m, sizeof *p);
    if (!p)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for %zu queries", m);
    weft_err rc = WEFT_OK;
    for (size_t i = 0; i < m && rc == WEFT_OK; i++) {
        weft_index_query *x = &qs[i];
        bool is_finite;
        if (x->k == 0)
            continue;
        if (!query8_init(&p[i].qq, x->q, c->d, &is_finite))
            rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a query");
        else if (!is_finite)
            x->n_out = exact_filtered(e, c->n, c->d, x->q, x->k, x->f, x->id, x->score);
        else if ((rc = cands_init(&p[i].cand, x->k, oversample, err)) == WEFT_OK)
            p[i].is_scanned = true;
    }
    if (rc == WEFT_OK) {
        size_t rows = CHUNK_BYTES / weft_index_block_bytes(c->d) * BLOCK;
        rows = rows ? rows : BLOCK;
        for (size_t p0 = 0; p0 < c->n; p0 += rows) {
            struct scan_range r = { .p0 = p0, .p1 = c->n - p0 < rows ? c->n : p0 + rows };
            for (size_t i = 0; i < m; i++)
                if (p[i].is_scanned)
                    scan_codes(c->code, c->scale, c->d, &p[i].qq, &r, qs[i].f, &p[i].cand.t);
        }
        for (size_t i = 0; i < m; i++)
            if (p[i].is_scanned)
                qs[i].n_out = rescore(&p[i].cand.t, e, c->d, qs[i].q, qs[i].k, qs[i].id,
                                      qs[i].score);
    }
    for (size_t i = 0; i < m; i++) {
        free(p[i].qq.q32);
        if (p[i].is_scanned)
            cands_fini(&p[i].cand);
    }
    free(p);
    return rc;
}

weft_err weft_index_int8_search(const weft_index_codes *c, const float *e, const float *q,
                                size_t k, size_t oversample, const weft_index_filter *f,
                                uint32_t *id, float *score, size_t *n_out, weft_error *err)
{
    weft_index_query x = { .q = q, .k = k, .f = f, .id = id, .score = score };
    weft_err rc = weft_index_int8_search_many(c, e, oversample, &x, 1, err);
    *n_out = x.n_out;
    return rc;
}

/* ---- k-means ---- */

/* Nearest centroid of each row of @p x (m x d, m <= ASSIGN_ROWS) into @p assign; @p dist is
 * m x k scratch, @p c2 the centroids' squared norms. */
static void assign_block(const float *x, size_t m, size_t d, const float *centroids, size_t k,
                         const float *c2, float *dist, uint32_t *assign, size_t n_threads)
{
    /* |x - c|^2 = |x|^2 - 2 x.c + |c|^2; |x|^2 is the same for every c of a row. */
    weft_gemm(false, true, m, k, d, -2.0f, x, d, centroids, d, 0.0f, dist, k, n_threads);
    for (size_t i = 0; i < m; i++) {
        const float *row = dist + i * k;
        size_t best = 0;
        float best_d = row[0] + c2[0];
        for (size_t c = 1; c < k; c++) {
            float v = row[c] + c2[c];
            if (v < best_d) {
                best_d = v;
                best = c;
            }
        }
        assign[i] = (uint32_t)best;
    }
}

static void squared_norms(const float *c, size_t k, size_t d, float *out)
{
    for (size_t i = 0; i < k; i++) {
        double s = 0.0;
        for (size_t j = 0; j < d; j++)
            s += (double)c[i * d + j] * c[i * d + j];
        out[i] = (float)s;
    }
}

/* Assign every row of @p x to its nearest centroid. */
static weft_err assign_all(const float *x, size_t n, size_t d, const float *centroids, size_t k,
                           uint32_t *assign, size_t n_threads, weft_error *err)
{
    float *c2 = weft_alloc_array(k, sizeof *c2);
    float *dist = weft_alloc_array(ASSIGN_ROWS, k * sizeof *dist);
    if (!c2 || !dist) {
        free(c2);
        free(dist);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory assigning %zu rows", n);
    }
    squared_norms(centroids, k, d, c2);
    for (size_t r0 = 0; r0 < n; r0 += ASSIGN_ROWS) {
        size_t m = n - r0 < ASSIGN_ROWS ? n - r0 : ASSIGN_ROWS;
        assign_block(x + r0 * d, m, d, centroids, k, c2, dist, assign + r0, n_threads);
    }
    free(c2);
    free(dist);
    return WEFT_OK;
}

static weft_err kmeans_threads(const float *x, size_t n, size_t d, size_t k, size_t iters,
                               float *centroids, uint32_t *assign, size_t n_threads,
                               weft_error *err)
{
    uint32_t *a = assign ? assign : weft_alloc_array(n ? n : 1, sizeof *a);
    double *sum = weft_alloc_array(k, d * sizeof *sum);
    size_t *count = weft_alloc_array(k, sizeof *count);
    weft_err rc = WEFT_OK;
    if (!a || !sum || !count) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for k-means (%zu x %zu)", k, d);
        goto done;
    }
    for (size_t it = 0; it < iters && rc == WEFT_OK; it++) {
        if ((rc = assign_all(x, n, d, centroids, k, a, n_threads, err)) != WEFT_OK)
            break;
        memset(sum, 0, k * d * sizeof *sum);
        memset(count, 0, k * sizeof *count);
        for (size_t i = 0; i < n; i++) {
            double *s = sum + (size_t)a[i] * d;
            for (size_t j = 0; j < d; j++)
                s[j] += x[i * d + j];
            count[a[i]]++;
        }
        for (size_t c = 0; c < k; c++)
            if (count[c])   /* an empty cluster keeps its centroid */
                for (size_t j = 0; j < d; j++)
                    centroids[c * d + j] = (float)(sum[c * d + j] / (double)count[c]);
    }
done:
    if (a != assign)
        free(a);
    free(sum);
    free(count);
    return rc;
}

weft_err weft_index_kmeans(const float *x, size_t n, size_t d, size_t k, size_t iters,
                           float *centroids, uint32_t *assign, weft_error *err)
{
    return kmeans_threads(x, n, d, k, iters, centroids, assign, 1, err);
}

/* ---- the clustered index ---- */

void weft_index_ivf_fini(weft_index_ivf_arrays *a)
{
    free(a->centroid);
    free(a->scale);
    free(a->list_off);
    free(a->row_id);
    free(a->code);
    free(a->codebook);
    free(a->list_block);
    free(a->pq_code);
    memset(a, 0, sizeof *a);
}

/* Row @p x (d) augmented to d + 1 coordinates for inner-product search under @p max2, the
 * largest squared row norm. */
static void augment(const float *x, size_t d, double max2, float *out)
{
    double s = 0.0;
    for (size_t j = 0; j < d; j++) {
        out[j] = x[j];
        s += (double)x[j] * x[j];
    }
    out[d] = (float)sqrt(max2 - s > 0.0 ? max2 - s : 0.0);
}

weft_err weft_index_ivf_build(const float *e, size_t n, size_t d, size_t n_lists, size_t iters,
                              uint64_t seed, size_t n_threads, weft_index_list_codes codes,
                              weft_index_ivf_arrays *out, weft_error *err)
{
    memset(out, 0, sizeof *out);
    if (n == 0 || n >= UINT32_MAX)
        return weft_error_set(err, WEFT_ERR_INVALID, "a clustered index needs 1 to 2^32 - 1 "
                              "rows, not %zu", n);
    bool is_pq = codes == WEFT_INDEX_LISTS_PQ4;
    size_t nl = n_lists ? n_lists : (size_t)((is_pq ? 0.5 : 4.0) * sqrt((double)n));
    nl = nl < 1 ? 1 : nl > n ? n : nl;
    size_t da = d + 1, n_sample = 64 * nl < n ? 64 * nl : n;

    double max2 = 0.0;
    for (size_t i = 0; i < n; i++) {
        double s = 0.0;
        for (size_t j = 0; j < d; j++)
            s += (double)e[i * d + j] * e[i * d + j];
        max2 = s > max2 && isfinite(s) ? s : max2;
    }
    uint32_t *perm = weft_alloc_array(n, sizeof *perm);
    float *xa = weft_alloc_array(n_sample, da * sizeof *xa);
    float *ca = weft_alloc_array(nl, da * sizeof *ca);
    float *block = weft_alloc_array(ASSIGN_ROWS, da * sizeof *block);
    uint32_t *list_of = weft_alloc_array(n, sizeof *list_of);
    weft_err rc = WEFT_OK;
    if (!perm || !xa || !ca || !block || !list_of) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory building a clustered index");
        goto done;
    }
    /* The sample: the first n_sample of a seeded shuffle; the first nl of it start k-means. */
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    weft_rng_sample(&rng, perm, n, n_sample);
    for (size_t i = 0; i < n_sample; i++)
        augment(e + (size_t)perm[i] * d, d, max2, xa + i * da);
    memcpy(ca, xa, nl * da * sizeof *ca);
    if ((rc = kmeans_threads(xa, n_sample, da, nl, iters, ca, NULL, n_threads, err)) != WEFT_OK)
        goto done;
    /* Every row to its nearest centroid, a block of augmented rows at a time. */
    for (size_t r0 = 0; r0 < n && rc == WEFT_OK; r0 += ASSIGN_ROWS) {
        size_t m = n - r0 < ASSIGN_ROWS ? n - r0 : ASSIGN_ROWS;
        for (size_t i = 0; i < m; i++)
            augment(e + (r0 + i) * d, d, max2, block + i * da);
        rc = assign_all(block, m, da, ca, nl, list_of + r0, n_threads, err);
    }
    if (rc != WEFT_OK)
        goto done;

    out->centroid = weft_alloc_array(nl, da * sizeof *out->centroid);
    out->list_off = weft_alloc_array(nl + 1, sizeof *out->list_off);
    out->row_id = weft_alloc_array(n, sizeof *out->row_id);
    if (!is_pq) {
        out->code = weft_alloc_array(weft_index_code_bytes(n, d ? d : 1), 1);
        out->scale = weft_alloc_array(n, sizeof *out->scale);
    }
    if (!out->centroid || !out->list_off || !out->row_id
        || (!is_pq && (!out->code || !out->scale))) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory building a clustered index");
        goto done;
    }
    for (size_t l = 0; l < nl; l++) {
        memcpy(out->centroid + l * da, ca + l * da, d * sizeof *ca);
        double s = 0.0;
        for (size_t j = 0; j < da; j++)
            s += (double)ca[l * da + j] * ca[l * da + j];
        out->centroid[l * da + d] = (float)(max2 > 0.0 ? -0.5 * s / sqrt(max2) : 0.0);
    }
    /* Lists in order, rows in increasing id within each (a counting sort). */
    memset(out->list_off, 0, (nl + 1) * sizeof *out->list_off);
    for (size_t i = 0; i < n; i++)
        out->list_off[list_of[i] + 1]++;
    for (size_t l = 0; l < nl; l++)
        out->list_off[l + 1] += out->list_off[l];
    for (size_t i = 0; i < n; i++)
        out->row_id[out->list_off[list_of[i]]++] = (uint32_t)i;
    for (size_t l = nl; l > 0; l--)
        out->list_off[l] = out->list_off[l - 1];
    out->list_off[0] = 0;
    out->ivf = (weft_index_ivf){ .n = n, .d = d, .n_lists = nl, .centroid = out->centroid,
                                 .list_off = out->list_off, .row_id = out->row_id };
    if (is_pq)
        rc = weft_index_pq_encode(e, seed, out, err);
    else {
        encode_rows(e, n, d, out->row_id, out->code, out->scale);
        out->ivf.codes = (weft_index_codes){ .n = n, .d = d, .code = out->code,
                                             .scale = out->scale };
    }
done:
    free(perm);
    free(xa);
    free(ca);
    free(block);
    free(list_of);
    if (rc != WEFT_OK)
        weft_index_ivf_fini(out);
    return rc;
}

weft_err weft_index_ivf_search(const weft_index_ivf *ix, const float *e, const float *q,
                               size_t k, size_t nprobe, size_t oversample,
                               const weft_index_filter *f, uint32_t *id, float *score,
                               size_t *n_out, weft_error *err)
{
    *n_out = 0;
    if (k == 0 || ix->n == 0)
        return WEFT_OK;
    size_t d = ix->d, np = nprobe < 1 ? 1 : nprobe > ix->n_lists ? ix->n_lists : nprobe;
    struct query8 qq;
    bool is_finite;
    if (!query8_init(&qq, q, d, &is_finite))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a query");
    if (!is_finite) {
        free(qq.q32);
        *n_out = exact_filtered(e, ix->n, d, q, k, f, id, score);
        return WEFT_OK;
    }
    float *qa = weft_alloc_array(d + 1, sizeof *qa);
    float *best_s = weft_alloc_array(np, sizeof *best_s);
    uint32_t *best = weft_alloc_array(np, sizeof *best);
    struct cands cand = { 0 };
    weft_index_pq_query pq = { 0 };
    weft_index_pq_cands pq_cand = { 0 };
    bool is_pq = ix->list_codes == WEFT_INDEX_LISTS_PQ4;
    weft_err rc = WEFT_OK;
    if (!qa || !best_s || !best) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a query");
        goto done;
    }
    if ((rc = cands_init(&cand, k, oversample, err)) != WEFT_OK)
        goto done;
    if (is_pq && (!weft_index_pq_query_init(&pq, &ix->pq, q, d)
                  || !weft_index_pq_cands_init(&pq_cand, cand.t.k))) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for a query");
        goto done;
    }
    memcpy(qa, q, d * sizeof *qa);
    double q2 = 0.0;
    for (size_t j = 0; j < d; j++)
        q2 += (double)q[j] * q[j];
    qa[d] = (float)sqrt(q2);
    size_t n_best = weft_topk_scan(ix->centroid, ix->n_lists, d + 1, qa, np, NULL, best, best_s);
    for (size_t b = 0; b < n_best; b++) {
        if (is_pq) {   /* q.c = the list's score less |q| times its augmented coordinate */
            float qc = best_s[b] - qa[d] * ix->centroid[(size_t)best[b] * (d + 1) + d];
            weft_index_pq_scan_list(ix, &pq, best[b], qc, f, &pq_cand);
            continue;
        }
        struct scan_range list = { .p0 = (size_t)ix->list_off[best[b]],
                                   .p1 = (size_t)ix->list_off[best[b] + 1],
                                   .row_id = ix->row_id };
        scan_codes(ix->codes.code, ix->codes.scale, d, &qq, &list, f, &cand.t);
    }
    if (is_pq) {
        weft_index_pq_cands_finish(&pq_cand);
        *n_out = rescore_ids(pq_cand.id, pq_cand.n, e, d, q, k, id, score);
    } else
        *n_out = rescore(&cand.t, e, d, q, k, id, score);
done:
    cands_fini(&cand);
    weft_index_pq_query_fini(&pq);
    weft_index_pq_cands_fini(&pq_cand);
    free(qa);
    free(best_s);
    free(best);
    free(qq.q32);
    return rc;
}
