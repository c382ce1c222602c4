/* SPDX-License-Identifier: GPL-3.0-or-later */
/* binom.h: confidence intervals for a binomial proportion (an on-time rate
 * or a coverage x/n), and the binomial and Beta-binomial laws of a count of
 * hits. */
#ifndef ETACAL_BINOM_H
#define ETACAL_BINOM_H

#include <stddef.h>

#include "etacal/error.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

enum { ETACAL_CI_WILSON = 0, ETACAL_CI_EXACT = 1 };

/* Wilson (1927) score interval for x successes in n trials at confidence
 * conf in (0,1): centre (x + z^2/2)/(n + z^2), half-width
 * z sqrt(x(n-x)/n + z^2/4)/(n + z^2), z = Phi^-1(1 - (1-conf)/2).
 * Errors: n = 0, x > n, conf outside (0,1). */
int etacal_binom_wilson(size_t x, size_t n, double conf, double *lo, double *hi, etacal_error *err);

/* Clopper-Pearson (1934) exact interval: [B^-1(a/2; x, n-x+1),
 * B^-1(1-a/2; x+1, n-x)] with a = 1 - conf, 0 at x = 0 and 1 at x = n;
 * the beta quantiles by bisection on GSL's beta distribution function. */
int etacal_binom_exact(size_t x, size_t n, double conf, double *lo, double *hi, etacal_error *err);

/* Either of the above by method (ETACAL_CI_WILSON or ETACAL_CI_EXACT). */
int etacal_binom_ci(int method, size_t x, size_t n, double conf, double *lo, double *hi, etacal_error *err);

/* The central range of a binomial count: for n trials with success
 * probability p in [0,1], *lo is the smallest k with P(X <= k) >= a/2 and
 * *hi the smallest k with P(X <= k) >= 1 - a/2, a = 1 - conf (the
 * definition of scipy.stats.binom.ppf).  A rate outside [lo/n, hi/n] on n
 * rows is unlikely (at most about a) when the true rate is p: the band
 * around the diagonal of a calibration chart.  Errors: n = 0, n above
 * UINT_MAX, p outside [0,1], conf outside (0,1). */
int etacal_binom_range(double p, size_t n, double conf, size_t *lo, size_t *hi, etacal_error *err);

/* Lower tails of two laws of a count of hits, for one-sided tests.
 *
 * etacal_binom_cdf: P(X <= h) for X ~ Binomial(m, p), p in [0,1].
 * etacal_betabinom_cdf: P(H <= h) for H ~ Beta-binomial(m, a, b), a >= 1,
 * b >= 1: the hits of m fresh orders on a bound whose coverage is
 * C ~ Beta(a, b), given C binomial (for a split-conformal bound of rank k
 * among n calibration scores, a = k and b = n + 1 - k; Vovk 2012).
 * pmf(j) = C(m, j) B(j + a, m - j + b) / B(a, b).
 *
 * Both laws are log-concave (the Beta-binomial because a, b >= 1), so the
 * pmf is summed outward from its mode, found by bisection on the ratio
 * pmf(j+1)/pmf(j), with the mode's term set to 1 and every other one by
 * that ratio; the sum of the terms at or below h over the sum of all is
 * the answer (no gamma function, so no cancellation of large log-gammas).
 * Terms below 1e-300 of the mode's are dropped.  Accuracy: each ratio
 * costs a few roundings, so the relative error is at most about
 * 4 d 2^-53 for a tail d steps from the mode (below 1e-10 for m up to
 * 10^6), and the absolute error is below 1e-290 (m + 1); checked against
 * scipy.stats.betabinom and scipy.stats.binom in tests/ref.  Time O(m) at
 * most.  h >= m gives 1; NaN for p outside [0,1], a or b below 1 or not
 * finite. */
double etacal_binom_cdf(size_t h, size_t m, double p);
double etacal_betabinom_cdf(size_t h, size_t m, double a, double b);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
