/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quantreg.c: linear quantile regression by the Frisch-Newton interior
 * point method with preprocessing (Portnoy & Koenker 1997, "The Gaussian
 * hare and the Laplacian tortoise", Statistical Science 12:279-300), in the
 * steps of quantreg's rqfnb and rq.fit.pfn.
 * This file: the data, centred and scaled and checked, the type-7
 * quantiles, and the fit (etacal_qr_fit), which runs the solver (qr_fn.c)
 * on all rows or through the preprocessing (qr_pre.c) on the threads of
 * qr_pool.c.  Standard errors: qr_se.c; rearrangement: qr_rearrange.c.
 *
 * The LP: min c'x s.t. Ax = b, 0 <= x <= 1, with c = -y, A = X' (p x n) and
 * b = (1 - tau) X'1; the regression coefficients are minus the dual
 * variables of the equality constraints. */
#include "qr_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

long qr_small_cholesky(double *a, size_t p)
{
    for (size_t j = 0; j < p; j++) {
        double diag = a[j * p + j];
        double s = diag;
        for (size_t k = 0; k < j; k++)
            s -= a[j * p + k] * a[j * p + k];
        if (!(s > 1e-10 * (diag > 0 ? diag : 1)))
            return (long)j;
        double r = sqrt(s);
        a[j * p + j] = r;
        for (size_t i = j + 1; i < p; i++) {
            double t = a[i * p + j];
            for (size_t k = 0; k < j; k++)
                t -= a[i * p + k] * a[j * p + k];
            a[i * p + j] = t / r;
        }
    }
    return -1;
}

/* Mean of v[0..n) (center NULL), or mean of (v - c)^2 (center given),
 * summed in blocks of 256 with a compensated sum across blocks. */
static double block_mean(const double *v, size_t n, double c, const double *center)
{
    ksum tot = {0, 0};
    for (size_t i = 0; i < n; i += 256) {
        size_t e = i + 256 < n ? i + 256 : n;
        double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
        size_t j = i;
        if (center) {
            for (; j + 4 <= e; j += 4) {
                double a = v[j] - c, b = v[j + 1] - c, cc = v[j + 2] - c, dd = v[j + 3] - c;
                s0 += a * a;
                s1 += b * b;
                s2 += cc * cc;
                s3 += dd * dd;
            }
            for (; j < e; j++)
                s0 += (v[j] - c) * (v[j] - c);
        } else {
            for (; j + 4 <= e; j += 4) {
                s0 += v[j];
                s1 += v[j + 1];
                s2 += v[j + 2];
                s3 += v[j + 3];
            }
            for (; j < e; j++)
                s0 += v[j];
        }
        ksum_add(&tot, (s0 + s1) + (s2 + s3));
    }
    return ksum_value(&tot) / (double)n;
}

int qr_design_init(design *d, const double *y, const double *const *x, size_t k, const double *w, size_t n,
                       const char *const *names, etacal_error *err)
{
    memset(d, 0, sizeof *d);
    d->y = y;
    d->x = x;
    d->w = w;
    d->n = n;
    d->k = k;
    d->p = k + 1;
    d->mean[0] = 0;
    d->scale[0] = 1;
    d->inv[0] = 1;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(y[i]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "response of data row %zu is not finite", i + 1);
        if (w && !(w[i] >= 0 && isfinite(w[i])))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "weight of data row %zu is not a finite number >= 0",
                                    i + 1);
    }
    for (size_t j = 0; j < k; j++) {
        /* The centre and scale only condition the problem (the answer is
         * mapped back exactly), so plain sums in blocks are accurate enough. */
        double m = block_mean(x[j], n, 0, NULL);
        if (!isfinite(m)) {
            for (size_t i = 0; i < n; i++)
                if (!isfinite(x[j][i]))
                    return etacal_error_set(err, ETACAL_EINVAL, NULL, "covariate '%s' of data row %zu is not finite",
                                            names && names[j] ? names[j] : "?", i + 1);
        }
        double sd = sqrt(block_mean(x[j], n, m, &m));
        if (!(sd > 1e-12 * (fabs(m) > 1 ? fabs(m) : 1)))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "covariate '%s' is constant: it cannot be told apart from the intercept",
                                    names && names[j] ? names[j] : "?");
        d->mean[j + 1] = m;
        d->scale[j + 1] = sd;
        d->inv[j + 1] = 1 / sd;
    }
    /* Collinearity: Cholesky of the scaled X'X (unweighted), first on at
     * most 50,000 evenly spaced rows; exact collinearity shows on any set
     * of rows, and only when those look singular are all rows checked (a
     * rare value may make a subset singular when the whole is not). */
    size_t p = d->p;
    design unw = *d;
    unw.w = NULL;
    long bad = -1;
    for (size_t stride = n > 50000 ? (n + 49999) / 50000 : 1;; stride = 1) {
        double g[PMAX * PMAX] = {0}, row[PMAX];
        for (size_t i = 0; i < n; i += stride) {
            design_row(&unw, i, row);
            for (size_t a = 0; a < p; a++)
                for (size_t b = 0; b <= a; b++)
                    g[a * p + b] += row[a] * row[b];
        }
        for (size_t a = 0; a < p; a++)
            for (size_t b = a + 1; b < p; b++)
                g[a * p + b] = g[b * p + a];
        bad = qr_small_cholesky(g, p);
        if (bad < 0 || stride == 1)
            break;
    }
    if (bad > 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                "covariate '%s' is a linear combination of the intercept and the covariates before it (collinear)",
                                names && names[bad - 1] ? names[bad - 1] : "?");
    return ETACAL_OK;
}

/* ---- quantiles ---------------------------------------------------------- */

