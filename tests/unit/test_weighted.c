/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_weighted.c: non-exchangeable weighted split conformal (Barber,
 * Candes, Ramdas & Tibshirani 2023, "Conformal prediction beyond
 * exchangeability", Ann. Statist.): the bound is the smallest score s with
 * sum_{s_j <= s} w_j >= tau (1 + sum w), the new point's weight 1 as mass
 * at +infinity.  A hand-worked example from that definition (checked with
 * numpy), equal weights against
 * the unweighted rank rule, and a drifting stream. */
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
#include <string.h>
#include <unistd.h>

#include "etacal/etacal.h"
#include "internal.h"

static char path[64];

static etacal_quotes *fit_scores(const double *s, size_t n, const double *w, const double *targets, size_t nt)
{
    snprintf(path, sizeof path, "/tmp/etacal-w-XXXXXX");
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *fp = fdopen(fd, "w");
    fprintf(fp, "pred,actual\n");
    for (size_t i = 0; i < n; i++)
        fprintf(fp, "1000,%.17g\n", 1000 + s[i]);
    assert_int_equal(fclose(fp), 0);
    etacal_colspec cols[] = {{"actual", ETACAL_COL_NUM, 0, NULL}, {"pred", ETACAL_COL_NUM, 0, NULL}};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_read_csv(path, cols, 2, NULL, &t, &err), ETACAL_OK);
    unlink(path);
    etacal_fit_opts o = {ETACAL_METHOD_ADD, targets, nt, 1, NULL, 0, 0, 0, 0, NULL, w, 0};
    etacal_quotes *q = NULL;
    int rc = etacal_quotes_fit(t, 0, 1, NULL, 0, &o, &q, &err);
    etacal_table_destroy(t);
    if (rc != ETACAL_OK)
        fail_msg("fit failed: %s", err.msg);
    return q;
}

/* s = 3, 1, 4, 1.5, 5, 9, 2, 6 from oldest to newest, w_i = 0.9^(9-i):
 * levels .5, .7, .8 give 5, 6, 9; unweighted 4, 6, 9 (worked by hand).
 * By hand at .5: W = sum 0.9^1..0.9^8 = 5.12579, the mass to reach is
 * .5 (1 + W) = 3.06290; in score order the weights .47830 (1), .59049
 * (1.5), .81 (2), .43047 (3), .53144 (4), .6561 (5) add up to 3.49680 at
 * the score 5, and to 2.84070 before it. */
static void test_hand_example(void **state)
{
    (void)state;
    const double s[] = {3, 1, 4, 1.5, 5, 9, 2, 6};
    double w[8];
    for (int i = 0; i < 8; i++)
        w[i] = pow(0.9, 9 - (i + 1));
    const double targets[] = {0.5, 0.7, 0.8};
    etacal_quotes *q = fit_scores(s, 8, w, targets, 3);
    assert_true(q->segs[0].score_q[0] == 5);
    assert_true(q->segs[0].score_q[1] == 6);
    assert_true(q->segs[0].score_q[2] == 9);
    etacal_quotes_destroy(q);
    q = fit_scores(s, 8, NULL, targets, 3);
    assert_true(q->segs[0].score_q[0] == 4);
    assert_true(q->segs[0].score_q[1] == 6);
    assert_true(q->segs[0].score_q[2] == 9);
    etacal_quotes_destroy(q);
}

/* Equal weights are the unweighted rule, also at the levels where a plain
 * floating-point ceil goes wrong (n = 9, tau = .3; n = 24, tau = .56). */
static void test_equal_weights(void **state)
{
    (void)state;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 2023);
    const size_t ns[] = {9, 24, 57, 200, 1001};
    const double targets[] = {0.3, 0.56, 0.9, 0.95};
    for (size_t a = 0; a < 5; a++) {
        size_t n = ns[a];
        double *s = malloc(n * sizeof *s), *w = malloc(n * sizeof *w);
        for (size_t i = 0; i < n; i++) {
            s[i] = round(gsl_ran_gaussian(r, 300)); /* whole seconds: ties */
            w[i] = 1;
        }
        size_t nt = n >= 19 ? 4 : 3; /* .95 needs 19 rows for a finite global bound */
        etacal_quotes *qw = fit_scores(s, n, w, targets, nt), *qu = fit_scores(s, n, NULL, targets, nt);
        for (size_t ti = 0; ti < nt; ti++) {
            double a1 = qw->segs[0].score_q[ti], a2 = qu->segs[0].score_q[ti];
            if (!(a1 == a2 || (isinf(a1) && isinf(a2))))
                fail_msg("n=%zu tau=%g: weighted %g, unweighted %g", n, targets[ti], a1, a2);
        }
        etacal_quotes_destroy(qw);
        etacal_quotes_destroy(qu);
        free(s);
        free(w);
    }
    gsl_rng_free(r);
}

/* A stream whose scale grows 3% a day: calibrating on 29 days and
 * promising day 30, recency weights (half-life 3 days) come closer to the
 * target than equal weights, which under-cover.  Exp(scale) scores, so the
 * coverage of a bound q on day 30 is 1 - exp(-q / scale_30). */
static void test_drift(void **state)
{
    (void)state;
    const size_t days = 29, per = 300, n = days * per;
    double *s = malloc(n * sizeof *s), *w = malloc(n * sizeof *w);
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 2021);
    for (size_t d = 0; d < days; d++)
        for (size_t i = 0; i < per; i++) {
            s[d * per + i] = gsl_ran_exponential(r, 300 * pow(1.03, (double)d));
            w[d * per + i] = exp2(-(double)(days - 1 - d) / 3.0);
        }
    gsl_rng_free(r);
    const double targets[] = {0.9};
    etacal_quotes *qw = fit_scores(s, n, w, targets, 1), *qu = fit_scores(s, n, NULL, targets, 1);
    double scale30 = 300 * pow(1.03, (double)days);
    double cw = 1 - exp(-qw->segs[0].score_q[0] / scale30), cu = 1 - exp(-qu->segs[0].score_q[0] / scale30);
    printf("   day 30: coverage %.4f with recency weights, %.4f without\n", cw, cu);
    assert_true(fabs(cw - 0.9) < fabs(cu - 0.9));
    assert_true(cu < 0.88);
    etacal_quotes_destroy(qw);
    etacal_quotes_destroy(qu);
    free(s);
    free(w);
}

/* Recency weights 2^(-age/half-life), by hand: ages of 2, 1 and 0 half-lives
 * give 1/4, 1/2 and 1; with the newest row masked out, the newest kept row
 * weighs 1 and the later one 2. */
static void test_recency_weights(void **state)
{
    (void)state;
    const double t[3] = {0, 86400, 172800};
    double w[3];
    etacal_recency_weights(t, 3, NULL, 86400, w);
    assert_true(w[0] == 0.25 && w[1] == 0.5 && w[2] == 1);
    const unsigned char mask[3] = {1, 1, 0};
    etacal_recency_weights(t, 3, mask, 86400, w);
    assert_true(w[0] == 0.5 && w[1] == 1 && w[2] == 2);
    etacal_recency_weights(t, 3, NULL, 43200, w);
    assert_true(w[0] == 0.0625 && w[1] == 0.25 && w[2] == 1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_hand_example),
        cmocka_unit_test(test_equal_weights),
        cmocka_unit_test(test_drift),
        cmocka_unit_test(test_recency_weights),
    };
    return cmocka_run_group_tests_name("weighted", tests, NULL, NULL);
}
