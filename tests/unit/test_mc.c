/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_mc.c: Monte-Carlo check of the split-conformal guarantee.
 *
 * Theorem (Vovk et al. 2005; Lei et al. 2018, Thm 2.2 and its one-sided
 * form): with n exchangeable calibration scores and k = ceil((n+1) tau),
 * P(S_new <= s_(k)) >= tau, and for continuous scores it equals k/(n+1) <=
 * tau + 1/(n+1).  With scores drawn from Exp(1), the coverage of one
 * calibration draw is exactly F(s_(k)) = 1 - exp(-s_(k)), so the mean of
 * that over repetitions estimates the guarantee with little noise.  Each
 * check allows four Monte-Carlo standard errors. */
#define _GNU_SOURCE
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

#include "etacal/etacal.h"

typedef struct mc {
    double mean, se;
    size_t k;
} mc;

/* Mean coverage of the bound over reps draws of n Exp(1) scores. */
static mc run(size_t n, double tau, size_t reps, unsigned long seed)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, seed);
    double *x = malloc(n * sizeof *x);
    assert_non_null(x);
    double sum = 0, sum2 = 0;
    size_t k = 0;
    for (size_t rep = 0; rep < reps; rep++) {
        for (size_t i = 0; i < n; i++)
            x[i] = gsl_ran_exponential(r, 1.0);
        double q = etacal_conformal_upper(x, n, tau, &k);
        double cov = isinf(q) ? 1.0 : 1 - exp(-q);
        sum += cov;
        sum2 += cov * cov;
    }
    free(x);
    gsl_rng_free(r);
    mc m;
    m.mean = sum / (double)reps;
    double var = sum2 / (double)reps - m.mean * m.mean;
    m.se = sqrt(var > 0 ? var : 0) / sqrt((double)reps);
    m.k = k;
    return m;
}

static void check(size_t n, double tau, unsigned long seed)
{
    mc m = run(n, tau, 4000, seed);
    double lo = tau - 4 * m.se, hi = tau + 1.0 / (double)(n + 1) + 4 * m.se;
    double exact = (double)m.k / (double)(n + 1);
    printf("   n=%zu tau=%g: mean coverage %.5f (se %.5f), k/(n+1) = %.5f, bound [%.5f, %.5f]\n", n, tau,
           m.mean, m.se, exact, lo, hi);
    assert_true(m.mean >= lo);
    assert_true(m.mean <= hi);
    /* Sharper: for continuous scores the mean is k/(n+1) exactly. */
    assert_true(fabs(m.mean - exact) <= 4 * m.se);
}

static void test_guarantee_small_n(void **state)
{
    (void)state;
    check(19, 0.95, 11);  /* k = 19 = n: the smallest n with a finite bound at .95 */
    check(23, 0.9, 12);
    check(50, 0.8, 13);
}

static void test_guarantee_larger_n(void **state)
{
    (void)state;
    check(100, 0.9, 14);  /* k = 91, 91/101 = .900990 (Lei et al. 2018; METHODS.md) */
    check(257, 0.975, 15);
    check(1000, 0.5, 16);
}

/* The same theorem through the whole fit path: one CSV with 2000 segments
 * of 40 rows each; within a segment the rows are exchangeable, so each
 * segment's buffer (Mondrian conformal, Vovk et al. 2005) has coverage
 * F(buffer) and the mean over segments obeys the same bounds. */
