/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_metrics.c: the pinball loss etacal_pinball (src/metrics.c).  (The
 * interval score is tested in test_binom.c for now.)
 *
 * References:
 * - scikit-learn's mean_pinball_loss: the means over eight points at six
 *   levels below are from sklearn.metrics.mean_pinball_loss (Debian
 *   python3-sklearn 1.2.1, run once under /usr/bin/python3), printed with
 *   repr; the command is in the comment above the values.
 * - Koenker & Bassett (1978), "Regression Quantiles", Econometrica 46: the
 *   check function rho_tau(u) = u (tau - 1{u < 0}), its symmetry
 *   rho_tau(u) = rho_{1-tau}(-u), rho_tau(u) - rho_tau(-u) = (2 tau - 1) u,
 *   2 rho_0.5(u) = |u|, and that the mean loss over a sample is smallest
 *   at an empirical tau-quantile (the ceil(n tau)-th smallest value when
 *   n tau is not a whole number), worked here on a seeded sample. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "testutil.h"

static const double Y[8] = {1943.25, 901.125, 2.385, 77.5, 1480.5, 3600.01, 944.7, 61.875};
static const double Q[8] = {1800, 944.7, 0, 61.875, 1480.5, 3000.5, 1000.25, 120};

static double mean_pinball(const double *y, const double *q, size_t n, double tau)
{
    double s = 0;
    for (size_t i = 0; i < n; i++)
        s += etacal_pinball(y[i], q[i], tau);
    return s / (double)n;
}

static void test_pinball_sklearn(void **state)
{
    (void)state;
    /* from sklearn.metrics.mean_pinball_loss (Debian python3-sklearn
     * 1.2.1), computed once:
     *   mean_pinball_loss(Y, Q, alpha=a) for a in (.05, .1, .5, .9, .975, .999) */
    const struct {
        double tau, want;
    } ref[] = {
        {0.05, 23.428250000000002}, {0.1, 27.200250000000004},  {0.5, 57.37625000000001},
        {0.9, 87.55225000000002},   {0.975, 93.21025000000002}, {0.999, 95.02081000000001},
    };
    for (size_t k = 0; k < sizeof ref / sizeof *ref; k++)
        assert_close(mean_pinball(Y, Q, 8, ref[k].tau), ref[k].want, 1e-13);
    /* ... and one point each: mean_pinball_loss([10], [7.5], alpha=0.9) is
     * 2.25, with [5] it is 0.24999999999999994 (the rounding of 1 - 0.9) */
    assert_close(etacal_pinball(10, 7.5, 0.9), 2.25, 1e-15);
    assert_close(etacal_pinball(5, 7.5, 0.9), 0.24999999999999994, 1e-15);
    /* with weights: mean_pinball_loss(Y, Q, alpha=0.9,
     * sample_weight=(1, 2, 0.5, 3, 1, 1, 2.385, 0.25)) */
    const double w[8] = {1, 2, 0.5, 3, 1, 1, 2.385, 0.25};
    double s = 0, sw = 0;
    for (size_t i = 0; i < 8; i++) {
        s += w[i] * etacal_pinball(Y[i], Q[i], 0.9);
        sw += w[i];
    }
    assert_close(s / sw, 66.02259092950159, 1e-13);
}

