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

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
