/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_curve.c: the cost curve on a hand-worked example.  Nine rows to fit
 * on with scores actual - pred = 10, 20, ..., 90 s, four held out with
 * pred 200 s and actual 205, 245, 255, 285 s.  At target 0.5 the
 * conformal rank is ceil(10 x 0.5) = 5, the buffer 50 s, the promise 250 s:
 * 2 of 4 on time; at 0.8 the rank is 8, the buffer 80 s, the promise 280 s:
 * 3 of 4; the marginal cost (280 - 250) / 30 points = 1 s per point.
 * Wilson (1927) 95% intervals worked by hand from the formula in binom.h
 * (z = 1.959964): 2/4 gives 0.1500-0.8500, 3/4 gives 0.3006-0.9544.
 * Also the grid of targets and the error paths. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include "testutil.h"

#include "etacal/etacal.h"
#include "internal.h"

static void test_hand_example(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char path[600];
    tu_write_text(&d, "c.csv",
                  "actual,pred,held\n110,100,0\n120,100,0\n130,100,0\n140,100,0\n150,100,0\n160,100,0\n"
                  "170,100,0\n180,100,0\n190,100,0\n205,200,1\n245,200,1\n255,200,1\n285,200,1\n",
                  path, sizeof path);
    etacal_colspec cols[3] = {{"actual", ETACAL_COL_NUM, 0, NULL},
                              {"pred", ETACAL_COL_NUM, 0, NULL},
                              {"held", ETACAL_COL_NUM, 0, NULL}};
    etacal_read_opts ro = {0};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_read_csv(path, cols, 3, &ro, &t, &err), ETACAL_OK);
    size_t n = etacal_table_rows(t);
    unsigned char fitmask[13], heldmask[13];
    const double *h = etacal_table_num(t, 2);
    for (size_t i = 0; i < n; i++) {
        fitmask[i] = h[i] == 0;
        heldmask[i] = h[i] != 0;
    }
    double targets[2] = {0.5, 0.8};
    etacal_fit_opts fo = {ETACAL_METHOD_ADD, targets, 2, 1, NULL, 0, 0, 0, 0, fitmask, NULL, 0};
    etacal_quotes *q = NULL;
    assert_int_equal(etacal_quotes_fit(t, 0, 1, NULL, 0, &fo, &q, &err), ETACAL_OK);
    etacal_holdout ho;
    assert_int_equal(holdout_fill(q, t, 0, 1, NULL, NULL, heldmask, &ho, &err), ETACAL_OK);
    etacal_curve cv;
    assert_int_equal(curve_fill(q, &ho, 0.95, &cv, &err), ETACAL_OK);
    assert_int_equal(cv.nsegs, 1);
    assert_int_equal(cv.ntargets, 2);
    const etacal_curve_point *a = &cv.pts[0], *b = &cv.pts[1];
    assert_true(a->buffer == 50 && b->buffer == 80);
    assert_true(a->mean_promise_s == 250 && b->mean_promise_s == 280);
    assert_true(a->mean_extra_s == 50 && b->mean_extra_s == 80);
    assert_true(isnan(a->marginal_s_per_point));
    assert_true(fabs(b->marginal_s_per_point - 1) < 1e-12);
    assert_true(a->n == 4 && a->hits == 2 && b->hits == 3);
    assert_true(fabs(a->ci_lo - 0.1500) < 1e-4 && fabs(a->ci_hi - 0.8500) < 1e-4);
    assert_true(fabs(b->ci_lo - 0.3006) < 1e-4 && fabs(b->ci_hi - 0.9544) < 1e-4);
    curve_release(&cv);
    /* errors: counts of another table, a bad confidence */
    assert_int_equal(curve_fill(q, &ho, 1.5, &cv, &err), ETACAL_EINVAL);
    etacal_holdout other = ho;
    other.ntargets = 1;
    assert_int_equal(curve_fill(q, &other, 0.95, &cv, &err), ETACAL_EINVAL);
    curve_release(&cv);
    curve_release(&cv); /* a freed curve frees again safely */
    holdout_release(&ho);
    etacal_quotes_destroy(q);
    etacal_table_destroy(t);
    tu_dir_remove(&d);
}

static void test_grid(void **state)
{
    (void)state;
    double g[200];
    size_t n = etacal_curve_grid(0.5, 0.99, 0.01, g, 200);
    assert_int_equal(n, 50);
    assert_true(g[7] == 0.57 && g[49] == 0.99); /* exact decimals, not 0.5700000000000001 */
    assert_int_equal(etacal_curve_grid(0.05, 0.45, 0.05, g, 200), 9);
    assert_true(g[2] == 0.15);
    assert_int_equal(etacal_curve_grid(0.5, 0.99, 0.01, g, 10), 10); /* capped */
    assert_int_equal(etacal_curve_grid(0.9, 0.5, 0.01, g, 200), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {cmocka_unit_test(test_hand_example), cmocka_unit_test(test_grid)};
    return cmocka_run_group_tests(tests, NULL, NULL);
}
