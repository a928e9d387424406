/* PCA of embedding rows (core/pca.c) on hand-worked examples, and the row sample. The same
 * computation is checked against numpy's SVD on a served snapshot in tests/e2e/test_page.sh. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "weft/pca.h"

/* Four points on the first two axes of R^3: (2,0,0), (-2,0,0), (0,1,0), (0,-1,0). Their mean
 * is 0, so C = X^T X / 3 = diag(8/3, 2/3, 0); the components are e1 and e2 (their largest
 * coefficient, 1, is positive) and the coordinates are the first two columns of X. */
Test(pca, axes_by_hand)
{
    const float x[] = { 2, 0, 0, -2, 0, 0, 0, 1, 0, 0, -1, 0 };
    const float want[] = { 2, 0, -2, 0, 0, 1, 0, -1 };
    float out[8];
    weft_pca_fit fit;
    cr_assert_eq(weft_pca_project(out, &fit, x, NULL, 4, 3, 2, NULL), WEFT_OK);
    cr_assert_eq(fit.k, 2);
    cr_assert_float_eq(fit.variance[0], 8.0 / 3, 1e-12);
    cr_assert_float_eq(fit.variance[1], 2.0 / 3, 1e-12);
    cr_assert_float_eq(fit.total, 10.0 / 3, 1e-12);
    for (size_t i = 0; i < 8; i++)
        cr_assert_float_eq(out[i], want[i], 1e-6, "coordinate %zu: %g, by hand %g", i, out[i],
                           want[i]);
}

/* Rows c + t_i u on one line, u = (-0.6, 0.8): one component, u itself (its largest
 * coefficient 0.8 positive), variance var(t) with m - 1 in the denominator; the second
 * component has variance 0 and every second coordinate is 0. */
Test(pca, points_on_a_line)
{
    const double t[] = { -3, -1, 0, 2, 7 };   /* mean 1; squares about it: 16+4+1+1+36 */
    float x[10], out[10];
    for (size_t i = 0; i < 5; i++) {
        x[2 * i] = (float)(5.0 - 0.6 * t[i]);
        x[2 * i + 1] = (float)(-2.0 + 0.8 * t[i]);
    }
    weft_pca_fit fit;
    cr_assert_eq(weft_pca_project(out, &fit, x, NULL, 5, 2, 2, NULL), WEFT_OK);
    cr_assert_float_eq(fit.variance[0], 58.0 / 4, 1e-5);
    cr_assert_eq(fit.variance[1], 0.0);
    for (size_t i = 0; i < 5; i++) {
        cr_assert_float_eq(out[2 * i], t[i] - 1.0, 1e-5, "row %zu", i);
        cr_assert_eq(out[2 * i + 1], 0.0f, "row %zu", i);
    }
}

/* Listing rows of a bigger matrix is the same as giving those rows alone. */
Test(pca, listed_rows_are_the_rows_given)
{
    enum { N = 40, D = 6, M = 9 };
    float x[N * D], picked[M * D], a[M * 2], b[M * 2];
    for (size_t i = 0; i < N * D; i++)
        x[i] = (float)sin(0.7 * (double)i) * (float)(1 + i % D);
    const uint32_t rows[M] = { 1, 4, 5, 11, 17, 23, 30, 31, 39 };
    for (size_t i = 0; i < M; i++)
        memcpy(picked + i * D, x + rows[i] * D, D * sizeof *x);
    weft_pca_fit fa, fb;
    cr_assert_eq(weft_pca_project(a, &fa, x, rows, M, D, 2, NULL), WEFT_OK);
    cr_assert_eq(weft_pca_project(b, &fb, picked, NULL, M, D, 2, NULL), WEFT_OK);
    cr_assert_eq(memcmp(a, b, sizeof a), 0);
    cr_assert_eq(fa.variance[0], fb.variance[0]);
}

