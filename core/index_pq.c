/* The clustered index's product-quantised lists (include/weft/index.h).
 *
 * Row x of list l is coded as its residual x - c_l (c_l the first d coordinates of the
 * list's centroid), cut into subspaces of sub_dims values, each replaced by the index of the
 * nearest of its subspace's 16 codewords (IVFADC in Jegou, Douze and Schmid 2011). For a
 * query q,
 *     q.x ~ q.c_l + sum_m q_m . codeword_m[code_m(x)],
 * and the 16 products of each subspace make a table. The tables are rounded to 7 bits on one
 * step for all (so a row's sum is an integer times the step, plus the sum of the tables'
 * least products), at most 63, so that four entries add within a byte and a row's sum of up
 * to 512 subspaces fits 16 bits. The scan looks 64 entries up at once with a byte shuffle
 * (the fast scan of Andre, Kermarrec and Le Scouarnec 2015), adds them in 16-bit lanes and
 * compares a block's 32 sums with the candidates' bar turned into table units before any
 * row is offered, so that rows are touched one by one only when they may enter. The
 * portable loop computes the same integer sums and offers the same rows in the same order.
 * (Rounding the tables to 6 bits rather than 7 costs about 0.002 of recall@10 at 160
 * candidates on WN18RR's DistMult rows, measured with numpy while this was designed.) */
#include "index_pq.h"

#include <stdlib.h>
#include <string.h>

#include "internal.h"
#include "weft/alloc.h"
#include "weft/rng.h"

#if defined(__x86_64__) && defined(__GNUC__)
#define WEFT_PQ_X86 1
#include <immintrin.h>
#endif

enum {
    ROWS = WEFT_INDEX_PQ_BLOCK_ROWS,
    WORDS = WEFT_INDEX_PQ_CODEWORDS,
    SAMPLE = 32768,       /* rows the codewords are trained on, at most */
    ROUNDS = 20,          /* k-means rounds of each subspace */
    TABLE_MAX = 63        /* largest table entry: four add within a byte */
};

/* The residual of row @p x from centroid @p c (d values) into @p out (@p width >= d values,
 * zero past d); a non-finite residual is coded as zero. */
static void residual(const float *x, const float *c, size_t d, size_t width, float *out)
{
    bool is_finite = true;
    for (size_t j = 0; j < d; j++) {
        out[j] = x[j] - c[j];
        is_finite &= isfinite(out[j]) != 0;
    }
    for (size_t j = is_finite ? d : 0; j < width; j++)
        out[j] = 0.0f;
}

/* The list of each position of the lists. */
static void lists_of(const weft_index_ivf *ix, uint32_t *list_of)
{
    for (size_t l = 0; l < ix->n_lists; l++)
        for (uint64_t p = ix->list_off[l]; p < ix->list_off[l + 1]; p++)
            list_of[p] = (uint32_t)l;
}

/* Where the code of subspace @p m of block row @p r lies in a block, and in which half of
 * the byte (the high 4 bits when odd). */
static size_t code_byte(size_t m, size_t r)
{
    return m / 4 * 64 + (m % 4) / 2 * ROWS + r;
}

/* The nearest of the 16 codewords @p cb (16 x s) to @p x (s values); ties to the lower. */
static unsigned nearest(const float *x, const float *cb, size_t s)
{
    unsigned best = 0;
    float best_d = INFINITY;
    for (unsigned j = 0; j < WORDS; j++) {
        float dist = 0.0f;
        for (size_t t = 0; t < s; t++) {
            float u = x[t] - cb[j * s + t];
            dist += u * u;
        }
        if (dist < best_d) {
            best_d = dist;
            best = j;
        }
    }
    return best;
}