static void test_guarantee_through_fit(void **state)
{
    (void)state;
    const size_t nseg = 2000, per = 40;
    const double tau = 0.85;
    char dir[] = "/tmp/etacal-mc-XXXXXX";
    assert_non_null(mkdtemp(dir));
    char path[128];
    snprintf(path, sizeof path, "%s/cal.csv", dir);
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 2385);
    fprintf(fp, "seg,pred,actual\n");
    /* rows interleaved across segments, as real files are */
    for (size_t i = 0; i < per; i++)
        for (size_t s = 0; s < nseg; s++) {
            double pred = 600 + 17.0 * (double)(s % 13);
            fprintf(fp, "s%zu,%.17g,%.17g\n", s, pred, pred + 60 * gsl_ran_exponential(r, 1.0));
        }
    gsl_rng_free(r);
    assert_int_equal(fclose(fp), 0);

    etacal_colspec cols[] = {{"actual", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"pred", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"seg", ETACAL_COL_KEY, 0, NULL}};
    etacal_error err;
    etacal_table *t = NULL;
    assert_int_equal(etacal_table_read_csv(path, cols, 3, NULL, &t, &err), ETACAL_OK);
    size_t keys[] = {2};
    double targets[] = {tau};
    etacal_fit_opts fo = {ETACAL_METHOD_ADD, targets, 1, per, NULL, 0, 0, 0, 0, NULL, NULL};
    etacal_quotes *q = NULL;
    assert_int_equal(etacal_quotes_fit(t, 0, 1, keys, 1, &fo, &q, &err), ETACAL_OK);
    assert_int_equal(q->nsegs, nseg + 1);
    double sum = 0, sum2 = 0;
    size_t rows = 0;
    for (size_t i = 0; i < q->nrows; i++) {
        if (q->rows[i].seg == 0)
            continue;
        /* offset_s was rounded up to the millisecond: the coverage of the
         * published bound, in units of the Exp scale of 60 s */
        double cov = 1 - exp(-q->rows[i].offset_s / 60);
        sum += cov;
        sum2 += cov * cov;
        rows++;
    }
    assert_int_equal(rows, nseg);
    double mean = sum / (double)rows;
    double se = sqrt(sum2 / (double)rows - mean * mean) / sqrt((double)rows);
    size_t k = etacal_conformal_rank(per, tau);
    printf("   fit path: %zu segments of %zu: mean coverage %.5f (se %.5f), k/(n+1) = %.5f\n", rows, per,
           mean, se, (double)k / (double)(per + 1));
    assert_true(mean >= tau - 4 * se);
    assert_true(mean <= tau + 1.0 / (double)(per + 1) + 4 * se);
    etacal_quotes_destroy(q);
    etacal_table_destroy(t);
    unlink(path);
    rmdir(dir);
}

/* With confidence (Vovk 2012): the rank from the Beta law of the coverage
 * makes P(coverage >= tau) >= conf over calibration draws; the
 * average-case rank gets this only about half of the time (its coverage
 * is centred on tau).  Check values of the rank: ../shared/METHODS.md,
 * computed there with scipy. */
static void test_confidence_rank(void **state)
{
    (void)state;
    assert_int_equal(etacal_conformal_rank_conf(1000, 0.9, 0.95), 916);
    assert_int_equal(etacal_conformal_rank_conf(100, 0.9, 0.95), 96);
    assert_int_equal(etacal_conformal_rank_conf(500, 0.95, 0.9), 482);
    assert_int_equal(etacal_conformal_rank_conf(28, 0.9, 0.95), 29); /* min n 29: none below */
    assert_true(etacal_conformal_rank_conf(29, 0.9, 0.95) <= 29);
    assert_int_equal(etacal_conformal_rank_conf(58, 0.95, 0.95), 59);
    assert_true(etacal_conformal_rank_conf(59, 0.95, 0.95) <= 59);
    /* Beta(901, 100) and Beta(91, 10), Beta(19, 1): 5% quantiles .884075,
     * .848205, .854131 and mean .900100 (scipy, METHODS.md) */
    assert_true(fabs(etacal_coverage_low(1000, 901, 0.95) - 0.884075) < 5e-7);
    assert_true(fabs(etacal_coverage_mean(1000, 901) - 0.900100) < 5e-7);
    assert_true(fabs(etacal_coverage_low(100, 91, 0.95) - 0.848205) < 5e-7);
    assert_true(fabs(etacal_coverage_low(19, 19, 0.95) - 0.854131) < 5e-7);
}

static void test_confidence_mc(void **state)
{
    (void)state;
    const size_t n = 200, reps = 4000;
    const double tau = 0.9, conf = 0.95;
    size_t kc = etacal_conformal_rank_conf(n, tau, conf), k0 = etacal_conformal_rank(n, tau);
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 2012);
    double *x = malloc(n * sizeof *x);
    size_t good_c = 0, good_0 = 0;
    for (size_t rep = 0; rep < reps; rep++) {
        for (size_t i = 0; i < n; i++)
            x[i] = gsl_ran_exponential(r, 1.0);
        double qc = etacal_select(x, n, kc), q0 = etacal_select(x, n, k0);
        good_c += 1 - exp(-qc) >= tau;
        good_0 += 1 - exp(-q0) >= tau;
    }
    free(x);
    gsl_rng_free(r);
    double pc = (double)good_c / (double)reps, p0 = (double)good_0 / (double)reps;
    double se = sqrt(conf * (1 - conf) / (double)reps);
    printf("   n=%zu tau=%g: P(coverage >= tau) %.4f with k=%zu (conf %.2f), %.4f with k=%zu\n", n, tau, pc, kc,
           conf, p0, k0);
    assert_true(pc >= conf - 4 * se);
    assert_true(p0 < 0.75); /* the average-case rank does not give this */
}

