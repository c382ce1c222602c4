/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quantreg.h: linear quantile regression.
 *
 * Minimises sum_i w_i rho_tau(y_i - b0 - sum_j b_j x_ij), rho_tau(u) =
 * u (tau - 1[u < 0]) (Koenker & Bassett 1978), exactly, as a linear program
 * solved by the primal-dual interior-point (Frisch-Newton) method of
 * Portnoy & Koenker (1997), with their preprocessing for large n.  Every
 * Newton step is a p x p Cholesky solve (GSL).  Covariates are centred and
 * scaled inside; coefficients are reported in the original units. */
#ifndef ETACAL_QUANTREG_H
#define ETACAL_QUANTREG_H

#include <stddef.h>

#include "etacal/error.h"
#include "etacal/io.h"
#include "etacal/table.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

typedef struct etacal_qr_opts {
    double eps;          /* duality-gap tolerance (absolute); 0 means 1e-6 */
    int maxit;           /* Newton iterations per solve; 0 means 500 */
    int preprocess;      /* 0: auto (on for n > 20000), 1: on, 2: off */
    unsigned long seed;  /* of the preprocessing subsamples */
    /* Threads for the passes over the rows: 0 (default) or 1 the calling
     * thread only, ETACAL_THREADS_AUTO one per online CPU (at most 8), n at
     * most n.  Fits of fewer
     * than 16,384 rows always run on the calling thread, and a fit whose
     * helper threads are held up (the CPUs busy with other work) goes on
     * with the calling thread alone.  The rows are cut into chunks of a
     * fixed size and the chunks' sums added in a fixed order, so the answer
     * is the same bit for bit whatever the number.  Other negative values:
     * an error. */
    int threads;
} etacal_qr_opts;

typedef struct etacal_qr_result {
    size_t p;             /* 1 + number of covariates */
    double coef[17];      /* intercept, then one per covariate (original units) */
    double objective;     /* sum w_i rho_tau(residual_i) at coef */
    int iterations;       /* Newton iterations, all solves summed */
    double gap;           /* duality gap of the last solve */
    int solves;           /* interior-point solves (1 without preprocessing) */
    size_t n;
} etacal_qr_result;

#define ETACAL_QR_MAX_COVARIATES 16

/* Fits the tau-quantile regression of y[0..n) on an intercept and the k
 * covariate columns x[0..k)[0..n) (k <= ETACAL_QR_MAX_COVARIATES), with
 * optional non-negative weights w (NULL for none).  names[j] names covariate
 * j in messages (may be NULL).  Errors: tau outside (0,1), n <= k, non-finite
 * data or a negative weight, a constant covariate or one that is a linear
 * combination of others (the message names it), no convergence, a negative
 * opts->threads.  With preprocessing (large n) the data are checked on a
 * subsample and in the passes over all rows; a bad value anywhere gives the
 * same message as without. */
int etacal_qr_fit(const double *y, const double *const *x, size_t k, const double *w, size_t n, double tau,
                  const char *const *names, const etacal_qr_opts *opts, etacal_qr_result *out,
                  etacal_error *err);

/* Standard errors of the coefficients.  ETACAL_SE_POWELL: Powell's kernel
 * sandwich tau(1-tau) H^-1 (X'X) H^-1, H = sum f_i x_i x_i', f_i =
 * phi(u_i/h)/h, h = (Phi^-1(tau+hs) - Phi^-1(tau-hs)) min(sd(u), IQR(u)/1.34)
 * with the Hall-Sheather (1988) bandwidth hs at alpha = 0.05 (Koenker 2005,
 * sec. 3.4; as quantreg's summary.rq, se = "ker").  ETACAL_SE_BOOT: the
 * standard deviation of the estimates over reps xy-pair bootstrap samples
 * drawn with the seed.  Unweighted fits only.  se[0..p). */
enum { ETACAL_SE_NONE = 0, ETACAL_SE_POWELL = 1, ETACAL_SE_BOOT = 2 };

int etacal_qr_se(const double *y, const double *const *x, size_t k, size_t n, double tau,
                 const etacal_qr_result *fit, int method, size_t reps, unsigned long seed,
                 const etacal_qr_opts *opts, double *se, double *bandwidth, etacal_error *err);

