/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_quantreg_large.c: the large-n paths of the quantile regression
 * engine: the Portnoy & Koenker (1997) preprocessing and the threaded
 * passes.  Checks: the answer is the same bit for bit for any number of
 * threads (the threads option's contract in quantreg.h); the preprocessed
 * fit reaches the optimum of the full-data fit (Portnoy & Koenker 1997,
 * sec. 6: the fix-up loop ends only at the exact solution), here to the
 * interior point's duality gap; a value that is not finite outside the
 * subsample still gets the message of the full checks.  Data: seeded draws
 * shaped like bench/qr_bench.c (whole-second responses, many ties). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"

#define K 3

typedef struct data {
    size_t n;
    double *y, *x[K], *w;
} data;

/* y = 1500 + sum b_j x_j + (60 + 20|x_1|) e, rounded to whole seconds */
static data make(size_t n, unsigned long seed, int weighted)
{
    data d;
    d.n = n;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, seed);
    d.y = malloc(n * sizeof *d.y);
    d.w = weighted ? malloc(n * sizeof *d.w) : NULL;
    for (int j = 0; j < K; j++)
        d.x[j] = malloc(n * sizeof(double));
    const double b[K] = {61.25, -23.5, 7.375}, sc[K] = {1.5, 2.25, 0.75};
    for (size_t i = 0; i < n; i++) {
        double v = 1500;
        for (int j = 0; j < K; j++) {
            d.x[j][i] = sc[j] * gsl_ran_ugaussian(r);
            v += b[j] * d.x[j][i];
        }
        v += (60 + 20 * fabs(d.x[0][i])) * gsl_ran_ugaussian(r);
        d.y[i] = nearbyint(v);
        if (d.w)
            d.w[i] = (double)(1 + gsl_rng_uniform_int(r, 3));
    }
    gsl_rng_free(r);
    return d;
}

static void release(data *d)
{
    free(d->y);
    free(d->w);
    for (int j = 0; j < K; j++)
        free(d->x[j]);
}

static etacal_qr_result fit(const data *d, double tau, int threads, int preprocess)
{
    etacal_qr_opts o = {0};
    o.threads = threads;
    o.preprocess = preprocess;
    o.seed = 41;
    etacal_qr_result r;
    etacal_error err;
    if (etacal_qr_fit(d->y, (const double *const *)d->x, K, d->w, d->n, tau, NULL, &o, &r, &err) != ETACAL_OK)
        fail_msg("fit failed: %s", err.msg);
    return r;
}

static void same_bits(const etacal_qr_result *a, const etacal_qr_result *b)
{
    assert_int_equal(a->p, b->p);
    assert_memory_equal(a->coef, b->coef, a->p * sizeof(double));
    assert_memory_equal(&a->objective, &b->objective, sizeof(double));
    assert_memory_equal(&a->gap, &b->gap, sizeof(double));
    assert_int_equal(a->iterations, b->iterations);
    assert_int_equal(a->solves, b->solves);
}

/* The contract of etacal_qr_opts.threads: fixed chunks, fixed order of the
 * sums, so 1, 2 and 3 threads give the same bits; and the same seed gives
 * the same subsample on every run. */
static void test_threads_bitwise(void **state)
{
    (void)state;
    data d = make(300000, 20261202, 0);
    etacal_qr_result a = fit(&d, 0.9, 1, 0), b = fit(&d, 0.9, 2, 0), c = fit(&d, 0.9, 3, 0), a2 = fit(&d, 0.9, 1, 0);
    assert_true(a.solves >= 2); /* the preprocessing ran */
    same_bits(&a, &b);
    same_bits(&a, &c);
    same_bits(&a, &a2);
    release(&d);
    /* weighted, and the interior point on all rows (no preprocessing) */
    data e = make(40000, 77, 1);
    etacal_qr_result f1 = fit(&e, 0.25, 1, 2), f2 = fit(&e, 0.25, 2, 2);
    assert_int_equal(f1.solves, 1);
    same_bits(&f1, &f2);
    etacal_qr_result g1 = fit(&e, 0.25, 1, 1), g2 = fit(&e, 0.25, 2, 1);
    same_bits(&g1, &g2);
    release(&e);
}

