/* Packed single-precision GEMM (include/weft/gemm.h), after Goto & van de Geijn 2008,
 * "Anatomy of high-performance matrix multiplication" (ACM TOMS 34(3)): B is packed in
 * KC x NR column panels, A in MR x KC row panels, and a 12 x 32 micro-kernel keeps its tile
 * of C in 24 AVX-512 registers while it streams both panels.
 *
 * Work is split between threads by whole tiles of C, and every element of C is computed by
 * the same sequence of operations whatever the split, so results do not depend on the
 * thread count. */
#include "weft/gemm.h"

#include <cblas.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "weft/alloc.h"

#if defined(__x86_64__) && defined(__GNUC__)
#define WEFT_GEMM_X86 1
#include <immintrin.h>
#endif

/* Cleared by weft_gemm_allow_native(false): the one mutable global of this module. */
static atomic_bool native_allowed = true;

void weft_gemm_allow_native(bool allow)
{
    atomic_store(&native_allowed, allow);
}

enum {
    MR = 12,    /* rows of the register tile */
    NR = 32,    /* columns: two 16-float registers */
    KC = 256,   /* depth of a packed panel: a B panel (32 KB) stays in L1/L2 */
    MC = 120,   /* rows of A packed at once (120 KB, in L2) */
    NC = 2048   /* columns of B packed at once (2 MB, in L3) */
};

void weft_gemm_ref(bool trans_a, bool trans_b, size_t m, size_t n, size_t k, float alpha,
                   const float *a, size_t lda, const float *b, size_t ldb, float beta, float *c,
                   size_t ldc)
{
    for (size_t i = 0; i < m; i++)
        for (size_t j = 0; j < n; j++) {
            double acc = 0.0;
            for (size_t p = 0; p < k; p++) {
                float x = trans_a ? a[p * lda + i] : a[i * lda + p];
                float y = trans_b ? b[j * ldb + p] : b[p * ldb + j];
                acc += (double)x * y;
            }
            float prev = beta == 0.0f ? 0.0f : beta * c[i * ldc + j];
            c[i * ldc + j] = (float)(alpha * acc) + prev;
        }
}

#ifdef WEFT_GEMM_X86

/* Pack rows [i0, i0+mc) x depth [p0, p0+kc) of op(A) into MR-row panels: panel r holds, for
 * each p, the MR values op(A)[i0 + r*MR + 0..MR-1][p], zero past the last row. */
static void pack_a(float *dst, bool trans, const float *a, size_t lda, size_t i0, size_t mc,
                   size_t p0, size_t kc)
{
    for (size_t r = 0; r < mc; r += MR) {
        size_t rows = mc - r < MR ? mc - r : MR;
        for (size_t p = 0; p < kc; p++) {
            for (size_t i = 0; i < rows; i++) {
                size_t ii = i0 + r + i, pp = p0 + p;
                dst[i] = trans ? a[pp * lda + ii] : a[ii * lda + pp];
            }
            for (size_t i = rows; i < MR; i++)
                dst[i] = 0.0f;
            dst += MR;
        }
    }
}

/* Pack depth [p0, p0+kc) x columns [j0, j0+nc) of op(B) into NR-column panels, scaled by
 * alpha: panel s holds, for each p, the NR values op(B)[p][j0 + s*NR + 0..NR-1]. */
static void pack_b(float *dst, bool trans, const float *b, size_t ldb, size_t p0, size_t kc,
                   size_t j0, size_t nc, float alpha)
{
    for (size_t s = 0; s < nc; s += NR) {
        size_t cols = nc - s < NR ? nc - s : NR;
        for (size_t p = 0; p < kc; p++) {
            size_t pp = p0 + p;
            if (!trans && cols == NR) {
                const float *src = b + pp * ldb + j0 + s;
                for (size_t j = 0; j < NR; j++)
                    dst[j] = alpha * src[j];
            } else {
                for (size_t j = 0; j < cols; j++) {
                    size_t jj = j0 + s + j;
                    dst[j] = alpha * (trans ? b[jj * ldb + pp] : b[pp * ldb + jj]);
                }
                for (size_t j = cols; j < NR; j++)
                    dst[j] = 0.0f;
            }
            dst += NR;
        }
    }
}

/* C tile (MR x NR, leading dimension ldc) = or += the product of one A panel and one B
 * panel of depth kc. Partial tiles go through a scratch tile. */