/* Train the codewords of every subspace on the residuals of a sample of the rows. */
static weft_err train_codebook(const float *e, const weft_index_ivf *ix, const uint32_t *list_of,
                               uint64_t seed, size_t s, size_t n_real, float *codebook,
                               weft_error *err)
{
    size_t n = ix->n, d = ix->d, width = n_real * s;
    size_t n_sample = n < SAMPLE ? n : SAMPLE;
    uint32_t *perm = weft_alloc_array(n, sizeof *perm);
    float *res = weft_alloc_array(n_sample, width * sizeof *res);
    float *x = weft_alloc_array(n_sample, s * sizeof *x);
    weft_err rc = WEFT_OK;
    if (!perm || !res || !x) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory training product codes");
        goto done;
    }
    weft_rng rng;
    weft_rng_seed(&rng, seed);
    weft_rng_sample(&rng, perm, n, n_sample);
    for (size_t i = 0; i < n_sample; i++)
        residual(e + (size_t)ix->row_id[perm[i]] * d, ix->centroid + list_of[perm[i]] * (d + 1),
                 d, width, res + i * width);
    for (size_t m = 0; m < n_real && rc == WEFT_OK; m++) {
        for (size_t i = 0; i < n_sample; i++)
            memcpy(x + i * s, res + i * width + m * s, s * sizeof *x);
        float *cb = codebook + m * WORDS * s;
        for (size_t j = 0; j < WORDS; j++)   /* fewer rows than codewords: some repeat */
            memcpy(cb + j * s, x + (j % n_sample) * s, s * sizeof *x);
        rc = weft_index_kmeans(x, n_sample, s, WORDS, ROUNDS, cb, NULL, err);
    }
done:
    free(perm);
    free(res);
    free(x);
    return rc;
}

weft_err weft_index_pq_encode(const float *e, uint64_t seed, weft_index_ivf_arrays *a,
                              weft_error *err)
{
    weft_index_ivf *ix = &a->ivf;
    size_t n = ix->n, d = ix->d, nl = ix->n_lists;
    size_t s = weft_index_pq_sub_dims(d), n_sub = weft_index_pq_subspaces(d);
    size_t n_real = (d + s - 1) / s, width = n_real * s;
    size_t bytes = weft_index_pq_block_bytes(n_sub);
    a->list_block = weft_alloc_array(nl + 1, sizeof *a->list_block);
    uint32_t *list_of = weft_alloc_array(n, sizeof *list_of);
    float *r = weft_alloc_array(width, sizeof *r);
    weft_err rc = WEFT_OK;
    if (!a->list_block || !list_of || !r)
        goto nomem;
    a->list_block[0] = 0;
    for (size_t l = 0; l < nl; l++)
        a->list_block[l + 1] = a->list_block[l]
                               + (ix->list_off[l + 1] - ix->list_off[l] + ROWS - 1) / ROWS;
    a->codebook = weft_calloc_array(n_sub * WORDS, s * sizeof *a->codebook);
    a->pq_code = weft_calloc_array(a->list_block[nl] ? a->list_block[nl] : 1, bytes);
    if (!a->codebook || !a->pq_code)
        goto nomem;
    lists_of(ix, list_of);
    if ((rc = train_codebook(e, ix, list_of, seed, s, n_real, a->codebook, err)) != WEFT_OK)
        goto fail;
    for (size_t l = 0; l < nl; l++) {
        const float *c = ix->centroid + l * (d + 1);
        for (uint64_t p = ix->list_off[l]; p < ix->list_off[l + 1]; p++) {
            size_t i = (size_t)(p - ix->list_off[l]);
            uint8_t *blk = a->pq_code + (a->list_block[l] + i / ROWS) * bytes;
            residual(e + (size_t)ix->row_id[p] * d, c, d, width, r);
            for (size_t m = 0; m < n_real; m++) {
                unsigned j = nearest(r + m * s, a->codebook + m * WORDS * s, s);
                blk[code_byte(m, i % ROWS)] |= (uint8_t)(m % 2 ? j << 4 : j);
            }
        }
    }
    ix->list_codes = WEFT_INDEX_LISTS_PQ4;
    ix->pq = (weft_index_pq){ .n_sub = n_sub, .sub_dims = s, .codebook = a->codebook,
                              .list_block = a->list_block, .code = a->pq_code };
    goto done;
nomem:
    rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory coding %zu rows", n);
fail:
    free(a->list_block);
    free(a->codebook);
    free(a->pq_code);
    a->list_block = NULL;
    a->codebook = NULL;
    a->pq_code = NULL;
done:
    free(list_of);
    free(r);
    return rc;
}

/* ---- queries ---- */

