/* SPDX-License-Identifier: GPL-3.0-or-later */
/* predict.c: fitted quantile regressions applied to a stream of rows, with
 * the monotone rearrangement (Chernozhukov, Fernandez-Val & Galichon 2010)
 * at every row: of the curve through the fitted quantiles, piecewise linear
 * in the level (etacal_rearrange).  Covariates are clamped into the range of
 * the data the regression was fitted on (a linear model says nothing beyond
 * it; common practice, no source), and predictions can be floored (a
 * duration is never below 0: raising a quantile to a lower bound of the
 * response's support never increases its pinball loss). */
#include "base.h"
#include "stream.h"
#include "csvio.h"

#include <math.h>
#include <string.h>

#define MAXT ETACAL_APPLY_MAX_TARGETS
_Static_assert(MAXT <= ETACAL_QR_MAX_LEVELS, "every level count can be rearranged");

typedef struct predictor {
    const double *coef, *taus;
    size_t ntau, k, p;
    const char *const *xnames;
    const char *path;
    FILE *out;
    char delim;
    int bad_rows;
    const double *x_min, *x_max;
    double floor;
    etacal_error *err;
    rowbuf rb;
    int header_done;
    size_t nfields;
    long col[ETACAL_QR_MAX_COVARIATES];
    etacal_qr_predict_stats st;
} predictor;

static void on_field(void *ud, size_t col, const char *s, size_t len)
{
    (void)col;
    rowbuf_add(&((predictor *)ud)->rb, s, len);
}

static int fail(predictor *pr, size_t line, int code, const char *fmt, const char *arg)
{
    char where[128];
    format_where(where, sizeof where, pr->path, line);
    etacal_error_set(pr->err, code, where, fmt, arg);
    return 1;
}

static int on_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    predictor *pr = ud;
    rowbuf *b = &pr->rb;
    int stop = 0;
    if (b->oom) {
        stop = fail(pr, line, ETACAL_ENOMEM, "out of memory%s", "");
        goto out;
    }
    if (!pr->header_done) {
        pr->header_done = 1;
        for (size_t j = 0; j < pr->k; j++)
            pr->col[j] = -1;
        for (size_t i = 0; i < b->nf; i++) {
            for (size_t j = 0; j < pr->k; j++)
                if (strcmp(rowbuf_get(b, i), pr->xnames[j]) == 0)
                    pr->col[j] = (long)i;
            if (strncmp(rowbuf_get(b, i), "q_", 2) == 0)
                for (size_t t = 0; t < pr->ntau; t++) {
                    char pct[ETACAL_NUM_BUFSZ];
                    etacal_percent_label(pr->taus[t], pct);
                    if (strcmp(rowbuf_get(b, i) + 2, pct) == 0) {
                        stop = fail(pr, line, ETACAL_EINVAL, "the file already has a column '%s'", rowbuf_get(b, i));
                        goto out;
                    }
                }
        }
        for (size_t j = 0; j < pr->k; j++)
            if (pr->col[j] < 0) {
                stop = fail(pr, line, ETACAL_EINVAL, "no column '%s' in the header (a covariate of the fit)",
                            pr->xnames[j]);
                goto out;
            }
        pr->nfields = b->nf;
        const char *term = csv_put_record(pr->out, raw, rawlen);
        for (size_t t = 0; t < pr->ntau; t++) {
            char pct[ETACAL_NUM_BUFSZ];
            etacal_percent_label(pr->taus[t], pct);
            fprintf(pr->out, "%cq_%s", pr->delim, pct);
        }
        fputs(term, pr->out);
        goto out;
    }
    double x[ETACAL_QR_MAX_COVARIATES];
    int missing = 0;
    char msg[160];
    const char *problem = NULL;
    if (nfields != pr->nfields) {
        snprintf(msg, sizeof msg, "%zu fields, but the header has %zu", nfields, pr->nfields);
        problem = msg;
    }
    for (size_t j = 0; j < pr->k && !problem; j++) {
        size_t c = (size_t)pr->col[j];
        int kk = etacal_num_parse(rowbuf_get(b, c), rowbuf_len(b, c), &x[j]);
        if (kk == ETACAL_NUM_MISSING) {
            missing = 1;
        } else if (kk == ETACAL_NUM_BAD || !isfinite(x[j])) {
            snprintf(msg, sizeof msg, "column '%s' is not a finite number: '%.40s'", pr->xnames[j], rowbuf_get(b, c));
            problem = msg;
        }
    }
    if (problem) {
        if (pr->bad_rows != ETACAL_BAD_ROWS_SKIP) {
            stop = fail(pr, line, ETACAL_EPARSE, "%s", problem);
            goto out;
        }
        pr->st.bad++;
        missing = 1;
    } else if (missing) {
        pr->st.missing++;
    }
    pr->st.rows++;
    double q[MAXT];
    if (!missing) {
        int moved = 0, low = 0;
        for (size_t j = 0; j < pr->k && pr->x_min; j++) {
            if (x[j] < pr->x_min[j]) {
                x[j] = pr->x_min[j];
                moved = 1;
            } else if (x[j] > pr->x_max[j]) {
                x[j] = pr->x_max[j];
                moved = 1;
            }
        }
        for (size_t t = 0; t < pr->ntau; t++) {
            const double *c = pr->coef + t * pr->p;
            double v = c[0];
            for (size_t j = 0; j < pr->k; j++)
                v += c[j + 1] * x[j];
            q[t] = v;
        }
        etacal_error e2;
        if (etacal_rearrange(pr->taus, q, pr->ntau, &e2) != ETACAL_OK) {
            stop = fail(pr, line, e2.code, "%s", e2.msg);
            goto out;
        }
        /* after the rearrangement: raising to a floor keeps the order */
        for (size_t t = 0; t < pr->ntau; t++)
            if (q[t] < pr->floor) {
                q[t] = pr->floor;
                low = 1;
            }
        pr->st.clamped += moved;
        pr->st.floored += low;
    }
    const char *term = csv_put_record(pr->out, raw, rawlen);
    for (size_t t = 0; t < pr->ntau; t++) {
        putc(pr->delim, pr->out);
        if (!missing)
            put_ms(pr->out, nearbyint(q[t] * 1000) / 1000);
    }
    fputs(term, pr->out);
    if (ferror(pr->out))
        stop = fail(pr, line, ETACAL_EIO, "write failed%s", "");
