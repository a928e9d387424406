/* Classification metrics (core/classify.c) against scikit-learn 1.2 and numpy, run by
 * tests/reference/classify_sklearn.py under /usr/bin/python3: accuracy, macro F1, per-class
 * precision / recall / F1 / support and the confusion matrix from sklearn.metrics, log loss
 * from sklearn.metrics and from its plain formula, and the expected calibration error of
 * Guo, Pleiss, Sun & Weinberger 2017 ("On calibration of modern neural networks", ICML)
 * written out in numpy. */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../unit/fixture.h"
#include "weft/classify.h"
#include "weft/labels.h"
#include "weft/rng.h"

TestSuite(classify_reference, .init = fixture_dir_create, .fini = fixture_dir_remove);

enum { MAX_CLASSES = 8 };

/* Random but seeded predictions. Bit j of a mask stands for class j. */
typedef struct prob_case {
    size_t n, k;
    unsigned true_mask;         /* classes a test node may have (other nodes: any class) */
    unsigned never_predicted;   /* classes never the top probability of a test node */
    uint64_t seed;
} prob_case;

/* First class of @p mask other than @p skip, or -1. */
static int first_class(unsigned mask, size_t k, int skip)
{
    for (size_t j = 0; j < k; j++)
        if ((mask >> j & 1u) && (int)j != skip)
            return (int)j;
    return -1;
}

/*
 * About 80% test nodes, the rest training or validation (which the metrics must skip).
 * Probabilities are a softmax of logits uniform in [0, 3), the true class lifted by 2 half the
 * time; for test nodes the never-predicted classes are pushed below the others. Every 97th
 * row from 5 is one-hot on a wrong class (p_true = 0: log loss clipped at 1e-15; confidence
 * exactly 1, the top bin's upper edge), from 11 one-hot on the true class, from 23 uniform
 * (every class tied: the prediction is class 0, the lowest id).
 */
static void make_case(const prob_case *pc, int32_t *y, uint8_t *part, float *prob)
{
    weft_rng rng;
    weft_rng_seed(&rng, pc->seed);
    size_t k = pc->k;
    unsigned all = (1u << k) - 1, predictable = all & ~pc->never_predicted;
    for (size_t i = 0; i < pc->n; i++) {
        double u = weft_rng_double(&rng);
        part[i] = u < 0.8 ? WEFT_LABEL_TEST : u < 0.9 ? WEFT_LABEL_TRAIN : WEFT_LABEL_VALID;
        bool is_test = part[i] == WEFT_LABEL_TEST;
        unsigned allowed = is_test ? pc->true_mask : all;
        do
            y[i] = (int32_t)weft_rng_below(&rng, (uint32_t)k);
        while (!(allowed >> y[i] & 1u));
        double z[MAX_CLASSES], lo = INFINITY, sum = 0.0;
        for (size_t j = 0; j < k; j++)
            z[j] = 3.0 * weft_rng_double(&rng);
        if (weft_rng_double(&rng) < 0.5)
            z[y[i]] += 2.0;
        unsigned never = is_test ? pc->never_predicted : 0;
        for (size_t j = 0; j < k; j++)
            if (!(never >> j & 1u))
                lo = fmin(lo, z[j]);
        for (size_t j = 0; j < k; j++) {
            if (never >> j & 1u)
                z[j] = lo - 0.5 - weft_rng_double(&rng);
            sum += exp(z[j]);
        }
        float *p = prob + i * k;
        for (size_t j = 0; j < k; j++)
            p[j] = (float)(exp(z[j]) / sum);
        unsigned may_win = is_test ? predictable : all;
        int hot = -1;
        if (i % 97 == 5)
            hot = first_class(may_win, k, y[i]);
        else if (i % 97 == 11 && (may_win >> y[i] & 1u))
            hot = y[i];
        if (hot >= 0)
            for (size_t j = 0; j < k; j++)
                p[j] = (int)j == hot ? 1.0f : 0.0f;
        if (i % 97 == 23)
            for (size_t j = 0; j < k; j++)
                p[j] = 1.0f / (float)k;
    }
}

static void write_case(const char *name, const prob_case *pc, const int32_t *y,
                       const uint8_t *part, const float *prob)
{
    FILE *f = fopen(fixture_path(name), "w");
    cr_assert_not_null(f);
    for (size_t i = 0; i < pc->n; i++) {
        fprintf(f, "%d %u", y[i], (unsigned)part[i]);
        for (size_t j = 0; j < pc->k; j++)
            fprintf(f, " %.9g", (double)prob[i * pc->k + j]);
        fputc('\n', f);
    }
    cr_assert_eq(fclose(f), 0);
}

static void expect_close(double got, double want, double tol, const char *what)
{
    cr_assert(fabs(got - want) <= tol * fmax(1.0, fabs(want)), "%s: weft %.17g, reference %.17g",
              what, got, want);
}