bool weft_index_pq_query_init(weft_index_pq_query *qq, const weft_index_pq *pq, const float *q,
                              size_t d)
{
    size_t n_sub = pq->n_sub, s = pq->sub_dims;
    float *prod = weft_alloc_array(n_sub * WORDS, sizeof *prod);
    qq->table = weft_calloc_array(n_sub / 4, 2 * 64);
    if (!prod || !qq->table) {
        free(prod);
        free(qq->table);
        qq->table = NULL;
        return false;
    }
    /* The products, each table's least, and the widest range. */
    float range = 0.0f;
    double base = 0.0;
    for (size_t m = 0; m < n_sub; m++) {
        float *pm = prod + m * WORDS, lo = INFINITY, hi = -INFINITY;
        for (size_t j = 0; j < WORDS; j++) {
            const float *cw = pq->codebook + (m * WORDS + j) * s;
            float v = 0.0f;
            for (size_t t = 0; t < s && m * s + t < d; t++)
                v += q[m * s + t] * cw[t];
            pm[j] = v;
            lo = v < lo ? v : lo;
            hi = v > hi ? v : hi;
        }
        for (size_t j = 0; j < WORDS; j++)
            pm[j] -= lo;
        base += lo;
        range = hi - lo > range ? hi - lo : range;
    }
    qq->step = range > 0.0f && isfinite(range) ? range / (float)TABLE_MAX : 1.0f;
    qq->base = (float)base;
    /* Group g's low-bits table: its 16-byte lanes 0 and 1 for subspace 4g, 2 and 3 for 4g + 2;
     * the high-bits table the same for 4g + 1 and 4g + 3 (the layout of the codes). */
    for (size_t m = 0; m < n_sub; m++) {
        uint8_t *reg = qq->table + m / 4 * 128 + (m % 2) * 64 + (m % 4) / 2 * 32;
        for (size_t j = 0; j < WORDS; j++) {
            long v = lrintf(prod[m * WORDS + j] / qq->step);
            reg[j] = reg[16 + j] = (uint8_t)(v < 0 ? 0 : v > TABLE_MAX ? TABLE_MAX : v);
        }
    }
    free(prod);
    return true;
}

void weft_index_pq_query_fini(weft_index_pq_query *qq)
{
    free(qq->table);
    qq->table = NULL;
}

/* ---- candidates ---- */

static bool is_better(float sa, uint32_t ia, float sb, uint32_t ib)
{
    return (sa > sb) | ((sa == sb) & (ia < ib));   /* no branch: the outcome is a coin toss */
}

bool weft_index_pq_cands_init(weft_index_pq_cands *c, size_t keep)
{
    memset(c, 0, sizeof *c);
    c->keep = keep ? keep : 1;
    c->cap = 2 * c->keep;
    c->id = weft_alloc_array(c->cap, sizeof *c->id);
    c->score = weft_alloc_array(c->cap, sizeof *c->score);
    if (c->id && c->score)
        return true;
    weft_index_pq_cands_fini(c);
    return false;
}

void weft_index_pq_cands_fini(weft_index_pq_cands *c)
{
    free(c->id);
    free(c->score);
    memset(c, 0, sizeof *c);
}

static void swap_cands(weft_index_pq_cands *c, size_t a, size_t b)
{
    uint32_t i = c->id[a];
    float s = c->score[a];
    c->id[a] = c->id[b];
    c->score[a] = c->score[b];
    c->id[b] = i;
    c->score[b] = s;
}

/* Put the best c->keep entries first (Hoare's selection; the order is total, ids being
 * distinct, so the set kept does not depend on the pivots), then drop the rest and set the
 * bar to the worst kept. */
static void shrink(weft_index_pq_cands *c)
{
    size_t lo = 0, hi = c->n, keep = c->keep;
    while (hi - lo > 1) {
        size_t mid = lo + (hi - lo) / 2;
        uint32_t pid = c->id[mid];
        float ps = c->score[mid];
        swap_cands(c, mid, hi - 1);
        size_t i = lo;
        for (size_t j = lo; j < hi - 1; j++) {   /* Lomuto's partition without a branch */
            bool b = is_better(c->score[j], c->id[j], ps, pid);
            swap_cands(c, i, j);
            i += b;
        }
        swap_cands(c, i, hi - 1);   /* the pivot at i: better ones before, worse after */
        if (i == keep || i + 1 == keep)
            break;
        if (keep < i)
            hi = i;
        else
            lo = i + 1;
    }
    c->n = keep;
    c->has_bar = true;
    c->bar = c->score[0];
    c->bar_id = c->id[0];
    for (size_t i = 1; i < keep; i++)
        if (is_better(c->bar, c->bar_id, c->score[i], c->id[i])) {
            c->bar = c->score[i];
            c->bar_id = c->id[i];
        }
}

void weft_index_pq_cands_finish(weft_index_pq_cands *c)
{
    if (c->n > c->keep)
        shrink(c);
}

