/* Tests of sparse matrices (core/sparse.c): the normalised adjacency on a graph worked by
 * hand, the transpose and its entry map, and the product against a dense one, on one
 * thread and several. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/rng.h"
#include "weft/sparse.h"

/*
 * The hand-worked graph on nodes 0..3, relations ignored:
 *     0 - 1,  1 - 2,  1 - 3,  2 - 3
 * given as the triples below, with 0-1 in both directions and 1-2 twice, so that the
 * result must count a repeat and a reverse once each.
 * Neighbours (symmetrised):   0: {1}   1: {0, 2, 3}   2: {1, 3}   3: {1, 2}
 * Degrees without self-loops: 1, 3, 2, 2;   with them (A + I): 2, 4, 3, 3.
 */
static const weft_triple hand_edges[] = {
    { 0, 0, 1 }, { 1, 1, 2 }, { 3, 0, 1 }, { 2, 0, 3 },
    { 1, 0, 0 },   /* the reverse of 0 -> 1 */
    { 1, 1, 2 },   /* a repeat of 1 -> 2 */
};
enum { HAND_M = sizeof hand_edges / sizeof hand_edges[0], HAND_N = 4 };

/* Row pattern of A (no self-loops) and of A + I. */
static const uint64_t off_plain[] = { 0, 1, 4, 6, 8 };
static const uint32_t col_plain[] = { 1, 0, 2, 3, 1, 3, 1, 2 };
static const uint64_t off_loops[] = { 0, 2, 6, 9, 12 };
static const uint32_t col_loops[] = { 0, 1, 0, 1, 2, 3, 1, 2, 3, 1, 2, 3 };

static weft_sparse adjacency(const weft_triple *e, size_t m, size_t n, weft_sparse_norm norm,
                             bool has_self_loops, size_t *n_one_way)
{
    weft_sparse a;
    weft_error err = { WEFT_OK, "" };
    weft_err rc = weft_sparse_adjacency(e, m, n, norm, has_self_loops, &a, n_one_way, &err);
    cr_assert_eq(rc, WEFT_OK, "%s", err.msg);
    return a;
}

static void expect_matrix(const weft_sparse *a, size_t n, const uint64_t *off,
                          const uint32_t *col, const double *val, const char *what)
{
    cr_assert_eq(a->n_rows, n, "%s: rows", what);
    cr_assert_eq(a->n_cols, n, "%s: columns", what);
    for (size_t i = 0; i <= n; i++)
        cr_assert_eq(a->off[i], off[i], "%s: off[%zu] is %llu, expected %llu", what, i,
                     (unsigned long long)a->off[i], (unsigned long long)off[i]);
    for (size_t k = 0; k < off[n]; k++) {
        cr_assert_eq(a->col[k], col[k], "%s: col[%zu] is %u, expected %u", what, k, a->col[k],
                     col[k]);
        cr_assert(fabs(a->val[k] - val[k]) <= 1e-6, "%s: val[%zu] is %.9g, expected %.9g", what,
                  k, (double)a->val[k], val[k]);
    }
}

Test(sparse, adjacency_none_is_the_zero_one_matrix)
{
    /* Every stored entry is 1: A has 8 entries (4 pairs, both ways), A + I 12. */
    static const double ones[12] = { 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1 };
    weft_sparse a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_NONE, false, NULL);
    expect_matrix(&a, HAND_N, off_plain, col_plain, ones, "none, no self-loops");
    weft_sparse_fini(&a);
    a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_NONE, true, NULL);
    expect_matrix(&a, HAND_N, off_loops, col_loops, ones, "none, self-loops");
    weft_sparse_fini(&a);
}

Test(sparse, adjacency_row_divides_by_the_degree)
{
    /* Row i of D^-1 A holds 1 / deg(i): degrees 1, 3, 2, 2 without self-loops. */
    static const double plain[8] = { 1, 1.0 / 3, 1.0 / 3, 1.0 / 3, 0.5, 0.5, 0.5, 0.5 };
    /* With A + I the degrees are 2, 4, 3, 3. */
    static const double loops[12] = { 0.5, 0.5, 0.25, 0.25, 0.25, 0.25,
                                      1.0 / 3, 1.0 / 3, 1.0 / 3, 1.0 / 3, 1.0 / 3, 1.0 / 3 };
    weft_sparse a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_ROW, false, NULL);
    expect_matrix(&a, HAND_N, off_plain, col_plain, plain, "row, no self-loops");
    weft_sparse_fini(&a);
    a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_ROW, true, NULL);
    expect_matrix(&a, HAND_N, off_loops, col_loops, loops, "row, self-loops");
    weft_sparse_fini(&a);
}