out:
    rowbuf_reset(b);
    return stop;
}

int qr_predict_csv(const double *coef, const double *taus, size_t ntau, size_t k,
                          const char *const *xnames, const char *in_path, FILE *out,
                          const etacal_qr_predict_opts *opts, etacal_qr_predict_stats *stats, etacal_error *err)
{
    if (stats)
        memset(stats, 0, sizeof *stats);
    if (ntau == 0 || ntau > MAXT)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "between 1 and %d levels", MAXT);
    if (k > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d covariates", ETACAL_QR_MAX_COVARIATES);
    for (size_t t = 1; t < ntau; t++)
        if (!(taus[t] > taus[t - 1]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "levels must be given in ascending order");
    if (!opts->x_min != !opts->x_max)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "give both ends of the covariates' ranges, or neither");
    for (size_t j = 0; j < k && opts->x_min; j++)
        if (!(opts->x_min[j] <= opts->x_max[j]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "the range of covariate %zu is empty or not a number",
                                    j + 1);
    if (isnan(opts->floor))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the floor is not a number");
    predictor pr;
    memset(&pr, 0, sizeof pr);
    pr.coef = coef;
    pr.taus = taus;
    pr.ntau = ntau;
    pr.k = k;
    pr.p = k + 1;
    pr.xnames = xnames;
    pr.path = in_path;
    pr.out = out;
    pr.delim = opts->delim ? opts->delim : ',';
    pr.bad_rows = opts->bad_rows;
    pr.x_min = opts->x_min;
    pr.x_max = opts->x_max;
    pr.floor = opts->floor;
    pr.err = err;
    csvstream_cb cb = {on_field, on_row, &pr, NULL, NULL};
    int rc = csvstream_run(in_path, pr.delim, 1, &cb, NULL, err);
    if (!rc && !pr.header_done)
        rc = etacal_error_set(err, ETACAL_EPARSE, in_path, "empty file: expected a header row");
    rowbuf_free(&pr.rb);
    if (stats)
        *stats = pr.st;
    return rc;
}
