/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quantreg.c: linear quantile regression by the Frisch-Newton interior
 * point method with preprocessing (Portnoy & Koenker 1997, "The Gaussian
 * hare and the Laplacian tortoise", Statistical Science 12:279-300), in the
 * steps of quantreg's rqfnb and rq.fit.pfn (see ../shared/METHODS.md), plus
 * standard errors (Powell kernel sandwich, xy bootstrap) and the monotone
 * rearrangement of Chernozhukov, Fernandez-Val & Galichon (2010).
 *
 * The LP: min c'x s.t. Ax = b, 0 <= x <= 1, with c = -y, A = X' (p x n) and
 * b = (1 - tau) X'1; the regression coefficients are minus the dual
 * variables of the equality constraints. */
#include "internal.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PMAX (ETACAL_QR_MAX_COVARIATES + 1)
#define STEP_B 0.99995 /* fraction of the way to the boundary (rqfnb's beta) */

/* ---- the data, centred and scaled ------------------------------------ */

typedef struct design {
    const double *y;
    const double *const *x;
    const double *w;
    size_t n, k, p;
    double mean[PMAX], scale[PMAX], inv[PMAX];
    double *Z, *Zy; /* the scaled rows and responses, when materialised */
} design;

/* Row i of the scaled design (1, (x_ij - m_j)/s_j) and its response, both
 * times the weight: w rho(u) = rho(w u) for w >= 0, so a weighted fit is an
 * unweighted fit of the scaled rows. */
static inline double design_row(const design *d, size_t i, double *row)
{
    double wi = d->w ? d->w[i] : 1;
    row[0] = wi;
    for (size_t j = 0; j < d->k; j++)
        row[j + 1] = wi * (d->x[j][i] - d->mean[j + 1]) * d->inv[j + 1];
    return wi * d->y[i];
}

/* Row i as a pointer: into the materialised rows when there are some,
 * else built in tmp.  *yi gets the (weighted) response. */
static inline const double *zrow(const design *d, size_t i, double *tmp, double *yi)
{
    if (d->Z) {
        *yi = d->Zy[i];
        return d->Z + i * d->p;
    }
    *yi = design_row(d, i, tmp);
    return tmp;
}

/* Cholesky of a small SPD matrix in place (lower triangle), with a relative
 * pivot test: returns the first column whose pivot is not clearly positive
 * (a column that is a combination of the earlier ones), or -1. */
static long small_cholesky(double *a, size_t p)
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

static int design_init(design *d, const double *y, const double *const *x, size_t k, const double *w, size_t n,
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
        bad = small_cholesky(g, p);
        if (bad < 0 || stride == 1)
            break;
    }
    if (bad > 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                "covariate '%s' is a linear combination of the intercept and the covariates before it (collinear)",
                                names && names[bad - 1] ? names[bad - 1] : "?");
    return ETACAL_OK;
}

/* ---- Frisch-Newton on a dense m x p matrix ---------------------------- */

typedef struct fnwork {
    size_t cap;
    double *x, *s, *z, *w, *q, *r, *dx, *ds, *dz, *dw, *c;
} fnwork;

static void fnwork_free(fnwork *f)
{
    double **arr[] = {&f->x, &f->s, &f->z, &f->w, &f->q, &f->r, &f->dx, &f->ds, &f->dz, &f->dw, &f->c};
    for (size_t i = 0; i < sizeof arr / sizeof *arr; i++) {
        free(*arr[i]);
        *arr[i] = NULL;
    }
    f->cap = 0;
}

static int fnwork_reserve(fnwork *f, size_t m)
{
    if (m <= f->cap)
        return 0;
    fnwork_free(f);
    double **arr[] = {&f->x, &f->s, &f->z, &f->w, &f->q, &f->r, &f->dx, &f->ds, &f->dz, &f->dw, &f->c};
    for (size_t i = 0; i < sizeof arr / sizeof *arr; i++)
        if (!(*arr[i] = malloc(m * sizeof(double)))) {
            fnwork_free(f);
            return -1;
        }
    f->cap = m;
    return 0;
}

static double dot_row(const double *xi, const double *v, size_t p)
{
    double s = 0;
    for (size_t j = 0; j < p; j++)
        s += xi[j] * v[j];
    return s;
}

