/* SPDX-License-Identifier: GPL-3.0-or-later */
/* conformal.c: the finite-sample rank rule of split conformal prediction
 * and the type-1 sample quantile it is an instance of.
 *
 * The conformal bound is the ceil((n+1) tau)-th smallest score (Vovk et al.
 * 2005; Lei et al. 2018), which is Hyndman & Fan's (1996) type 1 quantile at
 * level tau of the scores together with one score at +infinity. */
#include "base.h"

#include <gsl/gsl_cdf.h>
#include <math.h>

size_t etacal_ceil_mul(size_t m, double tau)
{
    uint64_t k;
    exact_ceil_mul((uint64_t)m, tau, &k);
    return k > SIZE_MAX ? SIZE_MAX : (size_t)k;
}

size_t etacal_conformal_rank(size_t n, double tau) { return etacal_ceil_mul(n + 1, tau); }

size_t etacal_conformal_min_n(double tau)
{
    if (!(tau < 1))
        return SIZE_MAX;
    /* Smallest n with ceil((n+1) tau) <= n; start near tau/(1-tau) and step,
     * using the exact rank itself so the answer agrees with it. */
    double guess = tau / (1 - tau);
    size_t n = guess > 2 ? (size_t)guess - 2 : 0;
    while (etacal_conformal_rank(n, tau) > n)
        n++;
    return n;
}

double etacal_quantile_type1(double *x, size_t n, double p)
{
    size_t j = etacal_ceil_mul(n, p);
    if (j < 1)
        j = 1;
    if (j > n)
        j = n;
    return etacal_select(x, n, j);
}

double etacal_conformal_upper(double *x, size_t n, double tau, size_t *k_out)
{
    size_t k = etacal_conformal_rank(n, tau);
    if (k < 1)
        k = 1;
    if (k_out)
        *k_out = k;
    if (k > n)
        return INFINITY;
    return etacal_select(x, n, k);
}

size_t etacal_conformal_rank_conf(size_t n, double tau, double conf)
{
    double delta = 1 - conf;
    /* P(Bin(n, tau) >= k) = gsl_cdf_binomial_Q(k - 1, tau, n), decreasing
     * in k: the smallest k with it <= delta, by bisection on [1, n]. */
    if (n == 0 || gsl_cdf_binomial_Q((unsigned)(n - 1), tau, (unsigned)n) > delta)
        return n + 1;
    size_t lo = 1, hi = n; /* hi qualifies */
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (gsl_cdf_binomial_Q((unsigned)(mid - 1), tau, (unsigned)n) <= delta)
            hi = mid;
        else
            lo = mid + 1;
    }
    /* never below the average-case rank */
    size_t k0 = etacal_conformal_rank(n, tau);
    return lo > k0 ? lo : k0;
}

double etacal_coverage_mean(size_t n, size_t k) { return (double)k / (double)(n + 1); }

double etacal_coverage_low(size_t n, size_t k, double conf)
{
    if (k == 0 || k > n)
        return k > n ? 1 : 0;
    return beta_quantile(1 - conf, (double)k, (double)(n + 1 - k));
}
