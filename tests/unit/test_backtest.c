/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_backtest.c: the rolling-origin backtest on a seeded stream whose
 * scale drifts upward 3% a day.  Adaptive conformal inference (Gibbs &
 * Candes 2021, "Adaptive conformal inference under distribution shift",
 * Prop. 4.1) bounds the long-run miss rate for any sequence:
 * |mean_t err_t - alpha| <= (max(alpha_1, 1 - alpha_1) + gamma) / (gamma T)
 * (the exact form is from memory, see ../shared/METHODS.md); and both it and
 * recency weights should bring the on-time rate of the late periods closer
 * to the target than the plain rule, which falls behind the drift. */
#define _GNU_SOURCE
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

#include "etacal/etacal.h"

static etacal_table *tbl;

static int setup(void **state)
{
    (void)state;
    char path[64];
    snprintf(path, sizeof path, "/tmp/etacal-bt-XXXXXX");
    int fd = mkstemp(path);
    if (fd < 0)
        return -1;
    FILE *fp = fdopen(fd, "w");
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 2021);
    fprintf(fp, "t,pred,actual\n");
    const double day = 86400, t0 = 1772323200; /* 2026-03-01T00:00:00Z */
    for (int d = 0; d < 70; d++)
        for (int i = 0; i < 400; i++) {
            double t = t0 + d * day + (i + 0.5) * day / 400;
            double y = 1200 + gsl_ran_exponential(r, 240 * pow(1.03, d));
            fprintf(fp, "%.0f,1200,%.3f\n", t, y);
        }
    gsl_rng_free(r);
    fclose(fp);
    etacal_colspec cols[] = {{"actual", ETACAL_COL_NUM, 0, NULL},
                             {"pred", ETACAL_COL_NUM, 0, NULL},
                             {"t", ETACAL_COL_NUM, ETACAL_NUM_TIME, NULL}};
    etacal_error err;
    int rc = etacal_table_read_csv(path, cols, 3, NULL, &tbl, &err);
    unlink(path);
    return rc == ETACAL_OK ? 0 : -1;
}

static int teardown(void **state)
{
    (void)state;
    etacal_table_destroy(tbl);
    return 0;
}

static etacal_backtest_result run(double half_life_d, double gamma)
{
    etacal_backtest_opts o = {ETACAL_METHOD_ADD, 0.9, 14 * 86400.0, 86400.0, 100, half_life_d * 86400, gamma, 0, NULL, 0, 0, 0};
    etacal_backtest_result r;
    etacal_error err;
    assert_int_equal(etacal_backtest_run(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_OK);
    return r;
}

/* on-time rate of the last `last` periods */
static double late_rate(const etacal_backtest_result *r, size_t last)
{
    size_t h = 0, n = 0;
    for (size_t k = r->nperiods - last; k < r->nperiods; k++) {
        h += r->periods[k].hits;
        n += r->periods[k].n;
    }
    return (double)h / (double)n;
}

static void test_periods(void **state)
{
    (void)state;
    etacal_backtest_result r = run(0, 0);
    /* 70 days, a 14-day window, daily periods: 56 periods of 400 orders */
    assert_int_equal(r.nperiods, 56);
    for (size_t k = 0; k < r.nperiods; k++) {
        assert_int_equal(r.periods[k].n, 400);
        assert_int_equal(r.periods[k].calib, 14 * 400);
        assert_true(r.periods[k].level == 0.9);
    }
    char buf[32];
    etacal_time_format(r.periods[0].start, buf);
    assert_string_equal(buf, "2026-03-15T00:01:48Z"); /* first row 00:01:48, plus 14 days */
    etacal_backtest_free(&r);
}

static void test_drift_and_adaptation(void **state)
{
    (void)state;
    etacal_backtest_result plain = run(0, 0), weighted = run(2, 0), adapt = run(0, 0.05);
    double rp = late_rate(&plain, 20), rw = late_rate(&weighted, 20), ra = late_rate(&adapt, 20);
    printf("   last 20 days on time: plain %.4f, recency weights %.4f, adaptive %.4f\n", rp, rw, ra);
    assert_true(rp < 0.88); /* the plain rule falls behind the drift */
    assert_true(fabs(rw - 0.9) < fabs(rp - 0.9));
    assert_true(fabs(ra - 0.9) < fabs(rp - 0.9));
    /* the ACI bound over the T periods, alpha = alpha_1 = 0.1 */
    double T = (double)adapt.nperiods, err = 0;
    for (size_t k = 0; k < adapt.nperiods; k++)
        err += 1 - (double)adapt.periods[k].hits / (double)adapt.periods[k].n;
    err /= T;
    double bound = (0.9 + 0.05) / (0.05 * T);
    printf("   adaptive: mean miss rate %.4f, |. - 0.1| = %.4f <= %.4f\n", err, fabs(err - 0.1), bound);
    assert_true(fabs(err - 0.1) <= bound);
    /* the working level moved up to follow the drift */
    assert_true(adapt.periods[adapt.nperiods - 1].level > 0.9);
    etacal_backtest_free(&plain);
    etacal_backtest_free(&weighted);
    etacal_backtest_free(&adapt);
}

static void test_errors(void **state)
{
    (void)state;
    etacal_backtest_opts o = {ETACAL_METHOD_ADD, 0.9, 100 * 86400.0, 86400.0, 100, 0, 0, 0, NULL, 0, 0, 0};
    etacal_backtest_result r;
    etacal_error err;
    assert_int_equal(etacal_backtest_run(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_ENUM);
    o.window_s = 0;
    assert_int_equal(etacal_backtest_run(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_EINVAL);
    o.window_s = 86400;
    o.target = 1;
    assert_int_equal(etacal_backtest_run(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_EINVAL);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_periods),
        cmocka_unit_test(test_drift_and_adaptation),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests_name("backtest", tests, setup, teardown);
}
