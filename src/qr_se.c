/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_se.c: inference for the quantile regression: the Hall-Sheather
 * bandwidth, t p-values, and standard errors by Powell's kernel sandwich
 * (Koenker 2005, sec. 3.4; as quantreg's summary.rq, se = "ker") or the
 * xy-pair bootstrap. */
#include "qr_internal.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

double etacal_qr_bandwidth_hs(size_t n, double tau)
{
    double z = gsl_cdf_ugaussian_Pinv(0.975);
    double Q = gsl_cdf_ugaussian_Pinv(tau);
    double f = gsl_ran_ugaussian_pdf(Q);
    double h = pow((double)n, -1.0 / 3) * pow(z, 2.0 / 3) * pow(1.5 * f * f / (2 * Q * Q + 1), 1.0 / 3);
    while (tau - h < 0 || tau + h > 1)
        h /= 2;
    return h;
}

double etacal_t_pvalue(double t, double df)
{
    if (!isfinite(t))
        return isnan(t) ? NAN : 0;
    return 2 * gsl_cdf_tdist_Q(fabs(t), df);
}

/* inverse of a p x p SPD matrix through GSL's Cholesky */
static int spd_inverse(double *a, size_t p)
{
    gsl_matrix_view v = gsl_matrix_view_array(a, p, p);
    if (gsl_linalg_cholesky_decomp1(&v.matrix) != GSL_SUCCESS)
        return -1;
    return gsl_linalg_cholesky_invert(&v.matrix) == GSL_SUCCESS ? 0 : -1;
}

int etacal_qr_se(const double *y, const double *const *x, size_t k, size_t n, double tau,
                 const etacal_qr_result *fit, int method, size_t reps, unsigned long seed,
                 const etacal_qr_opts *opts, double *se, double *bandwidth, etacal_error *err)
{
    size_t p = k + 1;
    for (size_t j = 0; j < p; j++)
        se[j] = NAN;
    if (bandwidth)
        *bandwidth = NAN;
    if (method == ETACAL_SE_NONE)
        return ETACAL_OK;
    if (method == ETACAL_SE_POWELL) {
        double *u = malloc(n * sizeof *u), *uc = malloc(n * sizeof *uc);
        if (!u || !uc) {
            free(u);
            free(uc);
            return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        }
        ksum s1 = {0, 0};
        for (size_t i = 0; i < n; i++) {
            double f = fit->coef[0];
            for (size_t j = 0; j < k; j++)
                f += fit->coef[j + 1] * x[j][i];
            u[i] = y[i] - f;
            ksum_add(&s1, u[i]);
        }
        double mean = ksum_value(&s1) / (double)n;
        ksum s2 = {0, 0};
        for (size_t i = 0; i < n; i++)
            ksum_add(&s2, (u[i] - mean) * (u[i] - mean));
        double sd = sqrt(ksum_value(&s2) / (double)(n - 1));
        memcpy(uc, u, n * sizeof *u);
        double iqr = qr_type7(uc, n, 0.75) - qr_type7(uc, n, 0.25);
        free(uc);
        double hs = etacal_qr_bandwidth_hs(n, tau);
        double spread = sd < iqr / 1.34 ? sd : iqr / 1.34;
        double h = (gsl_cdf_ugaussian_Pinv(tau + hs) - gsl_cdf_ugaussian_Pinv(tau - hs)) * spread;
        if (bandwidth)
            *bandwidth = h;
        if (!(h > 0)) {
            free(u);
            return etacal_error_set(err, ETACAL_ENUM, NULL, "kernel bandwidth is zero (residuals without spread)");
        }
        double H[PMAX * PMAX] = {0}, G[PMAX * PMAX] = {0}, row[PMAX];
        for (size_t i = 0; i < n; i++) {
            double f = gsl_ran_ugaussian_pdf(u[i] / h) / h;
            row[0] = 1;
            for (size_t j = 0; j < k; j++)
                row[j + 1] = x[j][i];
            for (size_t a = 0; a < p; a++)
                for (size_t c = 0; c < p; c++) {
                    H[a * p + c] += f * row[a] * row[c];
                    G[a * p + c] += row[a] * row[c];
                }
        }
        free(u);
        if (spd_inverse(H, p) != 0)
            return etacal_error_set(err, ETACAL_ENUM, NULL, "the kernel sandwich is singular");
        /* cov = tau(1-tau) H^-1 G H^-1 */
        double T[PMAX * PMAX] = {0};
        for (size_t a = 0; a < p; a++)
            for (size_t c = 0; c < p; c++)
                for (size_t e = 0; e < p; e++)
                    T[a * p + c] += H[a * p + e] * G[e * p + c];
        for (size_t a = 0; a < p; a++) {
            double v = 0;
            for (size_t e = 0; e < p; e++)
                v += T[a * p + e] * H[e * p + a];
            se[a] = sqrt(tau * (1 - tau) * v);
        }
        return ETACAL_OK;
    }
    if (method != ETACAL_SE_BOOT)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown standard-error method %d", method);
    if (reps < 2)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the bootstrap needs at least 2 replications");
    int rc = ETACAL_OK;
    double *yb = malloc(n * sizeof *yb), *xb = malloc((k ? k : 1) * n * sizeof *xb);
    double *sum = calloc(p, sizeof *sum), *sum2 = calloc(p, sizeof *sum2);
    const double *xcols[ETACAL_QR_MAX_COVARIATES];
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!yb || !xb || !sum || !sum2 || !rng) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto bdone;
    }
    gsl_rng_set(rng, (unsigned long)etacal_seed_stream(seed ? seed : 5489, ETACAL_STREAM_QR_BOOT));
    for (size_t j = 0; j < k; j++)
        xcols[j] = xb + j * n;
    size_t ok = 0;
    for (size_t r = 0; r < reps; r++) {
        for (size_t i = 0; i < n; i++) {
            size_t s = (size_t)gsl_rng_uniform_int(rng, (unsigned long)n);
            yb[i] = y[s];
            for (size_t j = 0; j < k; j++)
                xb[j * n + i] = x[j][s];
        }
        etacal_qr_result rb;
        etacal_error e2;
        if (etacal_qr_fit(yb, xcols, k, NULL, n, tau, NULL, opts, &rb, &e2) != ETACAL_OK)
            continue; /* a degenerate resample (say, a constant covariate) is skipped */
        for (size_t j = 0; j < p; j++) {
            double d = rb.coef[j] - fit->coef[j];
            sum[j] += d;
            sum2[j] += d * d;
        }
        ok++;
    }
    if (ok < 2) {
        rc = etacal_error_set(err, ETACAL_ENUM, NULL, "too few bootstrap fits succeeded");
        goto bdone;
    }
    for (size_t j = 0; j < p; j++) {
        double m = sum[j] / (double)ok;
        se[j] = sqrt((sum2[j] - (double)ok * m * m) / (double)(ok - 1));
    }
bdone:
    free(yb);
    free(xb);
    free(sum);
    free(sum2);
    gsl_rng_free(rng);
    return rc;
}
