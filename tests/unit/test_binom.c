/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_binom.c: Wilson and Clopper-Pearson intervals against the worked
 * examples of Newcombe (1998), Statistics in Medicine 17:857-872 (81/263,
 * 15/148, 0/20, 1/29 at 95%), with values computed with statsmodels'
 * proportion_confint that match Newcombe's Table II (that match is from
 * memory); 4
 * decimals.  Also the interval score and pinball loss on worked examples. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>

#include "etacal/etacal.h"

typedef struct example {
    size_t x, n;
    double wlo, whi, clo, chi;
} example;

static const example newcombe[] = {
    {81, 263, 0.2553, 0.3662, 0.2527, 0.3676},
    {15, 148, 0.0624, 0.1605, 0.0578, 0.1617},
    {0, 20, 0.0, 0.1611, 0.0, 0.1684},
    {1, 29, 0.0061, 0.1718, 0.0009, 0.1776},
};

static void near4(double got, double want)
{
    /* the published values are rounded to 4 decimals */
    if (fabs(got - want) > 0.5e-4 + 1e-12)
        fail_msg("got %.6f, want %.4f", got, want);
}

static void test_newcombe_wilson(void **state)
{
    (void)state;
    for (size_t i = 0; i < sizeof newcombe / sizeof *newcombe; i++) {
        double lo, hi;
        etacal_error err;
        assert_int_equal(etacal_binom_wilson(newcombe[i].x, newcombe[i].n, 0.95, &lo, &hi, &err), ETACAL_OK);
        near4(lo, newcombe[i].wlo);
        near4(hi, newcombe[i].whi);
    }
}

static void test_newcombe_exact(void **state)
{
    (void)state;
    for (size_t i = 0; i < sizeof newcombe / sizeof *newcombe; i++) {
        double lo, hi;
        etacal_error err;
        assert_int_equal(etacal_binom_exact(newcombe[i].x, newcombe[i].n, 0.95, &lo, &hi, &err), ETACAL_OK);
        near4(lo, newcombe[i].clo);
        near4(hi, newcombe[i].chi);
    }
}

