/* SPDX-License-Identifier: GPL-3.0-or-later */
/* metrics.h: scores of quantile and interval forecasts against actuals. */
#ifndef ETACAL_METRICS_H
#define ETACAL_METRICS_H

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* Pinball (quantile) loss of forecast q at level tau for actual y:
 * max(tau (y - q), (tau - 1)(y - q)) (Koenker & Bassett 1978; the loss
 * that scikit-learn's mean_pinball_loss averages). */
double etacal_pinball(double y, double q, double tau);

/* Interval score of the central (1 - alpha) interval [l, u] for actual y
 * (Gneiting & Raftery 2007, sec. 6.2): (u - l) + (2/alpha)(l - y)1{y < l}
 * + (2/alpha)(y - u)1{y > u}.  Lower is better. */
double etacal_interval_score(double y, double l, double u, double alpha);

/* Interval score of [l, u] when l is the quantile at level a (a share a of
 * actuals below it) and u the quantile at level b > a, tails that need not
 * be equal: (u - l) + (l - y)+ / a + (y - u)+ / (1 - b), Gneiting &
 * Raftery's (2007) score of sec. 6.2 generalised to unequal tails; it is
 * pinball(y, l, a) / a + pinball(y, u, b) / (1 - b), a sum of proper scores
 * of the two quantiles, so proper itself.  With a = 1 - b = alpha/2 it is
 * etacal_interval_score.  Check: l = 2, u = 8, a = 0.1, b = 0.95 gives 46
 * at y = 10, 6 at y = 5 and 16 at y = 1. */
double etacal_interval_score_tails(double y, double l, double u, double a, double b);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