/* Portnoy & Koenker (1997): the preprocessed fit is the full-data optimum.
 * Both fits stop at a duality gap of at most 1e-6, so their objectives
 * agree to about that (relative 1e-12 here). */
static void test_preprocessed_is_optimal(void **state)
{
    (void)state;
    const double taus[] = {0.1, 0.5, 0.9};
    data d = make(120000, 5, 0);
    for (int t = 0; t < 3; t++) {
        etacal_qr_result full = fit(&d, taus[t], 0, 2), pre = fit(&d, taus[t], 0, 1);
        assert_true(pre.solves >= 2);
        double rel = fabs(pre.objective - full.objective) / full.objective;
        if (!(rel <= 1e-12))
            fail_msg("tau %g: preprocessed %.17g, full %.17g", taus[t], pre.objective, full.objective);
    }
    data e = make(60000, 9, 1);
    etacal_qr_result full = fit(&e, 0.75, 0, 2), pre = fit(&e, 0.75, 0, 1);
    assert_true(fabs(pre.objective - full.objective) <= 1e-12 * full.objective);
    release(&d);
    release(&e);
}

/* A bad value far from the first rows: found in a pass over all rows, and
 * reported with the message of the full checks (the first bad row). */
static void test_bad_values_large(void **state)
{
    (void)state;
    data d = make(100000, 3, 1);
    const char *names[] = {"dist", "prep", "load"};
    etacal_qr_opts o = {0};
    etacal_qr_result r;
    etacal_error err;
    d.y[77777] = NAN;
    d.y[88888] = INFINITY;
    assert_int_equal(etacal_qr_fit(d.y, (const double *const *)d.x, K, d.w, d.n, 0.9, names, &o, &r, &err),
                     ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "response of data row 77778 is not finite"));
    d.y[77777] = 1500;
    d.y[88888] = 1500;
    d.x[1][65432] = -INFINITY;
    assert_int_equal(etacal_qr_fit(d.y, (const double *const *)d.x, K, d.w, d.n, 0.9, names, &o, &r, &err),
                     ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "covariate 'prep' of data row 65433 is not finite"));
    d.x[1][65432] = 0.5;
    d.w[54321] = -2.5;
    assert_int_equal(etacal_qr_fit(d.y, (const double *const *)d.x, K, d.w, d.n, 0.9, names, &o, &r, &err),
                     ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "weight of data row 54322"));
    d.w[54321] = 2;
    /* a covariate constant on all rows, and one that is a copy of another */
    double *keep = d.x[2];
    double *flat = malloc(d.n * sizeof *flat);
    for (size_t i = 0; i < d.n; i++)
        flat[i] = 2.385;
    d.x[2] = flat;
    assert_int_equal(etacal_qr_fit(d.y, (const double *const *)d.x, K, d.w, d.n, 0.9, names, &o, &r, &err),
                     ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "'load' is constant"));
    for (size_t i = 0; i < d.n; i++)
        flat[i] = 3 * d.x[0][i] - 1.25;
    assert_int_equal(etacal_qr_fit(d.y, (const double *const *)d.x, K, d.w, d.n, 0.9, names, &o, &r, &err),
                     ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "collinear"));
    d.x[2] = keep;
    free(flat);
    o.threads = -2;
    assert_int_equal(etacal_qr_fit(d.y, (const double *const *)d.x, K, d.w, d.n, 0.9, names, &o, &r, &err),
                     ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "threads"));
    release(&d);
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_threads_bitwise),
        cmocka_unit_test(test_preprocessed_is_optimal),
        cmocka_unit_test(test_bad_values_large),
    };
    return cmocka_run_group_tests_name("quantreg_large", tests, NULL, NULL);
}