/* Step length: the largest a <= 1 keeping v + a dv > 0, times STEP_B. */
static double step(const double *v, const double *dv, const double *v2, const double *dv2, size_t m)
{
    double a = INFINITY;
    for (size_t i = 0; i < m; i++) {
        if (dv[i] < 0 && -v[i] / dv[i] < a)
            a = -v[i] / dv[i];
        if (dv2[i] < 0 && -v2[i] / dv2[i] < a)
            a = -v2[i] / dv2[i];
    }
    a *= STEP_B;
    return a < 1 ? a : 1;
}

/* M = sum q_i x_i x_i', factored; solves M v = rhs in place. */
typedef struct pfact {
    gsl_matrix *m;
    gsl_vector *v;
} pfact;

static int factor(pfact *f, const double *X, const double *q, size_t m, size_t p)
{
    double a[PMAX * PMAX] = {0};
    for (size_t i = 0; i < m; i++) {
        const double *xi = X + i * p;
        double qi = q[i];
        for (size_t r = 0; r < p; r++) {
            double t = qi * xi[r];
            for (size_t c = 0; c <= r; c++)
                a[r * p + c] += t * xi[c];
        }
    }
    for (size_t r = 0; r < p; r++)
        for (size_t c = 0; c <= r; c++) {
            gsl_matrix_set(f->m, r, c, a[r * p + c]);
            gsl_matrix_set(f->m, c, r, a[r * p + c]);
        }
    return gsl_linalg_cholesky_decomp1(f->m);
}

static int solve(pfact *f, double *v, size_t p)
{
    for (size_t j = 0; j < p; j++)
        gsl_vector_set(f->v, j, v[j]);
    int rc = gsl_linalg_cholesky_svx(f->m, f->v);
    for (size_t j = 0; j < p; j++)
        v[j] = gsl_vector_get(f->v, j);
    return rc;
}

/* Frisch-Newton: rows X (m x p, row-major), responses Y; writes the
 * coefficients (scaled space) to b. */