Test(sparse, adjacency_sym_divides_by_both_degrees)
{
    /* Entry (i, j) of D^-1/2 A D^-1/2 is 1 / sqrt(deg(i) deg(j)).
     * Degrees 1, 3, 2, 2:  (0,1) 1/sqrt3;  (1,0) 1/sqrt3, (1,2) (1,3) 1/sqrt6;
     *                      (2,1) 1/sqrt6, (2,3) 1/2;  (3,1) 1/sqrt6, (3,2) 1/2. */
    const double s3 = 1 / sqrt(3.0), s6 = 1 / sqrt(6.0);
    const double plain[8] = { s3, s3, s6, s6, s6, 0.5, s6, 0.5 };
    /* Degrees 2, 4, 3, 3:  (0,0) 1/2, (0,1) 1/sqrt8;  (1,0) 1/sqrt8, (1,1) 1/4,
     * (1,2) (1,3) 1/sqrt12;  rows 2 and 3: 1/sqrt12 to node 1, then 1/3, 1/3. */
    const double s8 = 1 / sqrt(8.0), s12 = 1 / sqrt(12.0), t = 1.0 / 3;
    const double loops[12] = { 0.5, s8, s8, 0.25, s12, s12, s12, t, t, s12, t, t };
    weft_sparse a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_SYM, false, NULL);
    expect_matrix(&a, HAND_N, off_plain, col_plain, plain, "sym, no self-loops");
    weft_sparse_fini(&a);
    a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_SYM, true, NULL);
    expect_matrix(&a, HAND_N, off_loops, col_loops, loops, "sym, self-loops");
    weft_sparse_fini(&a);
}

Test(sparse, adjacency_input_self_loop_is_the_added_one)
{
    /* With self-loops on, an input edge 2 -> 2 is the same entry as the added one: the matrix
     * equals that of the hand graph alone, degrees 2, 4, 3, 3 (row of node 2: 1/3 each). */
    weft_triple e[HAND_M + 1];
    memcpy(e, hand_edges, sizeof hand_edges);
    e[HAND_M] = (weft_triple){ 2, 0, 2 };
    static const double loops[12] = { 0.5, 0.5, 0.25, 0.25, 0.25, 0.25,
                                      1.0 / 3, 1.0 / 3, 1.0 / 3, 1.0 / 3, 1.0 / 3, 1.0 / 3 };
    weft_sparse a = adjacency(e, HAND_M + 1, HAND_N, WEFT_SPARSE_NORM_ROW, true, NULL);
    expect_matrix(&a, HAND_N, off_loops, col_loops, loops, "row, self-loops, input loop");
    weft_sparse_fini(&a);
}

Test(sparse, adjacency_counts_one_way_pairs)
{
    /* Directed pairs of hand_edges: 0->1 and 1->0 (two-way), 1->2 (twice), 3->1, 2->3:
     * three pairs are linked one way only. */
    size_t one_way = 99;
    weft_sparse a = adjacency(hand_edges, HAND_M, HAND_N, WEFT_SPARSE_NORM_NONE, true, &one_way);
    cr_assert_eq(one_way, 3);
    weft_sparse_fini(&a);
    /* Every pair in both directions (and a self-loop, which has no direction): none. */
    static const weft_triple both[] = { { 0, 0, 1 }, { 1, 0, 0 }, { 2, 0, 3 }, { 3, 5, 2 },
                                        { 2, 0, 2 } };
    one_way = 99;
    a = adjacency(both, 5, HAND_N, WEFT_SPARSE_NORM_SYM, false, &one_way);
    cr_assert_eq(one_way, 0);
    weft_sparse_fini(&a);
}

