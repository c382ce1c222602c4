/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_quantreg.c: the quantile regression engine against published and
 * reference values.  Data: the Engel food expenditure data (Koenker &
 * Bassett 1982; tests/ref/engel.csv, as shipped by Debian's
 * python3-statsmodels and r-cran-quantreg) and R's stackloss data
 * (tests/ref/stackloss.csv, from r-base).  Check values: quantreg 5.94 on
 * Debian bookworm (R 4.2.2), run once for these values. */
/* First, before any system header: the build then checks that the public
 * header compiles on its own. */
#include "etacal/quantreg.h"

#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <gsl/gsl_errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"

static etacal_table *engel, *stack;

static int setup(void **state)
{
    (void)state;
    gsl_set_error_handler_off();
    etacal_error err;
    etacal_colspec e[] = {{"foodexp", ETACAL_COL_NUM, 0, NULL}, {"income", ETACAL_COL_NUM, 0, NULL}};
    etacal_colspec s[] = {{"stack.loss", ETACAL_COL_NUM, 0, NULL},
                          {"Air.Flow", ETACAL_COL_NUM, 0, NULL},
                          {"Water.Temp", ETACAL_COL_NUM, 0, NULL},
                          {"Acid.Conc.", ETACAL_COL_NUM, 0, NULL}};
    if (etacal_table_read_csv("tests/ref/engel.csv", e, 2, NULL, &engel, &err) != ETACAL_OK)
        return -1;
    if (etacal_table_read_csv("tests/ref/stackloss.csv", s, 4, NULL, &stack, &err) != ETACAL_OK)
        return -1;
    return 0;
}

static int teardown(void **state)
{
    (void)state;
    etacal_table_destroy(engel);
    etacal_table_destroy(stack);
    return 0;
}

static void close_rel(double got, double want, double tol)
{
    double scale = fabs(want) > 1 ? fabs(want) : 1;
    if (!(fabs(got - want) <= tol * scale))
        fail_msg("got %.12g, want %.12g (tolerance %g)", got, want, tol);
}

static etacal_qr_result fit_engel(double tau, int preprocess)
{
    const double *x[] = {etacal_table_num(engel, 1)};
    const char *names[] = {"income"};
    etacal_qr_opts o = {0};
    o.preprocess = preprocess;
    etacal_qr_result r;
    etacal_error err;
    assert_int_equal(etacal_qr_fit(etacal_table_num(engel, 0), x, 1, NULL, etacal_table_rows(engel), tau, names,
                                   &o, &r, &err),
                     ETACAL_OK);
    return r;
}

/* R quantreg 5.94 on the Engel data: b(tau) and sum rho, quantreg br = fn to 1e-8. */
static void test_engel_coefficients(void **state)
{
    (void)state;
    const double tau[] = {0.10, 0.25, 0.50, 0.75, 0.90};
    const double b0[] = {110.1415742, 95.4835396, 81.4822474, 62.3965855, 67.3508721};
    const double b1[] = {0.4017657593, 0.4741032082, 0.5601805512, 0.6440141394, 0.6862994804};
    const double obj[] = {3869.932161, 7082.315899, 8779.966324, 6529.250284, 3391.983711};
    for (int i = 0; i < 5; i++) {
        etacal_qr_result r = fit_engel(tau[i], 2);
        assert_int_equal(r.p, 2);
        close_rel(r.coef[0], b0[i], 1e-8);
        close_rel(r.coef[1], b1[i], 1e-8);
        close_rel(r.objective, obj[i], 1e-9);
        /* R quantreg 5.94: rq.fit.fnb takes 9-11 iterations on Engel */
        assert_true(r.iterations >= 7 && r.iterations <= 13);
        assert_true(r.gap <= 1e-6);
        /* the preprocessing path reaches the same optimum */
        etacal_qr_result q = fit_engel(tau[i], 1);
        close_rel(q.objective, obj[i], 1e-9);
        close_rel(q.coef[1], b1[i], 1e-7);
        assert_true(q.solves >= 2);
    }
}

/* Koenker (2005) sec. 2: with an intercept, the counts of negative, zero
 * and positive residuals satisfy N- <= n tau <= N- + N0; Engel at tau .1:
 * N- = 23, N0 = 2, N+ = 210 (R quantreg 5.94). */