double qr_type7(double *v, size_t n, double prob)
{
    /* Hyndman & Fan type 7: h = (n-1)p + 1, linear between x_(j) and x_(j+1) */
    double h = (double)(n - 1) * prob + 1;
    size_t j = (size_t)floor(h);
    if (j < 1)
        j = 1;
    if (j >= n)
        return etacal_select(v, n, n);
    double g = h - (double)j;
    double lo = etacal_select(v, n, j);
    double hi = v[j];
    for (size_t i = j + 1; i < n; i++)
        if (v[i] < hi)
            hi = v[i];
    return lo + g * (hi - lo);
}
void qr_type7_pair(double *v, size_t n, double p1, double p2, double *q1, double *q2)
{
    double h = (double)(n - 1) * p1 + 1;
    size_t j = (size_t)floor(h);
    if (j < 1)
        j = 1;
    *q1 = qr_type7(v, n, p1);
    if (j >= n) {
        *q2 = *q1;
        return;
    }
    /* v[j-1] is x_(j) and v[j..n) hold x_(j+1) .. x_(n) in some order */
    double h2 = (double)(n - 1) * p2 + 1;
    size_t j2 = (size_t)floor(h2);
    if (j2 <= j) {
        *q2 = qr_type7(v, n, p2);
        return;
    }
    size_t off = j - 1;
    double q = (double)(n - 1 - off) > 0 ? (h2 - 1 - (double)off) / (double)(n - 1 - off) : 0;
    *q2 = qr_type7(v + off, n - off, q < 0 ? 0 : q > 1 ? 1 : q);
}

void qr_to_original(const design *d, const double *b, double *coef)
{
    double b0 = b[0];
    for (size_t j = 1; j < d->p; j++) {
        coef[j] = b[j] / d->scale[j];
        b0 -= b[j] * d->mean[j] / d->scale[j];
    }
    coef[0] = b0;
}

/* ---- the fit ------------------------------------------------------------ */

/* All rows, scaled, column-major. */
static int gather_all(const design *d, double **Xo, double **Yo)
{
    size_t n = d->n, p = d->p;
    double *X = malloc(n * p * sizeof *X), *Y = malloc(n * sizeof *Y);
    if (!X || !Y) {
        free(X);
        free(Y);
        return -1;
    }
    double row[PMAX];
    for (size_t i = 0; i < n; i++) {
        Y[i] = design_row(d, i, row);
        for (size_t j = 0; j < p; j++)
            X[j * n + i] = row[j];
    }
    *Xo = X;
    *Yo = Y;
    return 0;
}
int qr_fit_all(const design *d, double tau, double eps, int maxit, fnwork *W, pool *P, etacal_qr_result *out,
                   etacal_error *err)
{
    double *X, *Y, b[PMAX];
    if (gather_all(d, &X, &Y) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int it = 0;
    int rc = qr_fn_solve(X, Y, d->n, d->p, tau, eps, eps, maxit, NULL, W, P, b, &it, &out->gap, err);
    free(X);
    free(Y);
    out->iterations += it;
    out->solves++;
    if (rc)
        return rc;
    qr_to_original(d, b, out->coef);
    size_t bad;
    if (qr_check_pass(d, tau, out->coef, NULL, P, &bad, &out->objective) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return ETACAL_OK;
}

/* Fits below this many rows run on the calling thread alone. */
#define QR_THREADS_MIN 16384

int etacal_qr_fit(const double *y, const double *const *x, size_t k, const double *w, size_t n, double tau,
                  const char *const *names, const etacal_qr_opts *opts, etacal_qr_result *out, etacal_error *err)
{
    static const etacal_qr_opts defaults = {0};
    if (!opts)
        opts = &defaults;
    memset(out, 0, sizeof *out);
    if (!(tau > 0 && tau < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "tau must be in (0,1), got %g", tau);
    if (k > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d covariates", ETACAL_QR_MAX_COVARIATES);
    if (n <= k + 1)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "%zu rows for %zu coefficients: more rows are needed", n,
                                k + 1);
    if (opts->threads < 0 && opts->threads != ETACAL_THREADS_AUTO)
        return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                "threads must be ETACAL_THREADS_AUTO (all CPUs), 0 or more, got %d", opts->threads);
    int pre = opts->preprocess == 1 || (opts->preprocess == 0 && n > 20000);
    design d;
    int rc = ETACAL_OK;
    if (pre) {
        /* checked and scaled on the subsample and in the passes over all
         * rows (qr_fit_pre) */
        memset(&d, 0, sizeof d);
        d.y = y;
        d.x = x;
        d.w = w;
        d.n = n;
        d.k = k;
        d.p = k + 1;
        d.scale[0] = d.inv[0] = 1;
    } else if ((rc = qr_design_init(&d, y, x, k, w, n, names, err)) != 0) {
        return rc;
    }
    double eps = opts->eps > 0 ? opts->eps : 1e-6;
    int maxit = opts->maxit > 0 ? opts->maxit : 500;
    int nth = opts->threads == 0 ? 1 : opts->threads;
    if (nth == ETACAL_THREADS_AUTO) {
        long c = sysconf(_SC_NPROCESSORS_ONLN);
        nth = c > 0 ? (c < QR_MAX_THREADS ? (int)c : QR_MAX_THREADS) : 1;
    }
    pool P;
    qr_pool_start(&P, n >= QR_THREADS_MIN ? nth : 1);
    fnwork W = {0};
    if (pre)
        rc = qr_fit_pre(&d, tau, eps, maxit, opts->seed, &W, &P, names, out, err);
    else
        rc = qr_fit_all(&d, tau, eps, maxit, &W, &P, out, err);
    qr_pool_stop(&P);
    qr_fnwork_free(&W);
    if (rc)
        return rc;
    out->p = d.p;
    out->n = n;
    return ETACAL_OK;
}