Test(sparse, adjacency_rejects_ids_out_of_range)
{
    static const weft_triple bad_target[] = { { 0, 0, 1 }, { 2, 0, 4 } };
    static const weft_triple bad_source[] = { { 4, 0, 1 } };
    weft_sparse a = { 0 };
    weft_error err = { WEFT_OK, "" };
    cr_assert_eq(weft_sparse_adjacency(bad_target, 2, 4, WEFT_SPARSE_NORM_SYM, true, &a, NULL,
                                       &err), WEFT_ERR_INVALID);
    cr_assert_eq(err.code, WEFT_ERR_INVALID);
    cr_assert_null(a.off, "output written on failure");
    cr_assert_eq(weft_sparse_adjacency(bad_source, 1, 4, WEFT_SPARSE_NORM_ROW, false, &a, NULL,
                                       NULL), WEFT_ERR_INVALID);
    cr_assert_null(a.off, "output written on failure");
}

Test(sparse, norm_names_round_trip)
{
    static const weft_sparse_norm all[] = { WEFT_SPARSE_NORM_SYM, WEFT_SPARSE_NORM_ROW,
                                            WEFT_SPARSE_NORM_NONE };
    static const char *const names[] = { "sym", "row", "none" };
    for (size_t i = 0; i < 3; i++) {
        weft_sparse_norm v = 0;
        cr_assert_str_eq(weft_sparse_norm_name(all[i]), names[i]);
        cr_assert(weft_sparse_norm_parse(names[i], &v));
        cr_assert_eq(v, all[i]);
    }
    weft_sparse_norm v = WEFT_SPARSE_NORM_SYM;
    cr_assert_not(weft_sparse_norm_parse("Sym", &v));
    cr_assert_not(weft_sparse_norm_parse("", &v));
}

/* ---- transpose ---- */

Test(sparse, transpose_of_hand_matrix_with_entry_map)
{
    /* A (3 x 5), entries k = 0..5:       A^T (5 x 3), worked by hand:
     *   row 0: (0,1)=1 k0, (0,3)=2 k1      row 0: (0,1)=3 from k2
     *   row 1: (1,0)=3 k2                  row 1: (1,0)=1 from k0, (1,2)=4 from k3
     *   row 2: (2,1)=4 k3, (2,2)=5 k4,     row 2: (2,2)=5 from k4
     *          (2,3)=6 k5                  row 3: (3,0)=2 from k1, (3,2)=6 from k5
     *   column 4 empty                     row 4: empty */
    uint64_t off[] = { 0, 2, 3, 6 };
    uint32_t col[] = { 1, 3, 0, 1, 2, 3 };
    float val[] = { 1, 2, 3, 4, 5, 6 };
    const weft_sparse a = { 3, 5, off, col, val };
    static const uint64_t want_off[] = { 0, 1, 3, 4, 6, 6 };
    static const uint32_t want_col[] = { 1, 0, 2, 2, 0, 2 };
    static const float want_val[] = { 3, 1, 4, 5, 2, 6 };
    static const uint64_t want_from[] = { 2, 0, 3, 4, 1, 5 };
    weft_sparse t;
    uint64_t *from = NULL;
    cr_assert_eq(weft_sparse_transpose(&a, &t, &from, NULL), WEFT_OK);
    cr_assert_eq(t.n_rows, 5);
    cr_assert_eq(t.n_cols, 3);
    for (size_t i = 0; i <= 5; i++)
        cr_assert_eq(t.off[i], want_off[i], "off[%zu]", i);
    for (size_t k = 0; k < 6; k++) {
        cr_assert_eq(t.col[k], want_col[k], "col[%zu]", k);
        cr_assert_eq(t.val[k], want_val[k], "val[%zu]", k);
        cr_assert_eq(from[k], want_from[k], "from[%zu]", k);
    }
    free(from);
    weft_sparse_fini(&t);
    /* Without the map: the same matrix. */
    cr_assert_eq(weft_sparse_transpose(&a, &t, NULL, NULL), WEFT_OK);
    cr_assert_eq(memcmp(t.off, want_off, sizeof want_off), 0);
    cr_assert_eq(memcmp(t.col, want_col, sizeof want_col), 0);
    cr_assert_eq(memcmp(t.val, want_val, sizeof want_val), 0);
    weft_sparse_fini(&t);
}

/* A random n_rows x n_cols matrix, each entry present with probability @p density; columns
 * ascending and unique as the contract requires. Values in [-1, 1). */
