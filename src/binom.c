/* SPDX-License-Identifier: GPL-3.0-or-later */
/* binom.c: Wilson and Clopper-Pearson intervals for a proportion, the two
 * that Newcombe (1998, Statistics in Medicine 17:857-872) recommends and
 * compares (his methods 3 and 5). */
#include "internal.h"

#include <gsl/gsl_cdf.h>
#include <math.h>

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