static void test_pinball_hand_values(void **state)
{
    (void)state;
    /* rho_tau(u) = tau u for u >= 0, (tau - 1) u below: worked by hand */
    assert_close(etacal_pinball(1943.25, 1800, 0.9), 0.9 * 143.25, 1e-15);   /* 128.925 */
    assert_close(etacal_pinball(901.125, 944.7, 0.9), 0.1 * 43.575, 1e-12);  /* 4.3575 */
    assert_close(etacal_pinball(2.385, 0, 0.025), 0.059625, 1e-14);
    assert_close(etacal_pinball(0, 2.385, 0.025), 2.325375, 1e-14);
    /* no loss at the forecast, of either sign of zero */
    assert_true(etacal_pinball(1480.5, 1480.5, 0.9) == 0);
    assert_true(etacal_pinball(-0.0, 0.0, 0.3) == 0);
    /* a missing value stays missing */
    assert_true(isnan(etacal_pinball(NAN, 7.125, 0.9)));
    assert_true(isnan(etacal_pinball(7.125, NAN, 0.9)));
    /* an infinite miss costs infinitely, whichever side */
    assert_true(etacal_pinball(INFINITY, 7.125, 0.9) == INFINITY);
    assert_true(etacal_pinball(7.125, INFINITY, 0.9) == INFINITY);
}

static void test_pinball_identities(void **state)
{
    (void)state;
    tu_rng rng = {UINT64_C(0x90975)};
    for (int k = 0; k < 5000; k++) {
        double y = 4000 * tu_unif(&rng) - 500, q = 4000 * tu_unif(&rng) - 500;
        double tau = 0.001 + 0.998 * tu_unif(&rng), u = y - q;
        double l = etacal_pinball(y, q, tau);
        assert_true(l >= 0);
        /* rho_tau(u) = rho_{1-tau}(-u) */
        assert_close(l, etacal_pinball(q, y, 1 - tau), 1e-12);
        /* rho_tau(u) - rho_tau(-u) = (2 tau - 1) u */
        double diff = l - etacal_pinball(q, y, tau), want = (2 * tau - 1) * u;
        assert_true(fabs(diff - want) <= 1e-12 * fabs(u));
        /* 2 rho_0.5(u) = |u| */
        assert_close(2 * etacal_pinball(y, q, 0.5), fabs(u), 1e-15);
        /* piecewise linear in q with slopes -tau and 1 - tau */
        double h = 0.125;
        if (u > h)
            assert_close(etacal_pinball(y, q + h, tau), l - tau * h, 1e-9);
        else if (u < 0)
            assert_close(etacal_pinball(y, q + h, tau), l + (1 - tau) * h, 1e-9);
    }
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* The mean loss of a constant forecast is smallest at the empirical
 * tau-quantile (Koenker & Bassett 1978): for n tau not whole, the
 * ceil(n tau)-th smallest value beats every other value of the sample and
 * every point of a fine grid. */
static void test_pinball_minimised_at_quantile(void **state)
{
    (void)state;
    enum { N = 199 };
    double y[N], sorted[N], c[N];
    tu_rng rng = {UINT64_C(2385)};
    for (size_t i = 0; i < N; i++)
        sorted[i] = y[i] = 600 + 900 * tu_unif(&rng) + 300 * tu_unif(&rng) * tu_unif(&rng);
    qsort(sorted, N, sizeof *sorted, cmp_double);
    const double taus[] = {0.05, 0.5, 0.9, 0.975};
    for (size_t k = 0; k < sizeof taus / sizeof *taus; k++) {
        double tau = taus[k];
        size_t r = (size_t)ceil(N * tau); /* N tau is not whole for these */
        double best = sorted[r - 1];
        for (size_t i = 0; i < N; i++)
            c[i] = best;
        double at_best = mean_pinball(y, c, N, tau);
        for (size_t j = 0; j < N; j++) {
            if (j == r - 1)
                continue;
            for (size_t i = 0; i < N; i++)
                c[i] = sorted[j];
            assert_true(mean_pinball(y, c, N, tau) > at_best);
        }
        for (double g = 500; g < 2000; g += 0.37) {
            for (size_t i = 0; i < N; i++)
                c[i] = g;
            assert_true(mean_pinball(y, c, N, tau) >= at_best);
        }
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_pinball_sklearn),
        cmocka_unit_test(test_pinball_hand_values),
        cmocka_unit_test(test_pinball_identities),
        cmocka_unit_test(test_pinball_minimised_at_quantile),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
