/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_results.c: one ownership shape for results (results.c).  Each public
 * call (etacal_quotes_holdout, etacal_curve_compute, etacal_quotes_compare,
 * etacal_report_hist_residuals, etacal_backtest_run) returns a new object in
 * *out, which its _destroy frees; the object holds what the module's fill
 * in place gives (compared field by field); after an error *out is NULL;
 * destroying NULL does nothing.  Run under ASan and valgrind by make check,
 * which would see a leak or a double free. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "testutil.h"

enum { N = 3000 };
static double actual[N], pred[N], when[N];
static const char *zone[N];

static etacal_table *rows(void)
{
    static const char *const zones[] = {"harbour", "old town", "riverside"};
    tu_rng g = {UINT64_C(0x2e5017)};
    for (size_t i = 0; i < N; i++) {
        zone[i] = zones[tu_below(&g, 3)];
        pred[i] = 700 + 900 * tu_unif(&g);
        actual[i] = pred[i] + 350 * (tu_unif(&g) - 0.25);
        when[i] = 1767225600 + 600.5 * (double)i; /* about 21 days */
    }
    static const etacal_colspec cols[] = {
        {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_NONNEG, "duration"},
        {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_NONNEG, "prediction"},
        {"placed", ETACAL_COL_NUM, ETACAL_NUM_TIME, NULL},
        {"zone", ETACAL_COL_KEY, 0, NULL},
    };
    etacal_column_data data[4] = {{.num = actual}, {.num = pred}, {.num = when}, {.str = zone}};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_from_arrays(cols, data, 4, N, "rows", 0, &t, &err), ETACAL_OK);
    return t;
}

static void test_shapes(void **state)
{
    (void)state;
    etacal_table *t = rows();
    etacal_error err;
    static const double targets[] = {0.8, 0.9};
    size_t keys[] = {3};
    etacal_fit_opts o = {0};
    o.targets = targets;
    o.ntargets = 2;
    o.min_rows = 100;
    etacal_quotes *q = NULL, *q2 = NULL;
    assert_int_equal(etacal_quotes_fit(t, 0, 1, keys, 1, &o, &q, &err), ETACAL_OK);

    /* held-out counts: the object holds the fill's numbers */
    etacal_holdout *h = NULL, filled = {0};
    assert_int_equal(etacal_quotes_holdout(q, t, 0, 1, keys, NULL, NULL, &h, &err), ETACAL_OK);
    assert_non_null(h);
    assert_int_equal(holdout_fill(q, t, 0, 1, keys, NULL, NULL, &filled, &err), ETACAL_OK);
    assert_int_equal(h->nsegs, filled.nsegs);
    assert_int_equal(h->n[0], N);
    for (size_t i = 0; i < h->nsegs * h->ntargets; i++)
        assert_int_equal(h->hits[i], filled.hits[i]);
    holdout_release(&filled);

    /* the curve over those counts */
    etacal_curve *cv = NULL;
    assert_int_equal(etacal_curve_compute(q, h, 0.95, &cv, &err), ETACAL_OK);
    assert_non_null(cv);
    assert_int_equal(cv->ntargets, 2);
    assert_int_equal(cv->pts[0].hits, h->hits[0]);
    etacal_curve *bad = (etacal_curve *)(uintptr_t)1;
    assert_int_equal(etacal_curve_compute(q, h, 1.5, &bad, &err), ETACAL_EINVAL);
    assert_null(bad);
    etacal_curve_destroy(cv);

    /* two tables compared at a reference order: the same table moves nothing */
    assert_int_equal(etacal_quotes_fit(t, 0, 1, keys, 1, &o, &q2, &err), ETACAL_OK);
    etacal_quotes_diff *d = NULL;
    assert_int_equal(etacal_quotes_compare(q, q2, 1100.5, NULL, NULL, 0, &d, &err), ETACAL_OK);
    assert_non_null(d);
    assert_true(d->nmoves > 0);
    for (size_t i = 0; i < d->nmoves; i++)
        assert_true(d->moves[i].new_promise == d->moves[i].old_promise);
    assert_int_equal(d->segs_changed, 0);
    etacal_quotes_diff_destroy(d);

    /* the residual histogram */
    etacal_report_hist *hist = NULL;
    assert_int_equal(etacal_report_hist_residuals(t, 0, 1, NULL, &hist, &err), ETACAL_OK);
    assert_non_null(hist);
    assert_int_equal(hist->n, N);
    etacal_report_hist_destroy(hist);

    /* a backtest of weekly windows over the three weeks */
    etacal_backtest_opts bo = {0};
    bo.method = ETACAL_METHOD_ADD;
    bo.target = 0.9;
    bo.window_s = 7 * 86400.0;
    bo.every_s = 86400.0;
    bo.min_rows = 100;
    bo.split = 0.5;
    etacal_backtest_result *bt = NULL;
    assert_int_equal(etacal_backtest_run(t, 0, 1, 2, NULL, 0, &bo, &bt, &err), ETACAL_OK);
    assert_non_null(bt);
    assert_true(bt->nperiods > 0);
    etacal_backtest_destroy(bt);
    bo.window_s = 60 * 86400.0; /* longer than the rows: no period */
    bt = (etacal_backtest_result *)(uintptr_t)1;
    assert_int_not_equal(etacal_backtest_run(t, 0, 1, 2, NULL, 0, &bo, &bt, &err), ETACAL_OK);
    assert_null(bt);

    /* no place for the result; destroying NULL */
    assert_int_equal(etacal_curve_compute(q, h, 0.95, NULL, &err), ETACAL_EINVAL);
    etacal_holdout_destroy(NULL);
    etacal_curve_destroy(NULL);
    etacal_quotes_diff_destroy(NULL);
    etacal_report_hist_destroy(NULL);
    etacal_backtest_destroy(NULL);

    etacal_holdout_destroy(h);
    etacal_quotes_destroy(q);
    etacal_quotes_destroy(q2);
    etacal_table_destroy(t);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_shapes),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
