/* The k-means rounds of weft's clustered index (weft_index_kmeans, core/index.c) against
 * scipy.cluster.vq.kmeans2 (scipy 1.10, minit='matrix', missing='warn'), run by
 * tests/reference/kmeans_scipy.py under /usr/bin/python3 on the same data and the same
 * starting centroids. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../unit/fixture.h"
#include "weft/index.h"
#include "weft/rng.h"

TestSuite(kmeans_reference, .init = fixture_dir_create, .fini = fixture_dir_remove);

/* float32 means against float64 ones: they agree to about 1e-7 relative; the test allows
 * 1e-5 of the data's scale. */
#define CENTROID_TOL 1e-5

enum { N = 600, D = 5, K = 7, ITERS = 6 };

static float gauss(weft_rng *r)
{
    double u = weft_rng_double(r), v = weft_rng_double(r);
    return (float)(sqrt(-2.0 * log(u > 1e-300 ? u : 1e-300)) * cos(6.283185307179586 * v));
}

Test(kmeans_reference, lloyd_rounds_match_scipy_kmeans2,
     .description = "six Lloyd rounds on 600 points around 6 centres from 7 starting "
                    "centroids (two in each of three groups), one of which ends with no points (kept, as kmeans2 keeps it "
                    "with missing='warn'): labels equal, centroids to 1e-5",
     .timeout = 60)
{
    static float x[N * D], c[K * D];
    weft_rng r;
    weft_rng_seed(&r, 77);
    float centre[6][D];
    for (size_t a = 0; a < 6; a++)
        for (size_t j = 0; j < D; j++)
            centre[a][j] = 6.0f * gauss(&r);
    for (size_t i = 0; i < N; i++)
        for (size_t j = 0; j < D; j++)
            x[i * D + j] = centre[i % 6][j] + gauss(&r);
    /* Starting centroids: six data points from three of the six groups (so the rounds have
     * work to do), and one far away that no point is nearest to. */
    for (size_t a = 0; a < 6; a++)
        memcpy(c + a * D, x + (2 * (a % 3) + 6 * a) * D, D * sizeof *c);
    for (size_t j = 0; j < D; j++)
        c[6 * D + j] = 1000.0f;
    char data_path[512], init_path[512];
    snprintf(data_path, sizeof data_path, "%s", fixture_write("data.f32", x, sizeof x));
    snprintf(init_path, sizeof init_path, "%s", fixture_write("init.f32", c, sizeof c));

    uint32_t labels[N];
    weft_error err;
    cr_assert_eq(weft_index_kmeans(x, N, D, K, ITERS, c, labels, &err), WEFT_OK, "%s", err.msg);

    char cmd[2048];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s %s %s %d %d %d %d",
             fixture_beside(__FILE__, "kmeans_scipy.py"), data_path, init_path, N, D, K, ITERS);
    FILE *py = fixture_run_script(cmd);
    cr_assert_eq(fscanf(py, " labels"), 0);
    size_t n_empty_last = 0;
    for (size_t i = 0; i < N; i++) {
        unsigned want;
        cr_assert_eq(fscanf(py, "%u", &want), 1, "no label %zu from %s", i, cmd);
        cr_assert_eq(labels[i], want, "point %zu", i);
        n_empty_last += labels[i] == 6;
    }
    cr_assert_eq(n_empty_last, 0, "the far centroid stays empty");
    cr_assert_eq(fscanf(py, " centroids"), 0);
    for (size_t i = 0; i < K * D; i++) {
        double want;
        cr_assert_eq(fscanf(py, "%lf", &want), 1);
        cr_assert(fabs(c[i] - want) <= CENTROID_TOL * (1.0 + fabs(want)),
                  "centroid value %zu: weft %.9g, scipy %.9g", i, c[i], want);
    }
    cr_assert_eq(c[6 * D], 1000.0f, "an empty cluster keeps its centroid");
    fclose(py);
}