static void test_engel_residual_counts(void **state)
{
    (void)state;
    etacal_qr_result r = fit_engel(0.1, 2);
    const double *y = etacal_table_num(engel, 0), *x = etacal_table_num(engel, 1);
    size_t neg = 0, zero = 0, pos = 0, n = etacal_table_rows(engel);
    for (size_t i = 0; i < n; i++) {
        double u = y[i] - r.coef[0] - r.coef[1] * x[i];
        if (fabs(u) < 1e-6)
            zero++;
        else if (u < 0)
            neg++;
        else
            pos++;
    }
    assert_int_equal(neg, 23);
    assert_int_equal(zero, 2);
    assert_int_equal(pos, 210);
}

/* Powell kernel standard errors ("ker" in quantreg's summary.rq) and the
 * Hall-Sheather bandwidth (Koenker 2005, ch. 3; R quantreg 5.94). */
static void test_engel_se_ker(void **state)
{
    (void)state;
    const double tau[] = {0.10, 0.25, 0.50, 0.75, 0.90};
    const double s0[] = {29.296543, 24.163919, 30.215316, 29.118756, 22.569195};
    const double s1[] = {0.03989688, 0.029548822, 0.037317035, 0.036216065, 0.027960233};
    const double *x[] = {etacal_table_num(engel, 1)};
    for (int i = 0; i < 5; i++) {
        etacal_qr_result r = fit_engel(tau[i], 2);
        double se[2], bw;
        etacal_error err;
        assert_int_equal(etacal_qr_se(etacal_table_num(engel, 0), x, 1, 235, tau[i], &r, ETACAL_SE_POWELL, 0, 0,
                                      NULL, se, &bw, &err),
                         ETACAL_OK);
        close_rel(se[0], s0[i], 2e-7);
        close_rel(se[1], s1[i], 2e-7);
    }
    close_rel(etacal_qr_bandwidth_hs(235, 0.5), 0.1574393314, 1e-9);
    close_rel(etacal_qr_bandwidth_hs(235, 0.1), 0.05606778491, 1e-9);
    close_rel(etacal_qr_bandwidth_hs(235, 0.9), 0.05606778491, 1e-9);
    close_rel(etacal_qr_bandwidth_hs(1000, 0.9), 0.03459946255, 1e-9);
}

static void test_bootstrap(void **state)
{
    (void)state;
    etacal_qr_result r = fit_engel(0.5, 2);
    const double *x[] = {etacal_table_num(engel, 1)};
    double a[2], b[2];
    etacal_error err;
    assert_int_equal(etacal_qr_se(etacal_table_num(engel, 0), x, 1, 235, 0.5, &r, ETACAL_SE_BOOT, 200, 7, NULL, a,
                                  NULL, &err),
                     ETACAL_OK);
    assert_int_equal(etacal_qr_se(etacal_table_num(engel, 0), x, 1, 235, 0.5, &r, ETACAL_SE_BOOT, 200, 7, NULL, b,
                                  NULL, &err),
                     ETACAL_OK);
    /* the same seed gives the same bootstrap */
    assert_true(a[0] == b[0] && a[1] == b[1]);
    /* and the same order of size as the kernel and rank-inversion standard
     * errors of quantreg (14.6 to 30.2 for the intercept, R quantreg 5.94 runs) */
    assert_true(a[0] > 8 && a[0] < 45);
    assert_true(a[1] > 0.008 && a[1] < 0.06);
    assert_int_equal(etacal_qr_se(etacal_table_num(engel, 0), x, 1, 235, 0.5, &r, ETACAL_SE_BOOT, 1, 7, NULL, a,
                                  NULL, &err),
                     ETACAL_EINVAL);
}

