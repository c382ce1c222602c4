/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_levels.c: quantile regression at several levels as one run (what
 * etacal qr does): each level's fit (etacal_qr_fit) with its standard
 * errors (etacal_qr_se), the covariates' range and the response's sign in
 * the data, and the predictions of all the levels over a stream of new
 * rows, clamped into that range and floored at 0 for a response that is
 * never negative (qr_predict_csv). */
#include "base.h"
#include "stream.h"

#include <math.h>
#include <string.h>

int etacal_qr_fit_levels(const double *y, const double *const *x, size_t k, size_t n, const double *taus,
                         size_t ntau, const char *const *names, int se_method, size_t reps,
                         const etacal_qr_opts *opts, etacal_qr_fits *out, etacal_error *err)
{
    memset(out, 0, sizeof *out);
    if (k == 0 || k > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "between 1 and %d covariates, not %zu",
                                ETACAL_QR_MAX_COVARIATES, k);
    if (ntau == 0 || ntau > ETACAL_QR_MAX_LEVELS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "between 1 and %d levels, not %zu", ETACAL_QR_MAX_LEVELS,
                                ntau);
    for (size_t i = 0; i < ntau; i++)
        if (!(taus[i] > 0 && taus[i] < 1) || (i > 0 && !(taus[i] > taus[i - 1])))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "levels must be ascending and in (0,1)");
    if (se_method != ETACAL_SE_NONE && se_method != ETACAL_SE_POWELL && se_method != ETACAL_SE_BOOT)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown standard error method %d", se_method);
    if (n == 0)
        return etacal_error_set(err, ETACAL_ENUM, NULL, "no data rows");
    etacal_qr_opts qo = {0};
    if (opts)
        qo = *opts;
    out->ntau = ntau;
    out->k = k;
    out->se_method = se_method;
    out->reps = reps;
    memcpy(out->taus, taus, ntau * sizeof *taus);
    for (size_t ti = 0; ti < ntau; ti++) {
        int rc = etacal_qr_fit(y, x, k, NULL, n, taus[ti], names, &qo, &out->res[ti], err);
        if (rc == 0)
            rc = etacal_qr_se(y, x, k, n, taus[ti], &out->res[ti], se_method, reps, qo.seed, &qo, out->se[ti],
                              &out->bandwidth[ti], err);
        if (rc)
            return rc;
    }
    /* the covariates' range in the data of the fit, and whether the
     * response (a duration, say) is never negative there */
    for (size_t j = 0; j < k; j++) {
        out->x_min[j] = out->x_max[j] = x[j][0];
        for (size_t i = 1; i < n; i++) {
            if (x[j][i] < out->x_min[j])
                out->x_min[j] = x[j][i];
            if (x[j][i] > out->x_max[j])
                out->x_max[j] = x[j][i];
        }
    }
    out->y_nonneg = 1;
    for (size_t i = 0; i < n && out->y_nonneg; i++)
        out->y_nonneg = y[i] >= 0;
    return ETACAL_OK;
}

int qr_fits_predict_csv(const etacal_qr_fits *f, const char *const *xnames, const char *in_path, FILE *out,
                               char delim, int bad_rows, etacal_qr_predict_stats *stats, etacal_error *err)
{
    if (!f || f->ntau == 0 || f->ntau > ETACAL_QR_MAX_LEVELS || f->k > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no fits to predict with");
    double coef[ETACAL_QR_MAX_LEVELS * (ETACAL_QR_MAX_COVARIATES + 1)];
    for (size_t ti = 0; ti < f->ntau; ti++)
        memcpy(coef + ti * (f->k + 1), f->res[ti].coef, (f->k + 1) * sizeof *coef);
    etacal_qr_predict_opts po = {delim, bad_rows, f->x_min, f->x_max, f->y_nonneg ? 0 : -INFINITY};
    return qr_predict_csv(coef, f->taus, f->ntau, f->k, xnames, in_path, out, &po, stats, err);
}
