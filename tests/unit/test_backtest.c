/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_backtest.c: the rolling-origin backtest on a seeded stream whose
 * scale drifts upward 3% a day.  Adaptive conformal inference (Gibbs &
 * Candes 2021, "Adaptive conformal inference under distribution shift",
 * Prop. 4.1) bounds the long-run miss rate for any sequence:
 * |mean_t err_t - alpha| <= (max(alpha_1, 1 - alpha_1) + gamma) / (gamma T)
 * (the exact form is from memory, rederived from their Lemma 4.1 in
 * test_aci_disruption); and both it and
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
#include "internal.h"

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
    assert_int_equal(backtest_fill(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_OK);
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
    const double *y = etacal_table_num(tbl, 0), *tm = etacal_table_num(tbl, 2);
    size_t nrows = etacal_table_rows(tbl);
    for (size_t k = 0; k < r.nperiods; k++) {
        assert_int_equal(r.periods[k].n, 400);
        /* the rows placed in the 14 days before the start and delivered by
         * it, counted here directly: a few of the last orders (about 20
         * minutes long, one every 3.6 minutes) are still on the road */
        double s0 = r.periods[k].start;
        size_t placed = 0, delivered = 0;
        for (size_t i = 0; i < nrows; i++)
            if (tm[i] >= s0 - 14 * 86400.0 && tm[i] < s0) {
                placed++;
                delivered += tm[i] + y[i] <= s0;
            }
        assert_int_equal(placed, 14 * 400);
        assert_true(delivered < placed);
        assert_int_equal(r.periods[k].calib, delivered);
        assert_int_equal(r.periods[k].promise, ETACAL_BT_FINITE);
        assert_true(r.periods[k].level == 0.9);
    }
    char buf[32];
    etacal_time_format(r.periods[0].start, buf);
    assert_string_equal(buf, "2026-03-15T00:01:48Z"); /* first row 00:01:48, plus 14 days */
    backtest_release(&r);
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
    backtest_release(&plain);
    backtest_release(&weighted);
    backtest_release(&adapt);
}