/* Append row @p id with approximate score @p s when it beats the bar and passes @p f. */
static void append(weft_index_pq_cands *c, const weft_index_filter *f, uint32_t id, float s)
{
    if (isnan(s) || (c->has_bar && !is_better(s, id, c->bar, c->bar_id))
        || !weft_index_type_passes(f, id) || weft_topk_is_excluded(f ? f->ex : NULL, id))
        return;
    c->id[c->n] = id;
    c->score[c->n++] = s;
    if (c->n == c->cap)
        shrink(c);
}

/* The least table sum a row needs to beat @p c's bar, with @p base the score of sum 0: at
 * most one unit low (rows at it are checked exactly by append); 65535 when no row can (a
 * sum is at most 512 x 63). */
static unsigned sum_needed(const weft_index_pq_cands *c, float base, float step)
{
    if (!c->has_bar)
        return 0;
    float u = (c->bar - base) / step;
    if (!(u > 0.0f))   /* below every row of the list */
        return 0;
    return u >= 65535.0f ? 65535u : (unsigned)u;
}

/* ---- the scan ---- */

/* What a list's scan needs. */
struct list_scan {
    const uint8_t *code;          /* its first block */
    size_t n_blocks, groups, bytes;
    size_t rows;                  /* its rows */
    const uint32_t *row_id;       /* the ids of its rows */
    float base, step;             /* score = base + step x sum */
};

/* Offer the rows of @p pass (bits of block @p b) with sums @p sums; @return the new need. */
static unsigned offer_rows(const struct list_scan *ls, size_t b, uint32_t pass,
                           const uint16_t *sums, const weft_index_filter *f,
                           weft_index_pq_cands *c)
{
    for (; pass; pass &= pass - 1) {
        unsigned r = (unsigned)__builtin_ctz(pass);
        append(c, f, ls->row_id[b * ROWS + r], ls->base + ls->step * (float)sums[r]);
    }
    return sum_needed(c, ls->base, ls->step);
}

/* The table sums of the 32 rows of block @p blk, portable. */
WEFT_CLONES
static void block_sums(const uint8_t *blk, const uint8_t *table, size_t groups, uint16_t *out)
{
    uint16_t acc[ROWS] = { 0 };
    for (size_t g = 0; g < groups; g++) {
        const uint8_t *code = blk + g * 64, *lo = table + g * 128, *hi = lo + 64;
        for (size_t h = 0; h < 2; h++)
            for (size_t r = 0; r < ROWS; r++) {
                uint8_t byte = code[h * ROWS + r];
                acc[r] = (uint16_t)(acc[r] + lo[h * 32 + (byte & 15)] + hi[h * 32 + (byte >> 4)]);
            }
    }
    memcpy(out, acc, sizeof acc);
}

static uint32_t rows_in(const struct list_scan *ls, size_t b)
{
    size_t left = ls->rows - b * ROWS;
    return left >= ROWS ? 0xffffffffu : (1u << left) - 1u;
}

static void scan_portable(const struct list_scan *ls, const uint8_t *table,
                          const weft_index_filter *f, weft_index_pq_cands *c)
{
    unsigned need = sum_needed(c, ls->base, ls->step);
    uint16_t sums[ROWS];
    for (size_t b = 0; b < ls->n_blocks; b++) {
        block_sums(ls->code + b * ls->bytes, table, ls->groups, sums);
        uint32_t pass = 0;
        for (unsigned r = 0; r < ROWS; r++)
            pass |= (uint32_t)(sums[r] >= need) << r;
        pass &= rows_in(ls, b);
        if (pass)
            need = offer_rows(ls, b, pass, sums, f, c);
    }
}

#ifdef WEFT_PQ_X86

#define PQ_NATIVE __attribute__((target("avx512f,avx512bw,avx512vl,gfni")))

/* The table entries of one group of 64 code bytes: the low 4 bits and the high 4 bits (a
 * GF(2) affine map shifts each byte right by 4) looked up by two byte shuffles, added. */
PQ_NATIVE static inline __m512i group_entries(const uint8_t *code, const uint8_t *table)
{
    const __m512i low4 = _mm512_set1_epi8(0x0f);
    const __m512i shift4 = _mm512_set1_epi64(0x1020408000000000ll);
    __m512i c = _mm512_loadu_si512(code);
    __m512i lo = _mm512_and_si512(c, low4);
    __m512i hi = _mm512_gf2p8affine_epi64_epi8(c, shift4, 0);
    return _mm512_add_epi8(_mm512_shuffle_epi8(_mm512_loadu_si512(table), lo),
                           _mm512_shuffle_epi8(_mm512_loadu_si512(table + 64), hi));
}