/* Score @p pc with weft and with the script, and compare everything. */
static void check_case(const prob_case *pc)
{
    size_t n = pc->n, k = pc->k;
    cr_assert_leq(k, MAX_CLASSES);
    int32_t *y = calloc(n, sizeof *y);
    uint8_t *part = calloc(n, sizeof *part);
    float *prob = calloc(n * k, sizeof *prob);
    cr_assert(y && part && prob);
    make_case(pc, y, part, prob);
    write_case("case.txt", pc, y, part, prob);
    weft_classify_metrics m;
    weft_error err;
    cr_assert_eq(weft_classify_metrics_compute(prob, y, part, n, k, WEFT_LABEL_TEST, &m, &err),
                 WEFT_OK, "%s", err.msg);

    char script[1024], cmd[4096];   /* fixture_beside(__FILE__, ) answers in one static buffer */
    snprintf(script, sizeof script, "%s", fixture_beside(__FILE__, "classify_sklearn.py"));
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s %s %d %zu", script, fixture_path("case.txt"),
             WEFT_LABEL_TEST, k);
    FILE *py = fixture_run_script(cmd);
    size_t want_n;
    double acc, macro_f1, log_loss, log_loss_clipped, ece;
    cr_assert_eq(fscanf(py, " n %zu accuracy %lf macro_f1 %lf log_loss %lf log_loss_clipped %lf "
                        "ece %lf", &want_n, &acc, &macro_f1, &log_loss, &log_loss_clipped, &ece),
                 6, "no output from %s", cmd);
    cr_assert_eq(m.n, want_n, "weft scored %zu nodes, the reference %zu", m.n, want_n);
    cr_assert_eq(m.n_classes, k);
    expect_close(m.accuracy, acc, 1e-12, "accuracy_score");
    expect_close(m.macro_f1, macro_f1, 1e-12, "f1_score(average='macro')");
    /* scikit-learn rescales each row to sum 1; float32 rows sum to 1 within about 1e-7. */
    expect_close(m.log_loss, log_loss, 1e-6, "log_loss");
    expect_close(m.log_loss, log_loss_clipped, 1e-9, "mean -log(max(p_true, 1e-15))");
    expect_close(m.ece, ece, 1e-9, "ECE (Guo et al. 2017, 15 bins)");
    for (size_t j = 0; j < k; j++) {
        size_t pj;
        double p, r, f;
        unsigned long long s;
        cr_assert_eq(fscanf(py, " class %zu %lf %lf %lf %llu", &pj, &p, &r, &f, &s), 5);
        cr_assert_eq(pj, j);
        char what[64];
        snprintf(what, sizeof what, "class %zu precision", j);
        expect_close(m.precision[j], p, 1e-12, what);
        snprintf(what, sizeof what, "class %zu recall", j);
        expect_close(m.recall[j], r, 1e-12, what);
        snprintf(what, sizeof what, "class %zu F1", j);
        expect_close(m.f1[j], f, 1e-12, what);
        cr_assert_eq(m.support[j], s, "class %zu support: weft %llu, scikit-learn %llu", j,
                     (unsigned long long)m.support[j], s);
    }
    for (size_t t = 0; t < k; t++) {
        size_t pt;
        cr_assert_eq(fscanf(py, " confusion %zu", &pt), 1);
        cr_assert_eq(pt, t);
        for (size_t j = 0; j < k; j++) {
            unsigned long long c;
            cr_assert_eq(fscanf(py, "%llu", &c), 1);
            cr_assert_eq(m.confusion[t * k + j], c, "confusion[true %zu][predicted %zu]: weft "
                         "%llu, scikit-learn %llu", t, j,
                         (unsigned long long)m.confusion[t * k + j], c);
        }
    }
    cr_assert_eq(fclose(py), 0);
    /* What the case claims to exercise: no prediction of the never-predicted classes. */
    for (size_t j = 0; j < k; j++)
        if (pc->never_predicted >> j & 1u)
            for (size_t t = 0; t < k; t++)
                cr_assert_eq(m.confusion[t * k + j], 0);
    weft_classify_metrics_fini(&m);
    free(y);
    free(part);
    free(prob);
}

Test(classify_reference, a_class_never_predicted_matches_scikit_learn,
     .description = "500 nodes, 5 classes, class 3 never predicted, ties and one-hot rows: "
                    "scikit-learn 1.2 accuracy_score, f1_score(macro), "
                    "precision_recall_fscore_support, confusion_matrix, log_loss, and numpy "
                    "ECE after Guo et al. 2017 (tests/reference/classify_sklearn.py)")
{
    prob_case pc = { 500, 5, 0x1f, 1u << 3, 31 };
    check_case(&pc);
}

Test(classify_reference, classes_absent_from_the_scored_nodes_match_scikit_learn,
     .description = "test nodes of classes 0, 1, 3 predicted as 0, 1, 2 (class 2 never true, "
                    "3 never predicted, 4 only on training nodes): macro F1 averages the "
                    "classes present as scikit-learn 1.2 does, against "
                    "tests/reference/classify_sklearn.py")
{
    prob_case pc = { 500, 5, (1u << 0) | (1u << 1) | (1u << 3), (1u << 3) | (1u << 4), 32 };
    check_case(&pc);
}