/* The Hall-Sheather bandwidth for n and tau, alpha = 0.05, halved while
 * tau +- h leaves (0,1). */
double etacal_qr_bandwidth_hs(size_t n, double tau);

/* Two-sided p-value of t with df degrees of freedom (GSL's t law). */
double etacal_t_pvalue(double t, double df);

/* Monotone rearrangement (Chernozhukov, Fernandez-Val & Galichon 2010) of
 * predicted quantiles q[0..m) at the strictly ascending levels tau[0..m),
 * m <= ETACAL_QR_MAX_LEVELS, in place.  The curve tau -> q is taken as
 * piecewise linear between the levels; the rearranged curve is the
 * quantile function of q(U), U uniform on [tau[0], tau[m-1]], computed
 * exactly (G(y) = |{u : q(u) <= y}| is piecewise linear) and read off at
 * the levels.  So q[0] becomes the smallest value, q[m-1] the largest, a
 * non-decreasing q is left as it is bit for bit, and the result never
 * decreases.  This is not the sort of the values unless m <= 2 or they
 * are monotone: at levels 0.1, 0.2, 0.9 the values 30, 10, 20 become 10,
 * 11.33, 30 (the curve spends 0.7 of the range between 10 and 20).
 * Errors: a non-finite value (ETACAL_ENUM), levels not ascending or too
 * many (ETACAL_EINVAL); q is then unchanged. */
#define ETACAL_QR_MAX_LEVELS 32
int etacal_rearrange(const double *tau, double *q, size_t m, etacal_error *err);

/* Options of etacal_qr_predict. */
typedef struct etacal_qr_predict_opts {
    char delim;            /* 0 means ',' */
    int bad_rows;          /* ETACAL_BAD_ROWS_ERROR or _SKIP */
    /* Each covariate j is clamped into [x_min[j], x_max[j]] (k values each,
     * say its range in the data of the fit) before the formula, as a linear
     * model says nothing beyond its data; NULL: no clamping. */
    const double *x_min, *x_max;
    /* Predictions below it are raised to it (0 for a response that cannot
     * be negative, such as a duration); -INFINITY: none. */
    double floor;
} etacal_qr_predict_opts;

typedef struct etacal_qr_predict_stats {
    size_t rows;     /* data rows written */
    size_t missing;  /* rows with a missing covariate: empty predictions */
    size_t bad;      /* malformed rows skipped (ETACAL_BAD_ROWS_SKIP) */
    size_t clamped;  /* rows with a covariate outside [x_min, x_max] */
    size_t floored;  /* rows with a prediction raised to opts->floor */
} etacal_qr_predict_stats;

/* Fits at several levels as one run, as etacal qr does. */
typedef struct etacal_qr_fits {
    size_t ntau;                          /* levels, ascending */
    size_t k;                             /* covariates */
    double taus[ETACAL_QR_MAX_LEVELS];
    etacal_qr_result res[ETACAL_QR_MAX_LEVELS];
    /* standard errors of res[t].coef[0..k] (NaN with ETACAL_SE_NONE) and
     * the Powell kernel bandwidth (NaN for the other methods) */
    double se[ETACAL_QR_MAX_LEVELS][ETACAL_QR_MAX_COVARIATES + 1];
    double bandwidth[ETACAL_QR_MAX_LEVELS];
    int se_method;                        /* ETACAL_SE_* */
    size_t reps;                          /* bootstrap replications */
    double x_min[ETACAL_QR_MAX_COVARIATES]; /* each covariate's range in the data */
    double x_max[ETACAL_QR_MAX_COVARIATES];
    int y_nonneg;                         /* the response is never negative in the data */
} etacal_qr_fits;

/* Fits y on the k covariates (1 <= k <= ETACAL_QR_MAX_COVARIATES) at each
 * of the ntau strictly ascending levels taus (at most
 * ETACAL_QR_MAX_LEVELS) with etacal_qr_fit (unweighted), and each fit's
 * standard errors by se_method with etacal_qr_se (reps replications and
 * opts->seed for the bootstrap); records the covariates' range and the
 * response's sign.  opts may be NULL (defaults).  *out is filled whole
 * (nothing to free).  Errors: those of etacal_qr_fit and etacal_qr_se,
 * ETACAL_ENUM for n = 0, ETACAL_EINVAL for levels or k out of bounds or an
 * unknown se_method. */