/* scan_portable with AVX-512BW: the entries of up to two groups added in bytes (at most
 * 4 x 63); the byte pairs added as 16-bit words into `raw`, the high bytes alone into `odd`,
 * so that the even rows' sums are raw - 256 odd (modulo 2^16, exact as they fit). The two
 * halves of a block hold the same 32 rows for other subspaces and are added at the end; the
 * sums, put in row order, are compared with the need 32 at a time. */
PQ_NATIVE static void scan_native(const struct list_scan *ls, const uint8_t *table,
                                  const weft_index_filter *f, weft_index_pq_cands *c)
{
    unsigned need = sum_needed(c, ls->base, ls->step);
    for (size_t b = 0; b < ls->n_blocks; b++) {
        const uint8_t *blk = ls->code + b * ls->bytes;
        __m512i raw = _mm512_setzero_si512(), odd = raw;
        size_t g = 0;
        for (; g + 2 <= ls->groups; g += 2) {
            __m512i v = _mm512_add_epi8(group_entries(blk + g * 64, table + g * 128),
                                        group_entries(blk + g * 64 + 64, table + g * 128 + 128));
            raw = _mm512_add_epi16(raw, v);
            odd = _mm512_add_epi16(odd, _mm512_srli_epi16(v, 8));
        }
        if (g < ls->groups) {
            __m512i v = group_entries(blk + g * 64, table + g * 128);
            raw = _mm512_add_epi16(raw, v);
            odd = _mm512_add_epi16(odd, _mm512_srli_epi16(v, 8));
        }
        __m512i even = _mm512_sub_epi16(raw, _mm512_slli_epi16(odd, 8));
        __m256i ev = _mm256_add_epi16(_mm512_castsi512_si256(even),
                                      _mm512_extracti64x4_epi64(even, 1));
        __m256i od = _mm256_add_epi16(_mm512_castsi512_si256(odd),
                                      _mm512_extracti64x4_epi64(odd, 1));
        /* ev holds rows 0, 2, .., 30 and od rows 1, 3, .., 31; interleaved per 128-bit lane,
         * then the lanes put in order: rows 0-15 and 16-31. */
        __m256i a = _mm256_unpacklo_epi16(ev, od), z = _mm256_unpackhi_epi16(ev, od);
        __m256i r0 = _mm256_permute2x128_si256(a, z, 0x20);
        __m256i r1 = _mm256_permute2x128_si256(a, z, 0x31);
        __m256i nv = _mm256_set1_epi16((short)need);
        uint32_t pass = ((uint32_t)_mm256_cmpge_epu16_mask(r0, nv)
                         | (uint32_t)_mm256_cmpge_epu16_mask(r1, nv) << 16)
                        & rows_in(ls, b);
        if (pass) {
            uint16_t sums[ROWS];
            _mm256_storeu_si256((__m256i *)sums, r0);
            _mm256_storeu_si256((__m256i *)(sums + 16), r1);
            need = offer_rows(ls, b, pass, sums, f, c);
        }
    }
}

static bool use_native(void)
{
    return weft_index_native_allowed() && __builtin_cpu_supports("avx512bw")
           && __builtin_cpu_supports("avx512vl") && __builtin_cpu_supports("gfni");
}

#else

static bool use_native(void)
{
    return false;
}

#endif

bool weft_index_pq_is_native(void)
{
    return use_native();
}

void weft_index_pq_scan_list(const weft_index_ivf *ix, const weft_index_pq_query *qq, size_t l,
                             float centroid_score, const weft_index_filter *f,
                             weft_index_pq_cands *c)
{
    const weft_index_pq *pq = &ix->pq;
    size_t bytes = weft_index_pq_block_bytes(pq->n_sub);
    struct list_scan ls = {
        .code = pq->code + pq->list_block[l] * bytes,
        .n_blocks = (size_t)(pq->list_block[l + 1] - pq->list_block[l]),
        .groups = pq->n_sub / 4,
        .bytes = bytes,
        .rows = (size_t)(ix->list_off[l + 1] - ix->list_off[l]),
        .row_id = ix->row_id + ix->list_off[l],
        .base = centroid_score + qq->base,
        .step = qq->step,
    };
    if (ls.rows == 0)
        return;
#ifdef WEFT_PQ_X86
    if (use_native()) {
        scan_native(&ls, qq->table, f, c);
        return;
    }
#endif
    scan_portable(&ls, qq->table, f, c);
}