static int fn_solve(const double *X, const double *Y, size_t m, size_t p, double tau, double eps, int maxit,
                    fnwork *W, double *b, int *iters, double *gap_out, etacal_error *err)
{
    if (fnwork_reserve(W, m) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    pfact F;
    F.m = gsl_matrix_alloc(p, p);
    F.v = gsl_vector_alloc(p);
    if (!F.m || !F.v) {
        gsl_matrix_free(F.m);
        gsl_vector_free(F.v);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    int rc = ETACAL_OK;
    double *x = W->x, *s = W->s, *z = W->z, *w = W->w, *q = W->q, *r = W->r;
    double *dx = W->dx, *ds = W->ds, *dz = W->dz, *dw = W->dw, *c = W->c;
    double bvec[PMAX] = {0}, yd[PMAX], dy[PMAX], rhs[PMAX];
    /* b = (1 - tau) X'1; c = -y; x = (1 - tau) 1; s = tau 1 */
    for (size_t i = 0; i < m; i++) {
        for (size_t j = 0; j < p; j++)
            bvec[j] += (1 - tau) * X[i * p + j];
        c[i] = -Y[i];
        x[i] = 1 - tau;
        s[i] = tau;
        q[i] = 1;
    }
    /* y_d from (AA') y_d = A c */
    if (factor(&F, X, q, m, p) != GSL_SUCCESS) {
        rc = etacal_error_set(err, ETACAL_ENUM, NULL, "the design matrix is singular");
        goto done;
    }
    for (size_t j = 0; j < p; j++)
        yd[j] = 0;
    for (size_t i = 0; i < m; i++)
        for (size_t j = 0; j < p; j++)
            yd[j] += X[i * p + j] * c[i];
    solve(&F, yd, p);
    for (size_t i = 0; i < m; i++) {
        double ri = c[i] - dot_row(X + i * p, yd, p);
        if (fabs(ri) < eps) {
            z[i] = (ri > 0 ? ri : 0) + eps;
            w[i] = (-ri > 0 ? -ri : 0) + eps;
        } else {
            z[i] = ri > 0 ? ri : 0;
            w[i] = -ri > 0 ? -ri : 0;
        }
    }
    double gap = 0;
    for (size_t i = 0; i < m; i++)
        gap += x[i] * z[i] + s[i] * w[i];
    int it = 0;
    while (gap > eps && it < maxit) {
        it++;
        for (size_t i = 0; i < m; i++) {
            q[i] = 1 / (z[i] / x[i] + w[i] / s[i]);
            r[i] = z[i] - w[i];
        }
        /* rhs = b - A x + A (q r) */
        for (size_t j = 0; j < p; j++)
            rhs[j] = bvec[j];
        for (size_t i = 0; i < m; i++)
            for (size_t j = 0; j < p; j++)
                rhs[j] += X[i * p + j] * (q[i] * r[i] - x[i]);
        if (factor(&F, X, q, m, p) != GSL_SUCCESS) {
            rc = etacal_error_set(err, ETACAL_ENUM, NULL, "Newton step failed (matrix not positive definite)");
            goto done;
        }
        memcpy(dy, rhs, p * sizeof *dy);
        solve(&F, dy, p);
        for (size_t i = 0; i < m; i++) {
            dx[i] = q[i] * (dot_row(X + i * p, dy, p) - r[i]);
            ds[i] = -dx[i];
            dz[i] = -z[i] * (1 + dx[i] / x[i]);
            dw[i] = -w[i] * (1 + ds[i] / s[i]);
        }
        double aP = step(x, dx, s, ds, m);
        double aD = step(z, dz, w, dw, m);
        if (aP < 1 || aD < 1) {
            /* Mehrotra corrector with the same factorisation */
            double mu = 0, g = 0;
            for (size_t i = 0; i < m; i++) {
                mu += x[i] * z[i] + s[i] * w[i];
                g += (x[i] + aP * dx[i]) * (z[i] + aD * dz[i]) + (s[i] + aP * ds[i]) * (w[i] + aD * dw[i]);
            }
            mu = mu * pow(g / mu, 3) / (2 * (double)m);
            double at[PMAX] = {0};
            for (size_t i = 0; i < m; i++) {
                /* t_i, kept in r (r is not needed again this iteration) */
                double ti = q[i] * (mu * (1 / s[i] - 1 / x[i]) + dx[i] * dz[i] / x[i] - ds[i] * dw[i] / s[i]);
                r[i] = ti;
                for (size_t j = 0; j < p; j++)
                    at[j] += X[i * p + j] * ti;
            }
            for (size_t j = 0; j < p; j++)
                dy[j] = rhs[j] + at[j];
            solve(&F, dy, p);
            for (size_t i = 0; i < m; i++) {
                double dxa = dx[i], dza = dz[i], dsa = ds[i], dwa = dw[i];
                double dxn = q[i] * (dot_row(X + i * p, dy, p) - z[i] + w[i]) - r[i];
                double dsn = -dxn;
                dz[i] = -z[i] + (mu - z[i] * dxn - dxa * dza) / x[i];
                dw[i] = -w[i] + (mu - w[i] * dsn - dsa * dwa) / s[i];
                dx[i] = dxn;
                ds[i] = dsn;
            }
            aP = step(x, dx, s, ds, m);
            aD = step(z, dz, w, dw, m);
        }
        for (size_t i = 0; i < m; i++) {
            x[i] += aP * dx[i];
            s[i] += aP * ds[i];
            z[i] += aD * dz[i];
            w[i] += aD * dw[i];
        }
        for (size_t j = 0; j < p; j++)
            yd[j] += aD * dy[j];
        gap = 0;
        for (size_t i = 0; i < m; i++)
            gap += x[i] * z[i] + s[i] * w[i];
    }
    for (size_t j = 0; j < p; j++)
        b[j] = -yd[j];
    *iters = it;
    *gap_out = gap;
    if (gap > eps)
        rc = etacal_error_set(err, ETACAL_ENUM, NULL,
                              "the interior-point method did not converge in %d iterations (gap %g)", maxit, gap);
done:
    gsl_matrix_free(F.m);
    gsl_vector_free(F.v);
    return rc;
}

/* ---- the fit, with preprocessing -------------------------------------- */

static double type7(double *v, size_t n, double prob)
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

/* Two type-7 quantiles at p1 <= p2: the second selection runs only on the
 * part of the array that the first left above its rank. */
static void type7_pair(double *v, size_t n, double p1, double p2, double *q1, double *q2)
{
    double h = (double)(n - 1) * p1 + 1;
    size_t j = (size_t)floor(h);
    if (j < 1)
        j = 1;
    *q1 = type7(v, n, p1);
    if (j >= n) {
        *q2 = *q1;
        return;
    }
    /* v[j-1] is x_(j) and v[j..n) hold x_(j+1) .. x_(n) in some order */
    double h2 = (double)(n - 1) * p2 + 1;
    size_t j2 = (size_t)floor(h2);
    if (j2 <= j) {
        *q2 = type7(v, n, p2);
        return;
    }
    size_t off = j - 1;
    double q = (double)(n - 1 - off) > 0 ? (h2 - 1 - (double)off) / (double)(n - 1 - off) : 0;
    *q2 = type7(v + off, n - off, q < 0 ? 0 : q > 1 ? 1 : q);
}

/* Builds the dense scaled matrix of the rows with flag 0 (or all rows when
 * flags is NULL), plus glob rows for flag 1 (below) and flag 2 (above). */
static int gather(const design *d, const unsigned char *flags, double **Xo, double **Yo, size_t *mo)
{
    size_t p = d->p, m = 0;
    int glob[3] = {0, 0, 0};
    for (size_t i = 0; i < d->n; i++) {
        unsigned f = flags ? flags[i] : 0;
        if (f == 0)
            m++;
        else
            glob[f] = 1;
    }
    size_t total = m + (size_t)glob[1] + (size_t)glob[2];
    double *X = malloc((total ? total : 1) * p * sizeof *X), *Y = malloc((total ? total : 1) * sizeof *Y);
    if (!X || !Y) {
        free(X);
        free(Y);
        return -1;
    }
    double gx[3][PMAX] = {{0}}, gy[3] = {0, 0, 0};
    size_t w = 0;
    double row[PMAX];
    for (size_t i = 0; i < d->n; i++) {
        double yi;
        const double *rw = zrow(d, i, row, &yi);
        unsigned f = flags ? flags[i] : 0;
        if (f == 0) {
            memcpy(X + w * p, rw, p * sizeof *rw);
            Y[w++] = yi;
        } else {
            for (size_t j = 0; j < p; j++)
                gx[f][j] += rw[j];
            gy[f] += yi;
        }
    }
    for (int f = 1; f <= 2; f++)
        if (glob[f]) {
            memcpy(X + w * p, gx[f], p * sizeof(double));
            Y[w++] = gy[f];
        }
    *Xo = X;
    *Yo = Y;
    *mo = w;
    return 0;
}

static int fit_full(const design *d, double tau, double eps, int maxit, fnwork *W, double *b, int *it, double *gap,
                    etacal_error *err)
{
    double *X, *Y;
    size_t m;
    if (gather(d, NULL, &X, &Y, &m) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = fn_solve(X, Y, m, d->p, tau, eps, maxit, W, b, it, gap, err);
    free(X);
    free(Y);
    return rc;
}

/* Portnoy & Koenker's preprocessing (quantreg's rq.fit.pfn): fit a random
 * subsample, keep the rows whose residuals may lie on either side of the
 * fit, and replace the others by two glob rows; verify the signs on all
 * rows and repair, or start again with a larger subsample. */
static int fit_preprocessed(design *d, double tau, double eps, int maxit, unsigned long seed, fnwork *W,
                            double *b, int *it_total, double *gap, int *solves, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t n = d->n, p = d->p;
    double *Zmem = NULL, *Zy = NULL;
    double *ratio = malloc(n * sizeof *ratio), *sel = malloc(n * sizeof *sel);
    unsigned char *flags = malloc(n);
    unsigned char *insub = malloc(n);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    double *X = NULL, *Y = NULL;
    if (!ratio || !sel || !flags || !insub || !rng) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    gsl_rng_set(rng, seed ? seed : 5489);
    /* The scaled rows once, contiguous: every pass below reads them. */
    Zmem = malloc(n * p * sizeof *Zmem);
    Zy = malloc(n * sizeof *Zy);
    if (Zmem && Zy) {
        for (size_t i = 0; i < n; i++)
            Zy[i] = design_row(d, i, Zmem + i * p);
        d->Z = Zmem;
        d->Zy = Zy;
    } else {
        free(Zmem);
        free(Zy);
        Zmem = Zy = NULL; /* fall back to building rows on the fly */
    }
    double mm = round(sqrt((double)p) * pow((double)n, 2.0 / 3.0));
    size_t m = (size_t)mm;
    *it_total = 0;
    *solves = 0;
    for (int round_ = 0; round_ < 20; round_++) {
        if (m >= n) {
            int it;
            rc = fit_full(d, tau, eps, maxit, W, b, &it, gap, err);
            *it_total += it;
            (*solves)++;
            goto done;
        }
        /* selection sampling (Knuth, TAOCP 3.4.2, Algorithm S): m rows of n */
        size_t need = m;
        for (size_t i = 0; i < n; i++) {
            insub[i] = gsl_rng_uniform(rng) * (double)(n - i) < (double)need;
            need -= insub[i];
            flags[i] = insub[i] ? 0 : 3;
        }
        /* fit the subsample: gather rows with flag 0 (flag 3 rows are skipped) */
        size_t ms = 0;
        free(X);
        free(Y);
        X = malloc(m * p * sizeof *X);
        Y = malloc(m * sizeof *Y);
        if (!X || !Y) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        double row[PMAX];
        for (size_t i = 0; i < n; i++)
            if (insub[i]) {
                const double *rw = zrow(d, i, row, &Y[ms]);
                memcpy(X + ms * p, rw, p * sizeof *rw);
                ms++;
            }
        int it;
        double bs[PMAX];
        if ((rc = fn_solve(X, Y, ms, p, tau, eps, maxit, W, bs, &it, gap, err)) != 0)
            goto done;
        *it_total += it;
        (*solves)++;
        /* band_i = sqrt(x_i' (Xs'Xs)^-1 x_i) through the Cholesky factor */
        double g[PMAX * PMAX] = {0};
        for (size_t i = 0; i < ms; i++)
            for (size_t a = 0; a < p; a++)
                for (size_t c = 0; c <= a; c++)
                    g[a * p + c] += X[i * p + a] * X[i * p + c];
        for (size_t a = 0; a < p; a++)
            for (size_t c = a + 1; c < p; c++)
                g[a * p + c] = g[c * p + a];
        if (small_cholesky(g, p) >= 0) {
            rc = etacal_error_set(err, ETACAL_ENUM, NULL, "the subsample's design is singular");
            goto done;
        }
        /* Linv = L^-1 (lower triangular), so that band_i = |Linv x_i| takes
         * multiplications only */
        double Linv[PMAX * PMAX] = {0};
        for (size_t c = 0; c < p; c++) {
            Linv[c * p + c] = 1 / g[c * p + c];
            for (size_t a = c + 1; a < p; a++) {
                double t = 0;
                for (size_t e = c; e < a; e++)
                    t -= g[a * p + e] * Linv[e * p + c];
                Linv[a * p + c] = t / g[a * p + a];
            }
        }
        for (size_t i = 0; i < n; i++) {
            double yi, band = 0;
            const double *rw = zrow(d, i, row, &yi);
            for (size_t a = 0; a < p; a++) {
                const double *la = Linv + a * p;
                double t = 0;
                for (size_t c = 0; c <= a; c++)
                    t += la[c] * rw[c];
                band += t * t;
            }
            band = sqrt(band);
            double ri = yi - dot_row(rw, bs, p);
            ratio[i] = ri / (band > eps ? band : eps);
        }
        memcpy(sel, ratio, n * sizeof *sel);
        double M = 0.8 * (double)m;
        double loq = tau - M / (2 * (double)n), hiq = tau + M / (2 * (double)n);
        if (loq < 1.0 / (double)n)
            loq = 1.0 / (double)n;
        if (hiq > (double)(n - 1) / (double)n)
            hiq = (double)(n - 1) / (double)n;
        double klo, khi;
        type7_pair(sel, n, loq, hiq, &klo, &khi);
        /* below, above, or near the fit: residual over band against the
         * two quantiles (quantreg compares r with band * kappa) */
        for (size_t i = 0; i < n; i++)
            flags[i] = ratio[i] < klo ? 1 : ratio[i] > khi ? 2 : 0;
        int grow = 0;
        for (int fix = 0; fix < 3; fix++) {
            double *Xr, *Yr;
            size_t mr;
            if (gather(d, flags, &Xr, &Yr, &mr) != 0) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                goto done;
            }
            rc = fn_solve(Xr, Yr, mr, p, tau, eps, maxit, W, b, &it, gap, err);
            free(Xr);
            free(Yr);
            if (rc)
                goto done;
            *it_total += it;
            (*solves)++;
            size_t bad = 0;
            for (size_t i = 0; i < n; i++) {
                if (!flags[i])
                    continue;
                double yi;
                const double *rw = zrow(d, i, row, &yi);
                double ri = yi - dot_row(rw, b, p);
                if ((flags[i] == 2 && ri < 0) || (flags[i] == 1 && ri > 0))
                    bad++;
            }
            if (bad == 0)
                goto done; /* the globbed rows are on their sides: optimal for all rows */
            if ((double)bad > 0.1 * M) {
                grow = 1;
                break;
            }
            for (size_t i = 0; i < n; i++) {
                if (!flags[i])
                    continue;
                double yi;
                const double *rw = zrow(d, i, row, &yi);
                double ri = yi - dot_row(rw, b, p);
                if ((flags[i] == 2 && ri < 0) || (flags[i] == 1 && ri > 0))
                    flags[i] = 0;
            }
        }
        if (grow)
            m *= 2;
    }
    rc = etacal_error_set(err, ETACAL_ENUM, NULL, "preprocessing did not settle after 20 subsamples");
done:
    if (Zmem) {
        d->Z = d->Zy = NULL;
        free(Zmem);
        free(Zy);
    }
    free(X);
    free(Y);
    free(ratio);
    free(sel);
    free(flags);
    free(insub);
    gsl_rng_free(rng);
    return rc;
}

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
    design d;
    int rc = design_init(&d, y, x, k, w, n, names, err);
    if (rc)
        return rc;
    double eps = opts->eps > 0 ? opts->eps : 1e-6;
    int maxit = opts->maxit > 0 ? opts->maxit : 500;
    int pre = opts->preprocess == 1 || (opts->preprocess == 0 && n > 20000);
    fnwork W = {0};
    double b[PMAX];
    int it = 0, solves = 1;
    double gap = 0;
    if (pre)
        rc = fit_preprocessed(&d, tau, eps, maxit, opts->seed, &W, b, &it, &gap, &solves, err);
    else
        rc = fit_full(&d, tau, eps, maxit, &W, b, &it, &gap, err);
    fnwork_free(&W);
    if (rc)
        return rc;
    /* back to the original units */
    size_t p = d.p;
    double b0 = b[0];
    for (size_t j = 1; j < p; j++) {
        out->coef[j] = b[j] / d.scale[j];
        b0 -= b[j] * d.mean[j] / d.scale[j];
    }
    out->coef[0] = b0;
    out->p = p;
    out->n = n;
    out->iterations = it;
    out->gap = gap;
    out->solves = solves;
    ksum obj = {0, 0};
    for (size_t i0 = 0; i0 < n; i0 += 256) {
        size_t e = i0 + 256 < n ? i0 + 256 : n;
        double blk = 0;
        for (size_t i = i0; i < e; i++) {
            double fit = out->coef[0];
            for (size_t j = 0; j < k; j++)
                fit += out->coef[j + 1] * x[j][i];
            double u = y[i] - fit, wi = w ? w[i] : 1;
            blk += wi * (u >= 0 ? tau * u : (tau - 1) * u);
        }
        ksum_add(&obj, blk);
    }
    out->objective = ksum_value(&obj);
    return ETACAL_OK;
}

/* ---- inference --------------------------------------------------------- */

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

static int cmp_d(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

void etacal_rearrange(double *q, size_t m) { qsort(q, m, sizeof *q, cmp_d); }

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
        double iqr = type7(uc, n, 0.75) - type7(uc, n, 0.25);
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
    gsl_rng_set(rng, seed ? seed : 5489);
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