/* A table of columns actual, pred, t from arrays, through a CSV file. */
static etacal_table *table_from(const double *t, const double *pred, const double *y, size_t n)
{
    char path[64];
    snprintf(path, sizeof path, "/tmp/etacal-bt2-XXXXXX");
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *fp = fdopen(fd, "w");
    assert_non_null(fp);
    fprintf(fp, "t,pred,actual\n");
    for (size_t i = 0; i < n; i++)
        fprintf(fp, "%.17g,%.17g,%.17g\n", t[i], pred[i], y[i]);
    assert_int_equal(fclose(fp), 0);
    etacal_colspec cols[] = {{"actual", ETACAL_COL_NUM, 0, NULL},
                             {"pred", ETACAL_COL_NUM, 0, NULL},
                             {"t", ETACAL_COL_NUM, ETACAL_NUM_TIME, NULL}};
    etacal_table *out = NULL;
    etacal_error err;
    int rc = etacal_table_read_csv(path, cols, 3, NULL, &out, &err);
    unlink(path);
    assert_int_equal(rc, ETACAL_OK);
    return out;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Issue 11.6: no look-ahead.  20 orders a day, one every 72 minutes from
 * midnight; those placed at 19:12 or later take five hours, so at each
 * midnight (a period start) the last four orders of the day are still on
 * the road.  A 7-day window holds 140 placed rows; only the 136 delivered
 * ones may calibrate (by hand: 7 x 20 - 4), and the promise is the rank
 * ceil(137 x 0.9) = 124 score among them (split conformal, Lei et al.
 * 2018), recomputed here by sorting. */
static void test_no_lookahead(void **state)
{
    (void)state;
    enum { DAYS = 15, PER = 20 };
    const double day = 86400, t0 = 1772323200; /* 2026-03-01T00:00:00Z */
    static double t[DAYS * PER], pr[DAYS * PER], y[DAYS * PER];
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 611);
    size_t n = 0;
    for (int d = 0; d < DAYS; d++)
        for (int i = 0; i < PER; i++, n++) {
            t[n] = t0 + d * day + i * day / PER;
            pr[n] = 1800;
            y[n] = i >= 16 ? 5 * 3600.0 : 1200 + floor(gsl_ran_exponential(rng, 600));
        }
    gsl_rng_free(rng);
    etacal_table *tb = table_from(t, pr, y, n);
    etacal_backtest_opts o = {ETACAL_METHOD_ADD, 0.9, 7 * day, day, 100, 0, 0, 0, NULL, 0, 0, 0};
    etacal_backtest_result r;
    etacal_error err;
    assert_int_equal(backtest_fill(tb, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_OK);
    assert_int_equal(r.nperiods, DAYS - 7);
    double sc[DAYS * PER];
    for (size_t k = 0; k < r.nperiods; k++) {
        const etacal_backtest_period *p = &r.periods[k];
        assert_true(p->start == t0 + (7.0 + (double)k) * day);
        assert_int_equal(p->calib, 7 * PER - 4);
        size_t m = 0, pending = 0;
        for (size_t i = 0; i < n; i++)
            if (t[i] >= p->start - 7 * day && t[i] < p->start) {
                if (t[i] + y[i] <= p->start)
                    sc[m++] = y[i] - pr[i];
                else
                    pending++;
            }
        assert_int_equal(m, p->calib);
        assert_int_equal(pending, 4);
        qsort(sc, m, sizeof *sc, cmp_double);
        size_t kk = (size_t)ceil((double)(m + 1) * 0.9); /* 124 */
        assert_int_equal(kk, 124);
        assert_int_equal(p->promise, ETACAL_BT_FINITE);
        assert_true(fabs(p->mean_buffer - sc[kk - 1]) <= 1e-9 * fabs(sc[kk - 1]));
    }
    backtest_release(&r);
    etacal_table_destroy(tb);
}

/* Issue 11.3: a 20-orders-a-day stream with a 3-day disruption whose delays
 * grow each day (2 h, 4 h, 8 h), so that every order of those days is late
 * and the working level climbs past n/(n+1) (rank k > n).  Gibbs & Candes
 * (2021): the promise is then unbounded (every order on time) and the level
 * keeps moving; at a level <= 0 there is no promise (every order late).
 * Their Lemma 4.1 keeps alpha_t in [-gamma, 1 + gamma], and Prop. 4.1
 * follows by summing the update: for every T,
 *   |(1/T) sum_{t<=T} err_t - alpha| <= (max(alpha_1, 1 - alpha_1) + gamma) / (gamma T)
 * (the form we test; derived here from the lemma, since the paper's text
 * was not at hand: alpha_{T+1} - alpha_1 = gamma sum (alpha - err_t) and
 * |alpha_{T+1} - alpha_1| <= max(alpha_1, 1 - alpha_1) + gamma).  The
 * paper's time step is one prediction; etacal updates once per period, so
 * err_t here is the period's miss rate (in [0, 1], which is all the proof
 * uses) and T counts the periods with orders. */
static etacal_table *disruption_table(int early)
{
    enum { DAYS = 45, PER = 20 };
    const double day = 86400, t0 = 1772323200;
    static double t[DAYS * PER], pr[DAYS * PER], y[DAYS * PER];
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 2106);
    size_t n = 0;
    for (int d = 0; d < DAYS; d++)
        for (int i = 0; i < PER; i++, n++) {
            t[n] = t0 + d * day + (i + 0.5) * day / PER;
            pr[n] = 1500 + floor(gsl_rng_uniform(rng) * 900);
            y[n] = pr[n] - 300 + floor(gsl_ran_exponential(rng, 400));
            if (d >= 20 && d < 23 && early)
                y[n] = 60; /* a minute: far earlier than any promise */
            else if (d >= 20 && d < 23)
                y[n] += 7200.0 * (1 << (d - 20)); /* 2 h, 4 h, 8 h late */
        }
    gsl_rng_free(rng);
    return table_from(t, pr, y, n);
}

/* the checks common to every ACI run: every period scored, the update of
 * eq. 2 at every period, Lemma 4.1 and Prop. 4.1 for every T */
static void check_aci(const etacal_backtest_result *r, double target, double gamma)
{
    double alpha = 1 - target, a1 = alpha, sum = 0;
    size_t T = 0, un = 0, none = 0, fin = 0;
    for (size_t k = 0; k < r->nperiods; k++) {
        const etacal_backtest_period *p = &r->periods[k];
        assert_true(p->level >= -gamma - 1e-12 && p->level <= 1 + gamma + 1e-12); /* Lemma 4.1 */
        if (p->n == 0)
            continue;
        double e = 1 - (double)p->hits / (double)p->n;
        /* the edges: unbounded keeps every order, none keeps none */
        if (p->level >= 1 || p->promise == ETACAL_BT_UNBOUNDED)
            assert_true(p->promise == ETACAL_BT_UNBOUNDED && p->hits == p->n && !isfinite(p->mean_buffer));
        if (p->level <= 0 || p->promise == ETACAL_BT_NONE)
            assert_true(p->promise == ETACAL_BT_NONE && p->hits == 0 && !isfinite(p->mean_buffer));
        if (p->promise == ETACAL_BT_FINITE)
            assert_true(isfinite(p->mean_buffer));
        un += p->promise == ETACAL_BT_UNBOUNDED;
        none += p->promise == ETACAL_BT_NONE;
        fin += p->promise == ETACAL_BT_FINITE;
        sum += e;
        T++;
        double bound = (fmax(a1, 1 - a1) + gamma) / (gamma * (double)T);
        assert_true(fabs(sum / (double)T - alpha) <= bound);
        /* the next level: never frozen (a period without orders keeps it) */
        size_t j = k + 1;
        while (j < r->nperiods && r->periods[j].n == 0) {
            assert_true(r->periods[j].level == r->periods[k].level + gamma * (target - (1 - e)));
            j++;
        }
        if (j < r->nperiods)
            assert_true(fabs(r->periods[j].level - (p->level + gamma * (target - (1 - e)))) <= 1e-12);
    }
    assert_int_equal(un + none + fin, T);
    assert_int_equal(r->unbounded_periods, un);
    assert_int_equal(r->none_periods, none);
    assert_int_equal(r->finite_periods, fin);
    assert_int_equal(r->finite_n + r->unbounded_n + r->none_n, r->n);
    printf("   target %.2f, gamma %.4g: %zu periods (%zu finite, %zu unbounded, %zu none), mean miss %.4f, "
           "|. - %.2f| = %.4f <= %.4f\n",
           target, gamma, T, fin, un, none, sum / (double)T, alpha, fabs(sum / (double)T - alpha),
           (fmax(a1, 1 - a1) + gamma) / (gamma * (double)T));
}

