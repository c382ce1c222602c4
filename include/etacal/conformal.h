/* SPDX-License-Identifier: GPL-3.0-or-later */
/* conformal.h: order statistics and the split-conformal rank rule.
 *
 * One-sided split conformal (Vovk et al. 2005; Lei et al. 2018): with n
 * calibration scores s_1..s_n exchangeable with a new score s, and
 * k = ceil((n+1) tau), P(s <= s_(k)) >= tau, where s_(k) is the k-th smallest
 * score.  When k > n the bound is +infinity (no finite promise is valid). */
#ifndef ETACAL_CONFORMAL_H
#define ETACAL_CONFORMAL_H

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

/* k = ceil(m * tau) computed exactly for tau as its shortest decimal form
 * (0.3 is 3/10), so k never comes out one too high through rounding: for
 * n = 9 and alpha = 0.7, a plain ceil((n+1)*(1-alpha)) in double is 4, the
 * exact rank 3.  tau must be in [0,1]. */
size_t etacal_ceil_mul(size_t m, double tau);

/* The conformal rank ceil((n+1) tau).  May exceed n. */
size_t etacal_conformal_rank(size_t n, double tau);

/* Smallest n for which the rank at tau is at most n: n >= tau/(1-tau). */
size_t etacal_conformal_min_n(double tau);

/* Rearranges x[0..n) so that x[k-1] holds the k-th smallest value (1 <= k <=
 * n), smaller or equal values before it and larger or equal after, and
 * returns it.  O(n) expected (three-way quickselect, with a sort fallback
 * that bounds the worst case at O(n log n)).  x must hold no NaN. */
double etacal_select(double *x, size_t n, size_t k);

/* The type-1 sample quantile of Hyndman & Fan (1996), the inverse of the
 * empirical CDF: x_(j) with j = max(1, ceil(n p)).  Selects in place (x is
 * reordered).  p in [0,1], n >= 1, x without NaN. */
double etacal_quantile_type1(double *x, size_t n, double p);

/* The one-sided split-conformal upper bound of the scores x[0..n) at level
 * tau: the k-th smallest with k = ceil((n+1) tau), or +inf when k > n (also
 * for n = 0).  Reorders x.  Stores k in *k_out when not NULL. */
double etacal_conformal_upper(double *x, size_t n, double tau, size_t *k_out);

/* The rank with confidence (Vovk 2012, "Conditional validity of inductive
 * conformal predictors"; Angelopoulos & Bates 2021): given the calibration
 * set, the coverage of s_(k) is Beta(k, n+1-k) distributed, so the smallest
 * k with P(Bin(n, tau) >= k) <= 1 - conf makes P(coverage >= tau) >= conf
 * over calibration draws.  Returns n + 1 when no k <= n qualifies (then
 * tau^n > 1 - conf).  conf in (0,1). */
size_t etacal_conformal_rank_conf(size_t n, double tau, double conf);

/* The coverage law of s_(k) among n scores, Beta(k, n+1-k): its mean
 * k/(n+1), and its (1-conf)-quantile, the coverage reached with
 * probability conf (computed by bisection on GSL's beta distribution). */
double etacal_coverage_mean(size_t n, size_t k);
double etacal_coverage_low(size_t n, size_t k, double conf);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
