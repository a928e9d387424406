/* Filtered ranks on crafted scores, worked by hand (the rule: rank = 1 + #higher +
 * #equal / 2, the mean of the optimistic and pessimistic ranks, after filtering). */
#include <criterion/criterion.h>
#include <math.h>

#include "weft/baseline.h"
#include "weft/eval.h"

Test(eval, rank_counts_higher_candidates)
{
    float s[5] = { 0.1f, 0.9f, 0.5f, 0.7f, 0.2f };
    /* target 2 (0.5): higher are 1 and 3 -> rank 3 */
    cr_assert_eq(weft_eval_rank(s, 5, 2, NULL, 0, false, 0), 3.0);
}

Test(eval, ties_take_the_mean_of_optimistic_and_pessimistic)
{
    float s[6] = { 1, 1, 1, 1, 0, 2 };
    /* target 0: one higher (5), three equal others (1, 2, 3): optimistic 2, pessimistic 5 */
    cr_assert_eq(weft_eval_rank(s, 6, 0, NULL, 0, false, 0), 3.5);
    float flat[4] = { 0, 0, 0, 0 };
    /* all equal: a constant model ranks in the middle, (1 + 4) / 2 */
    cr_assert_eq(weft_eval_rank(flat, 4, 3, NULL, 0, false, 0), 2.5);
}

Test(eval, filter_removes_known_answers_but_never_the_target)
{
    float s[6] = { 0.9f, 0.8f, 0.7f, 0.6f, 0.5f, 0.4f };
    uint32_t known[] = { 0, 2, 4 };   /* 4 is the target itself: stays */
    /* target 4: higher are 0,1,2,3; 0 and 2 filtered -> rank 3 */
    cr_assert_eq(weft_eval_rank(s, 6, 4, known, 3, false, 0), 3.0);
    /* and excluding self (1) too -> rank 2 */
    cr_assert_eq(weft_eval_rank(s, 6, 4, known, 3, true, 1), 2.0);
}

Test(eval, nan_target_ranks_last)
{
    float s[4] = { NAN, 0.1f, 0.2f, NAN };
    cr_assert_eq(weft_eval_rank(s, 4, 0, NULL, 0, false, 0), 4.0);
}

/* Scores for the ranking test: candidate c scores c, so the answer's rank is known. */
static void score_by_id(void *ctx, uint32_t anchor, uint32_t r, bool is_head, float *out)
{
    (void)ctx;
    (void)anchor;
    (void)r;
    (void)is_head;
    for (size_t c = 0; c < 10; c++)
        out[c] = (float)c;
}

Test(eval, ranking_metrics_match_hand_computation)
{
    /* 10 nodes scored by id. Test triples (s, 0, t); known edges only the test ones.
     * Tail of (0,0,9): nothing above 9, rank 1. Tail of (1,0,5): 6..9 above -> rank 5.
     * Tail of (2,0,0): 1..9 above except self 2 -> 8 above, rank 9. */
    weft_triple test[3] = { { 0, 0, 9 }, { 1, 0, 5 }, { 2, 0, 0 } };
    uint64_t off[11] = { 0, 1, 2, 3, 3, 3, 3, 3, 3, 3, 3 };
    uint32_t rel[3] = { 0, 0, 0 }, nbr[3] = { 9, 5, 0 };
    weft_csr out = { 10, off, rel, nbr };
    weft_eval_filter f = { &out, NULL, true };
    weft_rank_metrics m;
    for (size_t threads = 1; threads <= 3; threads++) {
        cr_assert_eq(weft_eval_ranking(test, 3, 10, false, &f, score_by_id, NULL, threads, &m,
                                       NULL),
                     WEFT_OK);
        cr_assert_eq(m.n_queries, 3);
        cr_assert_float_eq(m.mrr, (1.0 + 1.0 / 5 + 1.0 / 9) / 3, 1e-12);
        cr_assert_float_eq(m.mean_rank, 15.0 / 3, 1e-12);
        cr_assert_float_eq(m.hits1, 1.0 / 3, 1e-12);
        cr_assert_float_eq(m.hits10, 1.0, 1e-12);
    }
}

Test(eval, popularity_scores_are_training_degrees)
{
    weft_triple train[4] = { { 0, 0, 1 }, { 2, 0, 1 }, { 0, 0, 2 }, { 1, 1, 0 } };
    weft_baseline_popularity p;
    cr_assert_eq(weft_baseline_popularity_init(&p, train, 4, 3, 2, NULL), WEFT_OK);
    float s[3];
    weft_baseline_popularity_scores(&p, 0, 0, false, s);   /* in-degree under relation 0 */
    cr_assert(s[0] == 0 && s[1] == 2 && s[2] == 1);
    weft_baseline_popularity_scores(&p, 0, 0, true, s);    /* out-degree under relation 0 */
    cr_assert(s[0] == 2 && s[1] == 0 && s[2] == 1);
    weft_baseline_popularity_fini(&p);
}