__attribute__((target("avx512f"))) static void kernel(size_t kc, const float *ap,
                                                      const float *bp, float *c, size_t ldc,
                                                      size_t rows, size_t cols, bool accumulate)
{
    __m512 acc[MR][2];
#pragma GCC unroll 12
    for (size_t i = 0; i < MR; i++) {
        acc[i][0] = _mm512_setzero_ps();
        acc[i][1] = _mm512_setzero_ps();
    }
    for (size_t p = 0; p < kc; p++) {
        __m512 b0 = _mm512_load_ps(bp), b1 = _mm512_load_ps(bp + 16);
#pragma GCC unroll 12
        for (size_t i = 0; i < MR; i++) {
            __m512 av = _mm512_set1_ps(ap[i]);
            acc[i][0] = _mm512_fmadd_ps(av, b0, acc[i][0]);
            acc[i][1] = _mm512_fmadd_ps(av, b1, acc[i][1]);
        }
        ap += MR;
        bp += NR;
    }
    if (rows == MR && cols == NR) {
#pragma GCC unroll 12
        for (size_t i = 0; i < MR; i++) {
            float *ci = c + i * ldc;
            if (accumulate) {
                acc[i][0] = _mm512_add_ps(acc[i][0], _mm512_loadu_ps(ci));
                acc[i][1] = _mm512_add_ps(acc[i][1], _mm512_loadu_ps(ci + 16));
            }
            _mm512_storeu_ps(ci, acc[i][0]);
            _mm512_storeu_ps(ci + 16, acc[i][1]);
        }
        return;
    }
    float tile[MR * NR] __attribute__((aligned(64)));
    for (size_t i = 0; i < MR; i++) {
        _mm512_store_ps(tile + i * NR, acc[i][0]);
        _mm512_store_ps(tile + i * NR + 16, acc[i][1]);
    }
    for (size_t i = 0; i < rows; i++)
        for (size_t j = 0; j < cols; j++)
            c[i * ldc + j] = accumulate ? c[i * ldc + j] + tile[i * NR + j] : tile[i * NR + j];
}

static size_t round_up(size_t x, size_t to)
{
    return (x + to - 1) / to * to;
}

/* The calling thread's packing space, kept between calls (a training step makes several
 * products, thousands of times) and freed when the thread ends. */
struct pack_cache {
    float *buf;
    size_t cap;   /* floats */
};
static pthread_key_t pack_key;
static pthread_once_t pack_once = PTHREAD_ONCE_INIT;
static bool has_pack_key;

static void pack_cache_free(void *p)
{
    struct pack_cache *pc = p;
    free(pc->buf);
    free(pc);
}

static void pack_key_create(void)
{
    has_pack_key = pthread_key_create(&pack_key, pack_cache_free) == 0;
}

/* @p floats floats, 64-byte aligned, for the calling thread until its next call; NULL when
 * there is no memory. */
static float *pack_space(size_t floats)
{
    pthread_once(&pack_once, pack_key_create);
    if (!has_pack_key)
        return NULL;
    struct pack_cache *pc = pthread_getspecific(pack_key);
    if (!pc) {
        if (!(pc = calloc(1, sizeof *pc)))
            return NULL;
        if (pthread_setspecific(pack_key, pc) != 0) {
            free(pc);
            return NULL;
        }
    }
    if (pc->cap < floats) {
        float *grown = aligned_alloc(64, round_up(floats, 16) * sizeof(float));
        if (!grown)
            return NULL;
        free(pc->buf);
        pc->buf = grown;
        pc->cap = round_up(floats, 16);
    }
    return pc->buf;
}

struct gemm_job {
    bool trans_a, trans_b;
    size_t m, n, k;
    float alpha, beta;
    const float *a, *b;
    size_t lda, ldb, ldc;
    float *c;
    size_t row0, row1, col0, col1;   /* this thread's block of C */
    float *ap, *bp;                  /* this thread's packing buffers */
    bool is_started;
};

/* Scale this job's block of C by beta (neither 0 nor 1) before the products add into it. */
static void apply_beta(const struct gemm_job *j)
{
    for (size_t i = j->row0; i < j->row1; i++) {
        float *ci = j->c + i * j->ldc;
        for (size_t col = j->col0; col < j->col1; col++)
            ci[col] *= j->beta;
    }
}