/* Asking for one component gives the first column of the answer for two. */
Test(pca, first_component_does_not_depend_on_k)
{
    enum { M = 30, D = 5 };
    float x[M * D], one[M], two[M * 2];
    for (size_t i = 0; i < M * D; i++)
        x[i] = (float)cos(1.3 * (double)i + 0.1 * (double)(i % D));
    weft_pca_fit f1, f2;
    cr_assert_eq(weft_pca_project(one, &f1, x, NULL, M, D, 1, NULL), WEFT_OK);
    cr_assert_eq(weft_pca_project(two, &f2, x, NULL, M, D, 2, NULL), WEFT_OK);
    cr_assert_float_eq(f1.variance[0], f2.variance[0], 1e-9 * f2.variance[0]);
    for (size_t i = 0; i < M; i++)
        cr_assert_float_eq(one[i], two[2 * i], 1e-5, "row %zu", i);
}

/* Identical rows: nothing varies, every coordinate is 0; a dimension of 1 has one component. */
Test(pca, no_variance_and_one_dimension)
{
    const float same[] = { 1.5f, -2, 1.5f, -2, 1.5f, -2 };
    float out[6] = { 9, 9, 9, 9, 9, 9 };
    weft_pca_fit fit;
    cr_assert_eq(weft_pca_project(out, &fit, same, NULL, 3, 2, 2, NULL), WEFT_OK);
    cr_assert_eq(fit.total, 0.0);
    for (size_t i = 0; i < 6; i++)
        cr_assert_eq(out[i], 0.0f);
    const float line[] = { 1, 2, 6 };   /* mean 3; variance (4 + 1 + 9) / 2 */
    cr_assert_eq(weft_pca_project(out, &fit, line, NULL, 3, 1, 2, NULL), WEFT_OK);
    cr_assert_float_eq(fit.variance[0], 7.0, 1e-12);
    cr_assert_eq(fit.variance[1], 0.0);
    const float want[] = { -2, 0, -1, 0, 3, 0 };
    for (size_t i = 0; i < 6; i++)
        cr_assert_float_eq(out[i], want[i], 1e-6, "coordinate %zu", i);
}

Test(pca, refuses_non_finite_values_and_bad_k)
{
    float x[] = { 1, 2, 3, NAN, 5, 6 }, out[6];
    weft_pca_fit fit;
    weft_error err;
    cr_assert_eq(weft_pca_project(out, &fit, x, NULL, 3, 2, 2, &err), WEFT_ERR_INVALID);
    cr_assert(strstr(err.msg, "row 1") != NULL, "%s", err.msg);
    x[3] = 4;
    cr_assert_eq(weft_pca_project(out, &fit, x, NULL, 3, 2, 0, &err), WEFT_ERR_INVALID);
    cr_assert_eq(weft_pca_project(out, &fit, x, NULL, 3, 2, WEFT_PCA_MAX_K + 1, &err),
                 WEFT_ERR_INVALID);
}

Test(pca, sample_is_sorted_distinct_and_repeatable)
{
    uint32_t a[100], b[100];
    cr_assert_eq(weft_pca_sample(a, 1000, 100, 7), 100);
    cr_assert_eq(weft_pca_sample(b, 1000, 100, 7), 100);
    cr_assert_eq(memcmp(a, b, sizeof a), 0);
    for (size_t i = 1; i < 100; i++)
        cr_assert_lt(a[i - 1], a[i]);
    cr_assert_lt(a[99], 1000);
    cr_assert_eq(weft_pca_sample(b, 1000, 100, 8), 100);
    cr_assert_neq(memcmp(a, b, sizeof a), 0, "another seed, another sample");
    cr_assert_eq(weft_pca_sample(a, 5, 100, 7), 5, "m >= n: every row");
    for (uint32_t i = 0; i < 5; i++)
        cr_assert_eq(a[i], i);
}

/* Each id is taken with probability m / n: over 2,000 seeds, 3 of 10 ids, each is taken
 * 600 times on average with a standard deviation of sqrt(2000 * 0.3 * 0.7) = 20.5. */
Test(pca, sample_is_uniform)
{
    size_t count[10] = { 0 };
    uint32_t rows[3];
    for (uint64_t seed = 1; seed <= 2000; seed++) {
        cr_assert_eq(weft_pca_sample(rows, 10, 3, seed), 3);
        for (size_t i = 0; i < 3; i++)
            count[rows[i]]++;
    }
    for (size_t i = 0; i < 10; i++)
        cr_assert(count[i] > 500 && count[i] < 700, "id %zu taken %zu times", i, count[i]);
}
