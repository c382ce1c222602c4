/* SPDX-License-Identifier: GPL-3.0-or-later */
/* binom.c: Wilson and Clopper-Pearson intervals for a proportion, the two
 * that Newcombe (1998, Statistics in Medicine 17:857-872) recommends and
 * compares (his methods 3 and 5); the lower tails of the binomial and
 * Beta-binomial laws, for the gate of check. */
#include "base.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_sf_gamma.h>
#include <limits.h>
#include <math.h>
#include <stdlib.h>

static int check_args(size_t x, size_t n, double conf, etacal_error *err)
{
    if (n == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a proportion needs n > 0");
    if (x > n)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "%zu successes in %zu trials", x, n);
    if (!(conf > 0 && conf < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "confidence must be in (0,1), got %g", conf);
    return ETACAL_OK;
}

int etacal_binom_wilson(size_t x, size_t n, double conf, double *lo, double *hi, etacal_error *err)
{
    int rc = check_args(x, n, conf, err);
    if (rc)
        return rc;
    double z = gsl_cdf_ugaussian_Pinv(1 - (1 - conf) / 2);
    double nn = (double)n, xx = (double)x, z2 = z * z;
    double centre = (xx + z2 / 2) / (nn + z2);
    double half = z * sqrt(xx * (nn - xx) / nn + z2 / 4) / (nn + z2);
    *lo = x == 0 ? 0 : fmax(0, centre - half);
    *hi = x == n ? 1 : fmin(1, centre + half);
    return ETACAL_OK;
}

/* The p-quantile of Beta(a, b) by bisection on GSL's regularized incomplete
 * beta function (gsl_cdf_beta_P), to the last bit of a double.
 * gsl_cdf_beta_Pinv's Newton steps fail to converge for large a and b
 * (n in the hundred thousands); bisection cannot fail and costs about 60
 * evaluations. */
double beta_quantile(double p, double a, double b)
{
    double lo = 0, hi = 1;
    for (int i = 0; i < 200; i++) {
        double mid = lo + (hi - lo) / 2;
        if (mid <= lo || mid >= hi)
            break;
        if (gsl_cdf_beta_P(mid, a, b) < p)
            lo = mid;
        else
            hi = mid;
    }
    return lo + (hi - lo) / 2;
}

int etacal_binom_exact(size_t x, size_t n, double conf, double *lo, double *hi, etacal_error *err)
{
    int rc = check_args(x, n, conf, err);
    if (rc)
        return rc;
    double a = 1 - conf;
    *lo = x == 0 ? 0 : beta_quantile(a / 2, (double)x, (double)(n - x + 1));
    *hi = x == n ? 1 : beta_quantile(1 - a / 2, (double)(x + 1), (double)(n - x));
    if (!isfinite(*lo) || !isfinite(*hi))
        return etacal_error_set(err, ETACAL_ENUM, NULL, "beta quantile failed for %zu/%zu", x, n);
    return ETACAL_OK;
}

int etacal_binom_ci(int method, size_t x, size_t n, double conf, double *lo, double *hi, etacal_error *err)
{
    if (method == ETACAL_CI_EXACT)
        return etacal_binom_exact(x, n, conf, lo, hi, err);
    if (method == ETACAL_CI_WILSON)
        return etacal_binom_wilson(x, n, conf, lo, hi, err);
    return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown interval method %d", method);
}

/* The smallest k with P(X <= k) >= q for X ~ Bin(n, p), 0 < p < 1, for
 * q = q1 and q = q2.  GSL's binomial distribution function (through its
 * incomplete beta function) returns NaN for n in the millions, so the
 * probabilities are summed here: the pmf at the mode from
 * gsl_sf_lnchoose, the others by the ratio pmf(j+1)/pmf(j) =
 * (n-j)/(j+1) p/(1-p), over the window np +- sqrt(200 n) outside which
 * Hoeffding's inequality leaves a mass below 2 e^-400, and normalised by
 * the window's sum (which removes the rounding of the mode's pmf). */
static int binom_ppf(double p, size_t n, double q1, double q2, size_t *k1, size_t *k2)
{
    double t = ceil(sqrt(200.0 * (double)n)) + 1, np = (double)n * p;
    size_t a = np - t > 0 ? (size_t)floor(np - t) : 0;
    size_t b = np + t < (double)n ? (size_t)ceil(np + t) : n;
    size_t m = (size_t)floor((double)(n + 1) * p);
    m = m < a ? a : m > b ? b : m;
    double *w = malloc((b - a + 1) * sizeof *w);
    if (!w)
        return -1;
    double r = p / (1 - p);
    w[m - a] = exp(gsl_sf_lnchoose((unsigned)n, (unsigned)m) + (double)m * log(p) + (double)(n - m) * log1p(-p));
    for (size_t j = m; j < b; j++)
        w[j + 1 - a] = w[j - a] * ((double)(n - j) / (double)(j + 1)) * r;
    for (size_t j = m; j > a; j--)
        w[j - 1 - a] = w[j - a] * ((double)j / (double)(n - j + 1)) / r;
    ksum tot = {0, 0}, cum = {0, 0};
    for (size_t j = a; j <= b; j++)
        ksum_add(&tot, w[j - a]);
    double total = ksum_value(&tot);
    *k1 = *k2 = b;
    int got1 = 0;
    for (size_t j = a; j <= b; j++) {
        ksum_add(&cum, w[j - a]);
        double c = ksum_value(&cum) / total;
        if (!got1 && c >= q1) {
            *k1 = j;
            got1 = 1;
        }
        if (c >= q2) {
            *k2 = j;
            break;
        }
    }
    free(w);
    return 0;
}

int etacal_binom_range(double p, size_t n, double conf, size_t *lo, size_t *hi, etacal_error *err)
{
    if (n == 0 || n > UINT_MAX)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a binomial range needs 0 < n <= %u, got %zu", UINT_MAX, n);
    if (!(p >= 0 && p <= 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "probability must be in [0,1], got %g", p);
    if (!(conf > 0 && conf < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "confidence must be in (0,1), got %g", conf);
    if (p == 0 || p == 1) {
        *lo = *hi = p == 0 ? 0 : n;
        return ETACAL_OK;
    }
    double a = 1 - conf;
    if (binom_ppf(p, n, a / 2, 1 - a / 2, lo, hi) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return ETACAL_OK;
}

/* The lower tail of a log-concave law on 0..m given by the ratio
 * r(j) = pmf(j+1)/pmf(j), which falls as j grows (binom.h).  kind 0:
 * binomial, par[0] = p/(1-p); kind 1: Beta-binomial, par = {a, b}. */
static double lc_ratio(int kind, const double *par, size_t m, size_t j)
{
    double mj = (double)(m - j), j1 = (double)j + 1;
    if (kind == 0)
        return mj / j1 * par[0];
    /* (m - j)(j + a) / ((j + 1)(m - j - 1 + b)) */
    return mj * ((double)j + par[0]) / (j1 * (mj - 1 + par[1]));
}

#define LC_TINY 1e-300

static double lc_cdf(int kind, const double *par, size_t h, size_t m)
{
    if (h >= m)
        return 1;
    /* the mode: the smallest j with r(j) <= 1 (r(m) taken as 0) */
    size_t lo = 0, hi = m;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (lc_ratio(kind, par, m, mid) <= 1)
            hi = mid;
        else
            lo = mid + 1;
    }
    size_t mode = lo;
    ksum tot = {0, 0}, low = {0, 0};
    ksum_add(&tot, 1);
    if (mode <= h)
        ksum_add(&low, 1);
    double w = 1;
    for (size_t j = mode; j > 0; j--) { /* pmf(j - 1) = pmf(j) / r(j - 1) */
        w /= lc_ratio(kind, par, m, j - 1);
        if (w < LC_TINY)
            break;
        ksum_add(&tot, w);
        if (j - 1 <= h)
            ksum_add(&low, w);
    }
    w = 1;
    for (size_t j = mode; j < m; j++) { /* pmf(j + 1) = pmf(j) r(j) */
        w *= lc_ratio(kind, par, m, j);
        if (w < LC_TINY)
            break;
        ksum_add(&tot, w);
        if (j + 1 <= h)
            ksum_add(&low, w);
    }
    double c = ksum_value(&low) / ksum_value(&tot);
    return c > 1 ? 1 : c;
}

double etacal_binom_cdf(size_t h, size_t m, double p)
{
    if (!(p >= 0 && p <= 1))
        return NAN;
    if (h >= m || p == 0)
        return 1;
    if (p == 1)
        return 0;
    double par[1] = {p / (1 - p)};
    return lc_cdf(0, par, h, m);
}

double etacal_betabinom_cdf(size_t h, size_t m, double a, double b)
{
    if (!(a >= 1 && b >= 1 && isfinite(a) && isfinite(b)))
        return NAN;
    double par[2] = {a, b};
    return lc_cdf(1, par, h, m);
}