/* stackloss, three covariates: R quantreg 5.94. */
static void test_stackloss(void **state)
{
    (void)state;
    const double *x[] = {etacal_table_num(stack, 1), etacal_table_num(stack, 2), etacal_table_num(stack, 3)};
    const char *names[] = {"Air.Flow", "Water.Temp", "Acid.Conc."};
    struct {
        double tau, b[4], obj;
    } want[] = {
        {0.5, {-39.68985507, 0.83188406, 0.57391304, -0.06086957}, 21.04057971},
        {0.25, {-36, 0.5, 1, 0}, 16.625},
        {0.75, {-54.18965517, 0.87068966, 0.98275862, 0}, 16.25216},
    };
    for (int i = 0; i < 3; i++) {
        etacal_qr_result r;
        etacal_error err;
        assert_int_equal(etacal_qr_fit(etacal_table_num(stack, 0), x, 3, NULL, 21, want[i].tau, names, NULL, &r, &err),
                         ETACAL_OK);
        for (int j = 0; j < 4; j++)
            if (fabs(r.coef[j] - want[i].b[j]) > 1e-6 * (fabs(want[i].b[j]) > 1 ? fabs(want[i].b[j]) : 1))
                fail_msg("tau %g coef %d: %.10g, want %.10g", want[i].tau, j, r.coef[j], want[i].b[j]);
        close_rel(r.objective, want[i].obj, 1e-6);
    }
}

/* y = 1, 2, 3, 4 at the median: every b in [2, 3] is optimal, and the
 * interior point method lands in the middle, 2.5 (quantreg's fn; Koenker
 * 2005 sec. 2).  An intercept-only fit goes through a constant
 * covariate-free model, so a dummy covariate with no pull is avoided: the
 * check is on the objective, unique even when b is not. */
static void test_nonunique_median(void **state)
{
    (void)state;
    const double y[] = {1, 2, 3, 4, 1, 2, 3, 4};
    const double xv[] = {0, 0, 0, 0, 1, 1, 1, 1};
    const double *x[] = {xv};
    etacal_qr_result r;
    etacal_error err;
    assert_int_equal(etacal_qr_fit(y, x, 1, NULL, 8, 0.5, NULL, NULL, &r, &err), ETACAL_OK);
    close_rel(r.objective, 4 * 0.5 * 2, 1e-7); /* |1-b|+|2-b|+|3-b|+|4-b| = 4 on [2,3], twice, times 1/2 */
    assert_true(r.coef[0] >= 2 - 1e-6 && r.coef[0] <= 3 + 1e-6);
    close_rel(r.coef[0], 2.5, 1e-4);
    close_rel(r.coef[1], 0, 1e-4);
}

/* A weight of 2 is a row given twice. */
static void test_weights(void **state)
{
    (void)state;
    const double *x0 = etacal_table_num(engel, 1), *y0 = etacal_table_num(engel, 0);
    size_t n = 235;
    double *y2 = malloc(2 * n * sizeof *y2), *x2 = malloc(2 * n * sizeof *x2), *w = malloc(n * sizeof *w);
    size_t m = 0;
    for (size_t i = 0; i < n; i++) {
        w[i] = i % 3 == 0 ? 2 : 1;
        for (int c = 0; c < (int)w[i]; c++) {
            y2[m] = y0[i];
            x2[m] = x0[i];
            m++;
        }
    }
    const double *xa[] = {x0}, *xb[] = {x2};
    etacal_qr_result a, b;
    etacal_error err;
    assert_int_equal(etacal_qr_fit(y0, xa, 1, w, n, 0.75, NULL, NULL, &a, &err), ETACAL_OK);
    assert_int_equal(etacal_qr_fit(y2, xb, 1, NULL, m, 0.75, NULL, NULL, &b, &err), ETACAL_OK);
    close_rel(a.objective, b.objective, 1e-8);
    close_rel(a.coef[0], b.coef[0], 1e-5);
    close_rel(a.coef[1], b.coef[1], 1e-5);
    w[5] = -1;
    assert_int_equal(etacal_qr_fit(y0, xa, 1, w, n, 0.75, NULL, NULL, &a, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "weight of data row 6"));
    free(y2);
    free(x2);
    free(w);
}