static void test_edges_and_errors(void **state)
{
    (void)state;
    double lo, hi;
    etacal_error err;
    /* x = n: the upper end is 1 for both methods */
    assert_int_equal(etacal_binom_ci(ETACAL_CI_EXACT, 29, 29, 0.95, &lo, &hi, &err), ETACAL_OK);
    assert_true(hi == 1 && lo > 0.85 && lo < 0.9);
    assert_int_equal(etacal_binom_ci(ETACAL_CI_WILSON, 29, 29, 0.95, &lo, &hi, &err), ETACAL_OK);
    assert_true(hi == 1);
    /* symmetric: the interval of n - x is the mirror of that of x */
    double lo2, hi2;
    etacal_binom_exact(263 - 81, 263, 0.9, &lo2, &hi2, &err);
    etacal_binom_exact(81, 263, 0.9, &lo, &hi, &err);
    assert_true(fabs(lo - (1 - hi2)) < 1e-12 && fabs(hi - (1 - lo2)) < 1e-12);
    /* a higher confidence widens the interval */
    double l99, h99;
    etacal_binom_wilson(81, 263, 0.99, &l99, &h99, &err);
    etacal_binom_wilson(81, 263, 0.95, &lo, &hi, &err);
    assert_true(l99 < lo && h99 > hi);
    assert_int_equal(etacal_binom_wilson(3, 0, 0.95, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_exact(5, 4, 0.95, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_wilson(1, 4, 1.0, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_wilson(1, 4, NAN, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_ci(7, 1, 4, 0.95, &lo, &hi, &err), ETACAL_EINVAL);
}

/* Interval score (Gneiting & Raftery 2007, sec. 6.2) worked from its
 * definition, worked by hand: l = 2, u = 8. */
static void test_interval_score_examples(void **state)
{
    (void)state;
    assert_true(fabs(etacal_interval_score(10, 2, 8, 0.1) - 46) < 1e-12); /* 6 + (2/.1)(10-8) */
    assert_true(fabs(etacal_interval_score(5, 2, 8, 0.1) - 6) < 1e-12);   /* inside: the width */
    assert_true(fabs(etacal_interval_score(1, 2, 8, 0.2) - 16) < 1e-12);  /* 6 + (2/.2)(2-1) */
    /* = (2/alpha) (pinball at alpha/2 of l + pinball at 1-alpha/2 of u) */
    for (double y = -3.5; y < 12; y += 0.77) {
        double a = 0.2;
        double lhs = etacal_interval_score(y, 2.385, 7.125, a);
        double rhs = 2 / a * (etacal_pinball(y, 2.385, a / 2) + etacal_pinball(y, 7.125, 1 - a / 2));
        assert_true(fabs(lhs - rhs) < 1e-9 * fabs(lhs));
    }
}

/* Unequal tails (Gneiting & Raftery 2007 sec. 6.2 generalised, worked by hand): l = 2, u = 8, lower
 * level a = 0.1, upper level b = 0.95: y = 10 -> 6 + 2/0.05 = 46, y = 5
 * -> the width 6, y = 1 -> 6 + 1/0.1 = 16.  It equals the sum of the two
 * quantiles' pinball losses each divided by its tail, and with a = 1 - b
 * the central interval's score. */
static void test_interval_score_tails(void **state)
{
    (void)state;
    assert_true(fabs(etacal_interval_score_tails(10, 2, 8, 0.1, 0.95) - 46) < 1e-12);
    assert_true(fabs(etacal_interval_score_tails(5, 2, 8, 0.1, 0.95) - 6) < 1e-12);
    assert_true(fabs(etacal_interval_score_tails(1, 2, 8, 0.1, 0.95) - 16) < 1e-12);
    /* not the symmetric 2/alpha with alpha = 1 - (b - a) = 0.15: 6 + 2 (2/0.15) = 32.67 */
    assert_true(fabs(etacal_interval_score(10, 2, 8, 0.15) - 46) > 10);
    for (double y = -3.5; y < 12; y += 0.77) {
        double a = 0.0725, b = 0.815;
        double lhs = etacal_interval_score_tails(y, 2.385, 7.125, a, b);
        double rhs = etacal_pinball(y, 2.385, a) / a + etacal_pinball(y, 7.125, b) / (1 - b);
        assert_true(fabs(lhs - rhs) < 1e-9 * fabs(lhs));
        double sym = etacal_interval_score_tails(y, 2.385, 7.125, 0.1, 0.9);
        assert_true(fabs(sym - etacal_interval_score(y, 2.385, 7.125, 0.2)) < 1e-9 * fabs(sym));
    }
}

/* The laws of the gate (binom.h), by hand.  Beta-binomial(3, 2, 1):
 * pmf(j) = C(3, j) B(j + 2, 4 - j) / B(2, 1) = 0.1, 0.2, 0.3, 0.4 (B(2,4)
 * = 1/20, B(3,3) = 1/30, B(4,2) = 1/20, B(5,1) = 1/5, B(2,1) = 1/2).
 * Beta-binomial(2, 1, 1) is uniform on 0..2; Beta-binomial(1, a, b) is
 * Bernoulli(a / (a + b)).  Binomial(3, 1/2): 1/8, 4/8, 7/8. */
static void test_hit_laws(void **state)
{
    (void)state;
    assert_true(fabs(etacal_betabinom_cdf(0, 3, 2, 1) - 0.1) < 1e-14);
    assert_true(fabs(etacal_betabinom_cdf(1, 3, 2, 1) - 0.3) < 1e-14);
    assert_true(fabs(etacal_betabinom_cdf(2, 3, 2, 1) - 0.6) < 1e-14);
    assert_true(etacal_betabinom_cdf(3, 3, 2, 1) == 1);
    assert_true(fabs(etacal_betabinom_cdf(0, 2, 1, 1) - 1.0 / 3) < 1e-14);
    assert_true(fabs(etacal_betabinom_cdf(1, 2, 1, 1) - 2.0 / 3) < 1e-14);
    assert_true(fabs(etacal_betabinom_cdf(0, 1, 3, 2.385) - 2.385 / 5.385) < 1e-14);
    assert_true(fabs(etacal_binom_cdf(0, 3, 0.5) - 0.125) < 1e-15);
    assert_true(fabs(etacal_binom_cdf(1, 3, 0.5) - 0.5) < 1e-15);
    assert_true(fabs(etacal_binom_cdf(2, 3, 0.5) - 0.875) < 1e-15);
    /* Beta(a, b) concentrates at a/(a+b) as a + b grows: the Beta-binomial
     * tends to the binomial */
    for (size_t h = 430; h <= 470; h += 10) {
        double bb = etacal_betabinom_cdf(h, 500, 0.9e9, 0.1e9), bi = etacal_binom_cdf(h, 500, 0.9);
        assert_true(fabs(bb - bi) < 1e-6);
    }
    /* the extra spread of the Beta law fattens the lower tail: with n =
     * 500, k = 451 the honest hits of 500 orders fall to 430 or below far
     * more often than Binomial(500, 451/501) says */
    assert_true(etacal_betabinom_cdf(430, 500, 451, 50) > 2 * etacal_binom_cdf(430, 500, 451.0 / 501));
    /* edges and bad arguments */
    assert_true(etacal_binom_cdf(5, 5, 0.3) == 1);
    assert_true(etacal_binom_cdf(2, 5, 0) == 1);
    assert_true(etacal_binom_cdf(4, 5, 1) == 0);
    assert_true(etacal_betabinom_cdf(0, 0, 2, 2) == 1);
    assert_true(isnan(etacal_binom_cdf(1, 5, 1.5)));
    assert_true(isnan(etacal_binom_cdf(1, 5, NAN)));
    assert_true(isnan(etacal_betabinom_cdf(1, 5, 0.5, 2)));
    assert_true(isnan(etacal_betabinom_cdf(1, 5, 2, INFINITY)));
    /* a far tail keeps its relative accuracy: P(X <= 0), X ~ Bin(1000, 0.5) = 2^-1000 */
    assert_true(fabs(etacal_binom_cdf(0, 1000, 0.5) / pow(2, -1000) - 1) < 1e-9);
}

/* Pinball loss: scikit-learn's documentation example of mean_pinball_loss
 * (y = 1, 2, 3), recomputed by hand. */
static void test_pinball_examples(void **state)
{
    (void)state;
    const double y[] = {1, 2, 3}, qa[] = {0, 2, 3}, qb[] = {1, 2, 4};
    double a1 = 0, a9 = 0, b1 = 0, b9 = 0;
    for (int i = 0; i < 3; i++) {
        a1 += etacal_pinball(y[i], qa[i], 0.1) / 3;
        a9 += etacal_pinball(y[i], qa[i], 0.9) / 3;
        b1 += etacal_pinball(y[i], qb[i], 0.1) / 3;
        b9 += etacal_pinball(y[i], qb[i], 0.9) / 3;
    }
    assert_true(fabs(a1 - 0.1 / 3) < 1e-12);
    assert_true(fabs(a9 - 0.3) < 1e-12);
    assert_true(fabs(b1 - 0.3) < 1e-12);
    assert_true(fabs(b9 - 0.1 / 3) < 1e-12);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_newcombe_wilson),
        cmocka_unit_test(test_newcombe_exact),
        cmocka_unit_test(test_edges_and_errors),
        cmocka_unit_test(test_interval_score_examples),
        cmocka_unit_test(test_interval_score_tails),
        cmocka_unit_test(test_hit_laws),
        cmocka_unit_test(test_pinball_examples),
    };
    return cmocka_run_group_tests_name("binom", tests, NULL, NULL);
}