static void *gemm_block(void *arg)
{
    struct gemm_job *j = arg;
    float *ap = j->ap, *bp = j->bp;
    if (j->beta != 0.0f && j->beta != 1.0f)
        apply_beta(j);
    for (size_t jc = j->col0; jc < j->col1; jc += NC) {
        size_t nc = j->col1 - jc < NC ? j->col1 - jc : NC;
        for (size_t pc = 0; pc < j->k; pc += KC) {
            size_t kc = j->k - pc < KC ? j->k - pc : KC;
            pack_b(bp, j->trans_b, j->b, j->ldb, pc, kc, jc, nc, j->alpha);
            bool accumulate = pc > 0 || j->beta != 0.0f;   /* beta 0: the first panel writes */
            for (size_t ic = j->row0; ic < j->row1; ic += MC) {
                size_t mc = j->row1 - ic < MC ? j->row1 - ic : MC;
                pack_a(ap, j->trans_a, j->a, j->lda, ic, mc, pc, kc);
                for (size_t jr = 0; jr < nc; jr += NR)
                    for (size_t ir = 0; ir < mc; ir += MR)
                        kernel(kc, ap + ir * kc, bp + jr * kc,
                               j->c + (ic + ir) * j->ldc + jc + jr, j->ldc,
                               mc - ir < MR ? mc - ir : MR, nc - jr < NR ? nc - jr : NR,
                               accumulate);
            }
        }
    }
    return NULL;
}

enum { MAX_THREADS = 64 };

/* Helper threads kept between products. Starting threads for every product cost more than
 * the small products of a training step themselves (perf, default Cora run: 43 % of the time
 * in clone3). One caller at a time has them (`busy`); another caller meanwhile starts threads
 * of its own, as every caller did before. Helper i (1 <= i < MAX_THREADS) runs jobs[i] of each
 * round that has one. */
static struct {
    pthread_mutex_t busy;                 /* held by the caller whose product runs */
    pthread_mutex_t lock;                 /* guards what follows */
    pthread_cond_t go, done;
    size_t n_helpers;                     /* started: helpers 1 .. n_helpers */
    unsigned long round;                  /* one per product */
    unsigned long start_round[MAX_THREADS];   /* the round before helper i started */
    struct gemm_job *jobs;
    size_t n_jobs, n_running;             /* this round's jobs; helpers still at work */
    bool is_forked;                       /* in a child of fork(): no helpers came along */
} pool = { PTHREAD_MUTEX_INITIALIZER, PTHREAD_MUTEX_INITIALIZER, PTHREAD_COND_INITIALIZER,
           PTHREAD_COND_INITIALIZER, 0, 0, { 0 }, NULL, 0, 0, false };
static pthread_once_t pool_once = PTHREAD_ONCE_INIT;

static void pool_forked(void)
{
    pool.is_forked = true;
}

static void pool_init(void)
{
    pthread_atfork(NULL, NULL, pool_forked);
}

static void *helper_main(void *arg)
{
    size_t me = (size_t)(uintptr_t)arg;
    pthread_mutex_lock(&pool.lock);
    unsigned long seen = pool.start_round[me];
    for (;;) {
        while (pool.round == seen)
            pthread_cond_wait(&pool.go, &pool.lock);
        seen = pool.round;
        if (me >= pool.n_jobs)
            continue;
        struct gemm_job *j = &pool.jobs[me];
        pthread_mutex_unlock(&pool.lock);
        gemm_block(j);
        pthread_mutex_lock(&pool.lock);
        if (--pool.n_running == 0)
            pthread_cond_signal(&pool.done);
    }
    return NULL;
}

/* Run @p jobs (n >= 2) on the helpers and the calling thread; false, with nothing run, when
 * another caller has the helpers. Helpers that cannot be started leave their jobs to the
 * caller. */
static bool pool_run(struct gemm_job *jobs, size_t n)
{
    pthread_once(&pool_once, pool_init);
    if (pool.is_forked || pthread_mutex_trylock(&pool.busy) != 0)
        return false;
    pthread_mutex_lock(&pool.lock);
    pthread_attr_t attr;
    bool has_attr = pthread_attr_init(&attr) == 0;
    if (has_attr)
        pthread_attr_setdetachstate(&attr, PTHREAD_CREATE_DETACHED);
    while (has_attr && pool.n_helpers + 1 < n) {
        size_t i = pool.n_helpers + 1;
        pthread_t tid;
        pool.start_round[i] = pool.round;
        if (pthread_create(&tid, &attr, helper_main, (void *)(uintptr_t)i) != 0)
            break;
        pool.n_helpers = i;
    }
    if (has_attr)
        pthread_attr_destroy(&attr);
    size_t on_helpers = pool.n_helpers + 1 < n ? pool.n_helpers + 1 : n;
    pool.jobs = jobs;
    pool.n_jobs = on_helpers;
    pool.n_running = on_helpers - 1;
    pool.round++;
    pthread_cond_broadcast(&pool.go);
    pthread_mutex_unlock(&pool.lock);
    gemm_block(&jobs[0]);
    for (size_t t = on_helpers; t < n; t++)
        gemm_block(&jobs[t]);
    pthread_mutex_lock(&pool.lock);
    while (pool.n_running > 0)
        pthread_cond_wait(&pool.done, &pool.lock);
    pool.jobs = NULL;
    pool.n_jobs = 0;
    pthread_mutex_unlock(&pool.lock);
    pthread_mutex_unlock(&pool.busy);
    return true;
}