static void test_errors(void **state)
{
    (void)state;
    const double *y = etacal_table_num(engel, 0), *inc = etacal_table_num(engel, 1);
    double *twice = malloc(235 * sizeof *twice), *cst = malloc(235 * sizeof *cst);
    for (int i = 0; i < 235; i++) {
        twice[i] = 2 * inc[i] - 7.5;
        cst[i] = 2.385;
    }
    const double *xc[] = {inc, twice};
    const char *names[] = {"income", "income2"};
    etacal_qr_result r;
    etacal_error err;
    assert_int_equal(etacal_qr_fit(y, xc, 2, NULL, 235, 0.5, names, NULL, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "'income2'"));
    assert_non_null(strstr(err.msg, "collinear"));
    const double *xk[] = {cst};
    const char *kn[] = {"flat"};
    assert_int_equal(etacal_qr_fit(y, xk, 1, NULL, 235, 0.5, kn, NULL, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "'flat' is constant"));
    const double *x1[] = {inc};
    assert_int_equal(etacal_qr_fit(y, x1, 1, NULL, 235, 1.0, NULL, NULL, &r, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_qr_fit(y, x1, 1, NULL, 235, 0.0, NULL, NULL, &r, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_qr_fit(y, x1, 1, NULL, 2, 0.5, NULL, NULL, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "more rows"));
    cst[3] = NAN;
    const double *xn[] = {cst};
    assert_int_equal(etacal_qr_fit(y, xn, 1, NULL, 235, 0.5, kn, NULL, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "not finite"));
    free(twice);
    free(cst);
}

static void test_rearrange_and_p(void **state)
{
    (void)state;
    etacal_error err;
    /* Hand-worked rearrangements (Chernozhukov, Fernandez-Val & Galichon
     * 2010: the quantile function of Q(U), U uniform on the levels' range),
     * Q piecewise linear through the points.  (1) levels .1 .2 .9, values
     * 30 10 20: |{Q <= y}| = .1 (y-10)/20 + .7 (y-10)/10 for y in [10, 20];
     * it reaches .1 (the middle level's share) at y = 10 + 4/3. */
    const double t1[] = {0.1, 0.2, 0.9};
    double q1[] = {30, 10, 20};
    assert_int_equal(etacal_rearrange(t1, q1, 3, &err), ETACAL_OK);
    close_rel(q1[0], 10, 1e-15);
    close_rel(q1[1], 10 + 4.0 / 3, 1e-14);
    close_rel(q1[2], 30, 1e-15);
    /* (2) equally spaced levels .25 .5 .75, values 0 10 5: |{Q <= y}| =
     * .25 y/10 + .25 (y-5)/5 for y in [5, 10] reaches .25 at y = 20/3, where
     * sorting would give 5: with a curve between the levels, sorting is the
     * rearrangement only when the values are monotone or m = 2. */
    const double t2[] = {0.25, 0.5, 0.75};
    double q2[] = {0, 10, 5};
    assert_int_equal(etacal_rearrange(t2, q2, 3, &err), ETACAL_OK);
    close_rel(q2[0], 0, 0);
    close_rel(q2[1], 20.0 / 3, 1e-14);
    close_rel(q2[2], 10, 1e-15);
    /* (3) a flat piece: levels .1 .3 .5 .9, values 5 5 1 3.  |{Q <= y}| =
     * .2 (y-1)/4 + .4 (y-1)/2 on [1, 3] (reaching .2 at 1.8 and .4 at 2.6),
     * .6 just below 5, and jumps by the flat piece's .2 at 5. */
    const double t3[] = {0.1, 0.3, 0.5, 0.9};
    double q3[] = {5, 5, 1, 3};
    assert_int_equal(etacal_rearrange(t3, q3, 4, &err), ETACAL_OK);
    close_rel(q3[0], 1, 1e-15);
    close_rel(q3[1], 1.8, 1e-14);
    close_rel(q3[2], 2.6, 1e-14);
    close_rel(q3[3], 5, 1e-15);
    /* a monotone curve is its own rearrangement, bit for bit */
    const double t4[] = {0.05, 0.1, 0.5, 0.51, 0.975};
    double q4[] = {812.25, 812.25, 1433.0625, 1501.3, 2207.9}, c4[5];
    memcpy(c4, q4, sizeof q4);
    assert_int_equal(etacal_rearrange(t4, q4, 5, &err), ETACAL_OK);
    assert_memory_equal(q4, c4, sizeof q4);
    /* random crossing curves at unequal levels: non-decreasing, from the
     * smallest value to the largest */
    uint64_t st = 0x2385;
    for (int rep = 0; rep < 2000; rep++) {
        size_t m = 2 + (size_t)(rep % 31);
        double t[ETACAL_QR_MAX_LEVELS], v[ETACAL_QR_MAX_LEVELS];
        double lo = INFINITY, hi = -INFINITY, acc = 0;
        for (size_t i = 0; i < m; i++) {
            st = st * 6364136223846793005ULL + 1442695040888963407ULL;
            acc += 0.001 + (double)(st >> 40) / 16777216.0;
            t[i] = acc;
            st = st * 6364136223846793005ULL + 1442695040888963407ULL;
            v[i] = rep % 5 == 0 ? (double)(st >> 61) : 1000 * ((double)(st >> 11) * 0x1.0p-53) + 10 * (double)i;
            lo = fmin(lo, v[i]);
            hi = fmax(hi, v[i]);
        }
        for (size_t i = 0; i < m; i++)
            t[i] /= acc + 0.01; /* levels in (0, 1) */
        assert_int_equal(etacal_rearrange(t, v, m, &err), ETACAL_OK);
        assert_true(v[0] == lo && v[m - 1] == hi);
        for (size_t i = 1; i < m; i++)
            assert_true(v[i] >= v[i - 1]);
    }
    /* errors: q is left as it is */
    double bad[] = {3, NAN, 1};
    assert_int_equal(etacal_rearrange(t1, bad, 3, &err), ETACAL_ENUM);
    assert_true(bad[0] == 3 && isnan(bad[1]) && bad[2] == 1);
    const double tdown[] = {0.5, 0.4, 0.9};
    double q5[] = {3, 2, 1};
    assert_int_equal(etacal_rearrange(tdown, q5, 3, &err), ETACAL_EINVAL);
    assert_true(q5[0] == 3 && q5[1] == 2 && q5[2] == 1);
    double many[ETACAL_QR_MAX_LEVELS + 1] = {0}, tmany[ETACAL_QR_MAX_LEVELS + 1];
    for (size_t i = 0; i <= ETACAL_QR_MAX_LEVELS; i++)
        tmany[i] = (double)(i + 1) / 40;
    assert_int_equal(etacal_rearrange(tmany, many, ETACAL_QR_MAX_LEVELS + 1, &err), ETACAL_EINVAL);
    /* Two levels: the curve is one line, and its rearrangement the line
     * reversed when it falls, i.e. the two values sorted.  Crossing fits:
     * the Engel lines at tau .1 and .9 evaluated far outside the data cross. */
    etacal_qr_result lo = fit_engel(0.1, 2), hi = fit_engel(0.9, 2);
    const double t19[] = {0.1, 0.9};
    for (double x = -20000; x <= 20000; x += 97.3) {
        double v[2] = {lo.coef[0] + lo.coef[1] * x, hi.coef[0] + hi.coef[1] * x};
        double before[2] = {v[0], v[1]};
        assert_int_equal(etacal_rearrange(t19, v, 2, &err), ETACAL_OK);
        assert_true(v[0] <= v[1]);
        if (before[0] <= before[1])
            assert_true(v[0] == before[0] && v[1] == before[1]);
        else
            assert_true(v[0] == before[1] && v[1] == before[0]);
    }
    /* two-sided p of t = 2.0 with 10 df: 0.07338803 (t tables; R: 2*pt(-2, 10)) */
    close_rel(etacal_t_pvalue(2.0, 10), 0.07338803, 1e-6);
    close_rel(etacal_t_pvalue(-2.0, 10), 0.07338803, 1e-6);
    assert_true(etacal_t_pvalue(0, 10) == 1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_engel_coefficients), cmocka_unit_test(test_engel_residual_counts),
        cmocka_unit_test(test_engel_se_ker),       cmocka_unit_test(test_bootstrap),
        cmocka_unit_test(test_stackloss),          cmocka_unit_test(test_nonunique_median),
        cmocka_unit_test(test_weights),            cmocka_unit_test(test_errors),
        cmocka_unit_test(test_rearrange_and_p),
    };
    return cmocka_run_group_tests_name("quantreg", tests, setup, teardown);
}