int etacal_qr_fit_levels(const double *y, const double *const *x, size_t k, size_t n, const double *taus,
                         size_t ntau, const char *const *names, int se_method, size_t reps,
                         const etacal_qr_opts *opts, etacal_qr_fits *out, etacal_error *err);

/* Streams the rows of in_path (a CSV file with the k covariate columns,
 * found by name) to out, each record copied byte for byte with
 * q_<pct> columns appended (q_10, q_50, q_97.5): the fitted quantiles
 * coef[t*p + 0] + sum_j coef[t*p + 1 + j] x_j (p = k + 1, x_j clamped into
 * [opts->x_min[j], opts->x_max[j]] when given), rearranged at each row so
 * that they do not cross (etacal_rearrange), raised to opts->floor, to the
 * nearest millisecond.  A row with a missing covariate gets empty
 * predictions (counted); a malformed one is an error at FILE:LINE, or with
 * bad_rows ETACAL_BAD_ROWS_SKIP written with empty predictions and counted.
 * stats may be NULL.  Memory does not grow with the number of rows; after
 * an error the sink has had part of the stream. */
int etacal_qr_predict(const double *coef, const double *taus, size_t ntau, size_t k, const char *const *xnames,
                      const char *in_path, const etacal_sink *out, const etacal_qr_predict_opts *opts,
                      etacal_qr_predict_stats *stats, etacal_error *err);

/* etacal_qr_predict with every level of f: each covariate clamped into its
 * range in the data of the fit, and predictions floored at 0 when the
 * response was never negative there (f->y_nonneg).  ETACAL_EINVAL for an
 * empty f. */
int etacal_qr_fits_predict(const etacal_qr_fits *f, const char *const *xnames, const char *in_path,
                           const etacal_sink *out, char delim, int bad_rows, etacal_qr_predict_stats *stats,
                           etacal_error *err);

/* What etacal_qr_write needs beside the fits. */
typedef struct etacal_qr_write_opts {
    const char *source;            /* the data file's name ("etacal qr: FILE"; "file") */
    const char *y_name;            /* the response's column */
    const char *const *x_names;    /* the k covariates' columns */
    const etacal_read_stats *rows; /* rows read, used, left out, malformed (NULL: all 0) */
} etacal_qr_write_opts;

/* Writes the fits to out in format ETACAL_FORMAT_TEXT, _CSV or _JSON
 * (io.h), as etacal qr prints them.  Each coefficient gets its t statistic
 * (estimate / standard error) and two-sided p-value with n - p degrees of
 * freedom (etacal_t_pvalue); none without a standard error.
 *
 * Text: file, rows, model ("y ~ 1 + x"), the standard errors' method; per
 * level its n, objective, iterations, duality gap (and Powell bandwidth)
 * and a table of term, estimate (8 digits), std.error (6), t (3 decimals),
 * p-value (3 digits, "< 1e-16" below that); "-" for none.
 *
 * CSV: tau, term, estimate, std_error, t, p_value, n, objective,
 * iterations, gap: one record per level and term; estimate and objective
 * to 12 significant digits, std_error and t to 10, p_value to 6, gap to 3.
 *
 * JSON: {"etacal": version, "file", "rows": {"read", "used", "missing",
 * "malformed"}, "y", "x": [names], "se": "powell"|"boot"|"none", "reps"
 * (null but for the bootstrap), "fits": [{"tau", "n", "objective",
 * "iterations", "gap" (3 significant digits), "bandwidth", "terms":
 * [{"term", "estimate", "std_error", "t", "p_value"}]}]}; reals to 12
 * significant digits, null for none.
 *
 * Errors: ETACAL_EINVAL (no fits or names, an unknown format, a sink
 * without a write function), ETACAL_ENOMEM, ETACAL_EIO when the sink
 * refuses bytes (it may then have received part of the output). */
int etacal_qr_write(const etacal_qr_fits *f, const etacal_qr_write_opts *opts, int format, const etacal_sink *out,
                    etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