static weft_sparse random_sparse(weft_rng *rng, size_t n_rows, size_t n_cols, float density)
{
    weft_sparse a = { n_rows, n_cols, NULL, NULL, NULL };
    size_t cap = 16;
    a.off = calloc(n_rows + 1, sizeof *a.off);
    a.col = malloc(cap * sizeof *a.col);
    a.val = malloc(cap * sizeof *a.val);
    cr_assert(a.off && a.col && a.val);
    size_t k = 0;
    for (size_t i = 0; i < n_rows; i++) {
        for (size_t j = 0; j < n_cols; j++) {
            if (weft_rng_float(rng) >= density)
                continue;
            if (k == cap) {
                cap *= 2;
                a.col = realloc(a.col, cap * sizeof *a.col);
                a.val = realloc(a.val, cap * sizeof *a.val);
                cr_assert(a.col && a.val);
            }
            a.col[k] = (uint32_t)j;
            a.val[k] = weft_rng_float(rng) * 2 - 1;
            k++;
        }
        a.off[i + 1] = k;
    }
    return a;
}

Test(sparse, transpose_twice_is_identity_and_map_reads_entries)
{
    weft_rng rng;
    weft_rng_seed(&rng, 41);
    weft_sparse a = random_sparse(&rng, 37, 23, 0.2f), t, tt;
    uint64_t *from = NULL;
    cr_assert_eq(weft_sparse_transpose(&a, &t, &from, NULL), WEFT_OK);
    size_t nnz = weft_sparse_nnz(&a);
    cr_assert_eq(weft_sparse_nnz(&t), nnz);
    /* Entry k of the transpose, at (j, i), is entry from[k] of a, at (i, j). */
    for (size_t j = 0; j < t.n_rows; j++)
        for (uint64_t k = t.off[j]; k < t.off[j + 1]; k++) {
            uint64_t s = from[k];
            cr_assert_lt(s, nnz);
            cr_assert_eq(a.col[s], j, "entry %llu: column", (unsigned long long)k);
            cr_assert(a.off[t.col[k]] <= s && s < a.off[t.col[k] + 1],
                      "entry %llu: row", (unsigned long long)k);
            cr_assert_eq(t.val[k], a.val[s]);
            if (k > t.off[j])
                cr_assert_lt(t.col[k - 1], t.col[k], "row %zu of the transpose unsorted", j);
        }
    cr_assert_eq(weft_sparse_transpose(&t, &tt, NULL, NULL), WEFT_OK);
    cr_assert_eq(tt.n_rows, a.n_rows);
    cr_assert_eq(tt.n_cols, a.n_cols);
    cr_assert_eq(memcmp(tt.off, a.off, (a.n_rows + 1) * sizeof *a.off), 0);
    cr_assert_eq(memcmp(tt.col, a.col, nnz * sizeof *a.col), 0);
    cr_assert_eq(memcmp(tt.val, a.val, nnz * sizeof *a.val), 0);
    free(from);
    weft_sparse_fini(&tt);
    weft_sparse_fini(&t);
    weft_sparse_fini(&a);
}

/* ---- product ---- */

/* y = A x with A expanded to dense and summed in double: the naive product. */
static void dense_mm(double *y, const weft_sparse *a, const float *val, const float *x, size_t d)
{
    double *dense = calloc(a->n_rows * a->n_cols, sizeof *dense);
    cr_assert_not_null(dense);
    for (size_t i = 0; i < a->n_rows; i++)
        for (uint64_t k = a->off[i]; k < a->off[i + 1]; k++)
            dense[i * a->n_cols + a->col[k]] = val[k];
    for (size_t i = 0; i < a->n_rows; i++)
        for (size_t c = 0; c < d; c++) {
            double acc = 0;
            for (size_t j = 0; j < a->n_cols; j++)
                acc += dense[i * a->n_cols + j] * x[j * d + c];
            y[i * d + c] = acc;
        }
    free(dense);
}

static float *random_dense(weft_rng *rng, size_t n)
{
    float *x = malloc(n * sizeof *x);
    cr_assert_not_null(x);
    for (size_t i = 0; i < n; i++)
        x[i] = weft_rng_float(rng) * 2 - 1;
    return x;
}