/* The gate of check --table (METHODS.md sec. 9; issue 11): G = 40
 * segments, each an exact split-conformal fit on 500 calibration scores at
 * tau = 0.9 (etacal_conformal_upper, k = 451) and 500 fresh orders.  The
 * error law (actual - prediction) is Normal(0, 600 s), delivery-like
 * errors of ten minutes, so that a table 150 s too low is a real defect
 * (coverage 0.85 instead of 0.90) rather than rounding.  Given its bound Q,
 * a segment's fresh orders hit independently with the exact probability
 * Phi(Q / 600), so its hits are drawn as Binomial(500, Phi(Q / 600)).  The
 * gate: p = P(H <= hits) under Beta-binomial(500, k, 501 - k), Holm at
 * family-wise level 0.05.  Returns the share of runs the gate fails, and
 * in *old the share the former rule fails (some segment's 95% Wilson
 * interval wholly below 0.9) and in *nolaw the share the gate without
 * --table fails (Holm over binomial tests at the nominal 0.9). */
static double gate_mc(double shift, size_t reps, unsigned long seed, double *old, double *nolaw)
{
    enum { G = 40, NCAL = 500, NFRESH = 500 };
    const double tau = 0.9, sigma = 600, delta = 0.05;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, seed);
    double x[NCAL], p[G], pb[G];
    size_t fails = 0, oldfails = 0, nolawfails = 0;
    etacal_error err;
    for (size_t rep = 0; rep < reps; rep++) {
        int oldfail = 0;
        for (size_t g = 0; g < G; g++) {
            for (size_t i = 0; i < NCAL; i++)
                x[i] = gsl_ran_gaussian_ziggurat(r, sigma);
            size_t k = 0;
            double q = etacal_conformal_upper(x, NCAL, tau, &k) - shift;
            assert_int_equal(k, 451);
            unsigned hits = gsl_ran_binomial(r, gsl_cdf_gaussian_P(q, sigma), NFRESH);
            p[g] = etacal_betabinom_cdf(hits, NFRESH, (double)k, (double)(NCAL + 1 - k));
            pb[g] = etacal_binom_cdf(hits, NFRESH, tau);
            double lo, hi;
            assert_int_equal(etacal_binom_wilson(hits, NFRESH, 0.95, &lo, &hi, &err), ETACAL_OK);
            oldfail |= hi < tau;
        }
        assert_int_equal(etacal_holm(p, G, p, &err), ETACAL_OK);
        assert_int_equal(etacal_holm(pb, G, pb, &err), ETACAL_OK);
        int fail = 0, nl = 0;
        for (size_t g = 0; g < G; g++) {
            fail |= p[g] <= delta;
            nl |= pb[g] <= delta;
        }
        fails += (size_t)fail;
        nolawfails += (size_t)nl;
        oldfails += (size_t)oldfail;
    }
    gsl_rng_free(r);
    *old = (double)oldfails / (double)reps;
    *nolaw = (double)nolawfails / (double)reps;
    return (double)fails / (double)reps;
}

/* Honest tables: the gate fails at most delta = 0.05 of the time (Holm
 * controls the family-wise error, and each p-value is valid under the
 * exact law of the fitted table).  2000 runs: the bound allows three
 * Monte-Carlo standard errors of a rate of 0.05, 3 sqrt(0.05 0.95 / 2000)
 * = 0.0146.  The former Wilson rule fails about 96% of these honest runs
 * (issue 11: 1 - (1 - 0.076)^40); it is asserted above 90% to show that
 * the setup is the one of the issue; the gate without --table fails
 * about half of them.  A table shifted down 150 s must be
 * caught in at least 90% of the runs. */
static void test_gate_table_law(void **state)
{
    (void)state;
    const size_t reps = 2000;
    double old = 0, nolaw = 0;
    double rate = gate_mc(0, reps, 1979, &old, &nolaw);
    double bound = 0.05 + 3 * sqrt(0.05 * 0.95 / (double)reps);
    printf("   honest: gate fails %.4f of %zu runs (bound %.4f); the Wilson rule fails %.4f, Holm over\n"
           "   binomial tests at the nominal level (no table) %.4f\n",
           rate, reps, bound, old, nolaw);
    assert_true(rate <= bound);
    assert_true(old >= 0.90);
    /* calibration noise not accounted for: about half the honest runs fail
     * (0.476 in a separate run of 4000 with numpy/scipy); asserted above
     * 0.3 to show why the table's law is needed */
    assert_true(nolaw >= 0.30);
    double power = gate_mc(150, reps, 2012, &old, &nolaw);
    printf("   shifted down 150 s: gate fails %.4f of %zu runs\n", power, reps);
    assert_true(power >= 0.90);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_guarantee_small_n),
        cmocka_unit_test(test_guarantee_larger_n),
        cmocka_unit_test(test_guarantee_through_fit),
        cmocka_unit_test(test_confidence_rank),
        cmocka_unit_test(test_confidence_mc),
        cmocka_unit_test(test_gate_table_law),
    };
    return cmocka_run_group_tests_name("mc", tests, NULL, NULL);
}