bool weft_gemm_is_native(void)
{
    return atomic_load(&native_allowed) && __builtin_cpu_supports("avx512f");
}

#else

bool weft_gemm_is_native(void)
{
    return false;
}

#endif

static void blas_gemm(bool trans_a, bool trans_b, size_t m, size_t n, size_t k, float alpha,
                      const float *a, size_t lda, const float *b, size_t ldb, float beta,
                      float *c, size_t ldc)
{
    cblas_sgemm(CblasRowMajor, trans_a ? CblasTrans : CblasNoTrans,
                trans_b ? CblasTrans : CblasNoTrans, (int)m, (int)n, (int)k, alpha, a, (int)lda,
                b, (int)ldb, beta, c, (int)ldc);
}

void weft_gemm(bool trans_a, bool trans_b, size_t m, size_t n, size_t k, float alpha,
               const float *a, size_t lda, const float *b, size_t ldb, float beta, float *c,
               size_t ldc, size_t n_threads)
{
    if (m == 0 || n == 0)
        return;
#ifdef WEFT_GEMM_X86
    if (weft_gemm_is_native() && k > 0) {
        struct gemm_job jobs[MAX_THREADS];
        pthread_t tids[MAX_THREADS];
        n_threads = n_threads < 1 ? 1 : n_threads > MAX_THREADS ? MAX_THREADS : n_threads;
        /* Split the longer side of C into whole tiles. */
        bool by_rows = m / MR >= n / NR;
        size_t tiles = by_rows ? (m + MR - 1) / MR : (n + NR - 1) / NR;
        size_t tile = by_rows ? MR : NR, extent = by_rows ? m : n;
        if (n_threads > tiles)
            n_threads = tiles;
        /* Packing buffers as large as this product needs, not MC x KC and KC x NC: the
         * products of a training step are small, and a 2 MB buffer per call costs page
         * faults (and, under the address sanitizer, a fill of every byte). */
        size_t share = (tiles + n_threads - 1) / n_threads * tile;
        size_t rows = by_rows && share < m ? share : m, cols = !by_rows && share < n ? share : n;
        size_t kc = k < KC ? k : KC;
        size_t a_size = round_up(round_up(rows < MC ? rows : MC, MR) * kc, 16);
        size_t b_size = round_up(round_up(cols < NC ? cols : NC, NR) * kc, 16);
        size_t per_thread = a_size + b_size;   /* floats; a multiple of 16 keeps 64-byte rows */
        float *buf = pack_space(n_threads * per_thread);
        if (buf) {   /* without memory for packing, the library does it all */
            for (size_t t = 0; t < n_threads; t++) {
                size_t lo = tiles * t / n_threads * tile, hi = tiles * (t + 1) / n_threads * tile;
                hi = hi < extent ? hi : extent;
                float *ap = buf + t * per_thread;
                jobs[t] = (struct gemm_job){ trans_a, trans_b, m, n, k, alpha, beta, a, b, lda,
                                             ldb, ldc, c, by_rows ? lo : 0, by_rows ? hi : m,
                                             by_rows ? 0 : lo, by_rows ? n : hi, ap, ap + a_size,
                                             false };
            }
            if (n_threads == 1) {
                gemm_block(&jobs[0]);
                return;
            }
            if (pool_run(jobs, n_threads))
                return;
            for (size_t t = 1; t < n_threads; t++)
                jobs[t].is_started = pthread_create(&tids[t], NULL, gemm_block, &jobs[t]) == 0;
            for (size_t t = 0; t < n_threads; t++)
                if (!jobs[t].is_started)
                    gemm_block(&jobs[t]);
            for (size_t t = 0; t < n_threads; t++)
                if (jobs[t].is_started)
                    pthread_join(tids[t], NULL);
            return;
        }
    }
#endif
    blas_gemm(trans_a, trans_b, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc);
}