/* Checks weft_sparse_mm against dense_mm with n_threads 1, 2 and 3, and that the three
 * results are bit for bit the same (each row is summed in entry order on any thread). */
static void check_mm(size_t n_rows, size_t n_cols, float density, size_t d, bool other_val)
{
    weft_rng rng;
    weft_rng_seed(&rng, 7 + n_rows);
    weft_sparse a = random_sparse(&rng, n_rows, n_cols, density);
    size_t nnz = weft_sparse_nnz(&a);
    float *x = random_dense(&rng, n_cols * d);
    float *val = other_val ? random_dense(&rng, nnz ? nnz : 1) : NULL;
    double *want = malloc(n_rows * d * sizeof *want);
    float *y[3];
    cr_assert_not_null(want);
    dense_mm(want, &a, val ? val : a.val, x, d);
    for (size_t t = 0; t < 3; t++) {
        y[t] = malloc(n_rows * d * sizeof *y[t]);
        cr_assert_not_null(y[t]);
        for (size_t i = 0; i < n_rows * d; i++)
            y[t][i] = NAN;   /* the product overwrites every entry */
        weft_sparse_mm(y[t], &a, val, x, d, t + 1);
        for (size_t i = 0; i < n_rows * d; i++)
            cr_assert(fabs(y[t][i] - want[i]) <= 1e-5 * (1 + fabs(want[i])),
                      "%zu threads: y[%zu] is %.9g, dense product %.9g", t + 1, i,
                      (double)y[t][i], want[i]);
    }
    cr_assert_eq(memcmp(y[0], y[1], n_rows * d * sizeof *y[0]), 0, "1 and 2 threads differ");
    cr_assert_eq(memcmp(y[0], y[2], n_rows * d * sizeof *y[0]), 0, "1 and 3 threads differ");
    for (size_t t = 0; t < 3; t++)
        free(y[t]);
    free(want);
    free(val);
    free(x);
    weft_sparse_fini(&a);
}

Test(sparse, mm_small_matches_dense_product)
{
    check_mm(13, 9, 0.3f, 5, false);
}

Test(sparse, mm_with_replacement_values_matches_dense_product)
{
    check_mm(13, 9, 0.3f, 5, true);
}

Test(sparse, mm_with_empty_rows_writes_zeros)
{
    /* Row 1 has no entry: its output row must be 0 (y starts as NaN in check_mm's way). */
    uint64_t off[] = { 0, 2, 2, 3 };
    uint32_t col[] = { 0, 2, 1 };
    float val[] = { 2, -1, 0.5f };
    const weft_sparse a = { 3, 3, off, col, val };
    /* x = [[1, 2], [3, 4], [5, 6]]; by hand: row 0 = 2*(1,2) - (5,6) = (-3, -2),
     * row 1 = (0, 0), row 2 = 0.5*(3,4) = (1.5, 2). */
    const float x[] = { 1, 2, 3, 4, 5, 6 };
    const float want[] = { -3, -2, 0, 0, 1.5f, 2 };
    float y[6] = { NAN, NAN, NAN, NAN, NAN, NAN };
    weft_sparse_mm(y, &a, NULL, x, 2, 2);
    for (size_t i = 0; i < 6; i++)
        cr_assert_eq(y[i], want[i], "y[%zu] is %g, expected %g", i, (double)y[i],
                     (double)want[i]);
}

Test(sparse, mm_above_parallel_threshold_matches_dense_and_is_thread_independent)
{
    /* 2400 rows with about 24 entries each and d = 24: nnz * d is about 1.4e6, over the
     * 2^20 multiply-adds from which core/sparse.c splits the rows over threads. */
    const size_t n_rows = 2400, n_cols = 1200, d = 24;
    const float density = 0.02f;
    weft_rng rng;
    weft_rng_seed(&rng, 7 + n_rows);
    weft_sparse probe = random_sparse(&rng, n_rows, n_cols, density);
    cr_assert_geq((double)weft_sparse_nnz(&probe) * (double)d, (double)(1u << 20),
                  "the matrix is too small to exercise the threaded product");
    weft_sparse_fini(&probe);
    check_mm(n_rows, n_cols, density, d, false);
}

Test(sparse, mm_above_parallel_threshold_with_replacement_values)
{
    check_mm(2400, 1200, 0.02f, 24, true);
}
