/* SPDX-License-Identifier: GPL-3.0-or-later */
/* results.c: the public shape of results, one for all: a call returns a new
 * object in *out (NULL after an error) and its _destroy frees it (NULL
 * allowed).  Each wraps the in-place fill of its module (results.h). */
#include "base.h"
#include "results.h"

#include <stdlib.h>

int etacal_backtest_run(const etacal_table *t, size_t actual_col, size_t pred_col, size_t time_col,
                        const size_t *key_cols, size_t nkeys, const etacal_backtest_opts *opts,
                        etacal_backtest_result **out, etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    etacal_backtest_result *res = calloc(1, sizeof *res);
    if (!res)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = backtest_fill(t, actual_col, pred_col, time_col, key_cols, nkeys, opts, res, err);
    if (rc) {
        backtest_release(res);
        free(res);
        return rc;
    }
    *out = res;
    return ETACAL_OK;
}

void etacal_backtest_destroy(etacal_backtest_result *x)
{
    if (!x)
        return;
    backtest_release(x);
    free(x);
}

int etacal_curve_compute(const etacal_quotes *q, const etacal_holdout *h, double conf, etacal_curve **out,
                         etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    etacal_curve *res = calloc(1, sizeof *res);
    if (!res)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = curve_fill(q, h, conf, res, err);
    if (rc) {
        curve_release(res);
        free(res);
        return rc;
    }
    *out = res;
    return ETACAL_OK;
}

void etacal_curve_destroy(etacal_curve *x)
{
    if (!x)
        return;
    curve_release(x);
    free(x);
}

int etacal_quotes_compare(const etacal_quotes *old_q, const etacal_quotes *new_q, double pred,
                          const char *const *x_names, const double *x, size_t nx, etacal_quotes_diff **out,
                          etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    etacal_quotes_diff *res = calloc(1, sizeof *res);
    if (!res)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = quotes_compare_fill(old_q, new_q, pred, x_names, x, nx, res, err);
    if (rc) {
        quotes_diff_release(res);
        free(res);
        return rc;
    }
    *out = res;
    return ETACAL_OK;
}

void etacal_quotes_diff_destroy(etacal_quotes_diff *x)
{
    if (!x)
        return;
    quotes_diff_release(x);
    free(x);
}

int etacal_quotes_holdout(const etacal_quotes *q, const etacal_table *t, size_t actual_col, size_t pred_col,
                          const size_t *key_cols, const size_t *x_cols, const unsigned char *mask,
                          etacal_holdout **out, etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    etacal_holdout *res = calloc(1, sizeof *res);
    if (!res)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = holdout_fill(q, t, actual_col, pred_col, key_cols, x_cols, mask, res, err);
    if (rc) {
        holdout_release(res);
        free(res);
        return rc;
    }
    *out = res;
    return ETACAL_OK;
}

void etacal_holdout_destroy(etacal_holdout *x)
{
    if (!x)
        return;
    holdout_release(x);
    free(x);
}

int etacal_report_hist_residuals(const etacal_table *t, size_t actual_col, size_t pred_col,
                                 const unsigned char *mask, etacal_report_hist **out, etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    etacal_report_hist *res = calloc(1, sizeof *res);
    if (!res)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = report_hist_fill(t, actual_col, pred_col, mask, res, err);
    if (rc) {
        report_hist_release(res);
        free(res);
        return rc;
    }
    *out = res;
    return ETACAL_OK;
}

void etacal_report_hist_destroy(etacal_report_hist *x)
{
    if (!x)
        return;
    report_hist_release(x);
    free(x);
}