static void test_aci_disruption(void **state)
{
    (void)state;
    etacal_table *tb = disruption_table(0);
    const double day = 86400;
    etacal_backtest_opts o = {ETACAL_METHOD_ADD, 0.9, 7 * day, day, 100, 0, 0.0375, 0, NULL, 0, 0, 0};
    etacal_backtest_result r;
    etacal_error err;
    assert_int_equal(backtest_fill(tb, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_OK);
    assert_int_equal(r.nperiods, 38);
    check_aci(&r, 0.9, 0.0375);
    /* every period has orders and is scored: 38 x 20 */
    assert_int_equal(r.n, 38 * 20);
    /* the disruption (periods 13-15, days 20-22) is missed outright, and
     * the level then crosses n/(n+1) below 1: the rank exceeds n, the
     * promise is unbounded, and the level still moves */
    size_t crossed = 0, last = 0;
    for (size_t k = 13; k < 16; k++)
        assert_int_equal(r.periods[k].hits, 0);
    for (size_t k = 0; k < r.nperiods; k++) {
        const etacal_backtest_period *p = &r.periods[k];
        if (p->level < 1 && p->level > (double)p->calib / (double)(p->calib + 1)) {
            assert_int_equal(p->promise, ETACAL_BT_UNBOUNDED);
            crossed++;
            last = k;
        }
    }
    assert_true(crossed >= 1);
    assert_true(last + 1 < r.nperiods);
    assert_true(r.periods[r.nperiods - 1].level < r.periods[last].level - 0.01);
    backtest_release(&r);

    /* gamma 0.05 takes the level to 1 and past it (alpha_t <= 0) */
    o.gamma = 0.05;
    assert_int_equal(backtest_fill(tb, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_OK);
    check_aci(&r, 0.9, 0.05);
    size_t above = 0;
    for (size_t k = 0; k < r.nperiods; k++)
        above += r.periods[k].level >= 1;
    assert_true(above >= 1);
    assert_true(r.periods[r.nperiods - 1].level < 1);
    backtest_release(&r);
    etacal_table_destroy(tb);

    /* the other edge: with a target of 0.05 the promise is about the
     * 5% quantile; three days of one-minute deliveries keep every order,
     * gamma 0.5 takes the level below 0 (alpha_t >= 1): no promise, every
     * order late, the level climbing back by 0.5 x 0.05 a period */
    tb = disruption_table(1);
    o.target = 0.05;
    o.gamma = 0.5;
    assert_int_equal(backtest_fill(tb, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_OK);
    check_aci(&r, 0.05, 0.5);
    assert_true(r.none_periods >= 1);
    assert_true(r.periods[r.nperiods - 1].level > 0);
    assert_int_equal(r.periods[r.nperiods - 1].promise, ETACAL_BT_FINITE);
    backtest_release(&r);
    etacal_table_destroy(tb);
}

static void test_errors(void **state)
{
    (void)state;
    etacal_backtest_opts o = {ETACAL_METHOD_ADD, 0.9, 100 * 86400.0, 86400.0, 100, 0, 0, 0, NULL, 0, 0, 0};
    etacal_backtest_result r;
    etacal_error err;
    assert_int_equal(backtest_fill(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_ENUM);
    o.window_s = 0;
    assert_int_equal(backtest_fill(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_EINVAL);
    o.window_s = 86400;
    o.target = 1;
    assert_int_equal(backtest_fill(tbl, 0, 1, 2, NULL, 0, &o, &r, &err), ETACAL_EINVAL);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_periods),
        cmocka_unit_test(test_drift_and_adaptation),
        cmocka_unit_test(test_no_lookahead),
        cmocka_unit_test(test_aci_disruption),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests_name("backtest", tests, setup, teardown);
}
