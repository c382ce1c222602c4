/* SPDX-License-Identifier: GPL-3.0-or-later */
/* backtest.h: would the nightly job have kept its promise?  Rolling origin
 * over time: at each step, a quote table fitted on the orders of the
 * preceding window that were delivered by the step (no look-ahead), applied
 * to the next period's orders. */
#ifndef ETACAL_BACKTEST_H
#define ETACAL_BACKTEST_H

#include <stddef.h>

#include "etacal/error.h"
#include "etacal/io.h"
#include "etacal/quote.h"
#include "etacal/table.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

typedef struct etacal_backtest_opts {
    int method;           /* ETACAL_METHOD_ADD, _RATIO or _QR */
    double target;        /* the on-time target in (0,1) */
    double window_s;      /* calibration window before each period: rows
                             placed in [start - window_s, start) and
                             delivered by start (time + actual <= start) */
    double every_s;       /* period length */
    size_t min_rows;      /* as for the fit (0: 200) */
    double half_life_s;   /* > 0: recency weights within each window, ages
                             counted from its newest row as etacal fit does */
    double gamma;         /* > 0: adaptive conformal inference (Gibbs &
                             Candes 2021): after each period with orders the
                             working level moves by gamma (target - observed
                             rate), whatever the period's promise was */
    double confidence;    /* as for the fit (not with half_life_s) */
    const size_t *x_cols; /* method qr: covariates, split share and seed */
    size_t nx;
    double split;
    unsigned long seed;
} etacal_backtest_opts;

/* The promise a period's orders got (Gibbs & Candes 2021, sec. 2: the
 * prediction set is everything when alpha_t <= 0 and empty when
 * alpha_t >= 1; the conformal rank k > n gives everything too). */
enum {
    ETACAL_BT_FINITE = 0,    /* a fitted table */
    ETACAL_BT_UNBOUNDED = 1, /* +infinity: every order on time.  The working
                                level is >= 1, or no finite bound can be
                                fitted at it from the window (k > n, which
                                includes n = 0; recency weights too light;
                                method qr: too few rows for the regression) */
    ETACAL_BT_NONE = 2       /* working level <= 0: no promise, every
                                order late */
};

typedef struct etacal_backtest_period {
    double start, end;    /* [start, end), seconds since the epoch */
    size_t calib;         /* calibration rows: placed in the window before
                             start and delivered by start */
    size_t n, hits;       /* orders of the period, on time with the promise */
    double level;         /* working level used (the target without --adapt) */
    double mean_buffer;   /* mean promise - mean prediction (s); NaN unless
                             the promise is finite and n > 0 */
    int promise;          /* ETACAL_BT_* */
} etacal_backtest_period;

typedef struct etacal_backtest_result {
    size_t nperiods;
    etacal_backtest_period *periods;
    size_t n, hits;       /* over every period: every order is scored */
    double mean_buffer;   /* over the orders with a finite promise (NaN if
                             none) */
    size_t finite_periods, finite_n;       /* periods (with orders) and */
    size_t unbounded_periods, unbounded_n; /* orders by promise */
    size_t none_periods, none_n;
} etacal_backtest_result;

/* Rolls over the rows of t by the time column (placement times; the actual
 * column is the duration in seconds): the first period starts one window
 * after the earliest row.  Each period's table is calibrated only on rows
 * delivered by its start, as the nightly job would have seen them.
 * key_cols as for the fit.  Every period with orders is scored: see
 * ETACAL_BT_* for the unbounded and empty promises.  A fit failure other
 * than too few rows (say a bad option) fails the whole run. */
/* *out is a new object (free with etacal_backtest_destroy; NULL after an
 * error). */
int etacal_backtest_run(const etacal_table *t, size_t actual_col, size_t pred_col, size_t time_col,
                        const size_t *key_cols, size_t nkeys, const etacal_backtest_opts *opts,
                        etacal_backtest_result **out, etacal_error *err);
void etacal_backtest_destroy(etacal_backtest_result *x);

/* Writes a backtest's result to out in format ETACAL_FORMAT_TEXT, _CSV or
 * _JSON (io.h), as etacal backtest prints it.  opts are the options of the
 * run (target, method, window, period, recency weights, adaptive level:
 * the heading); source names the data file (NULL: empty).  Each on-time
 * rate h/n gets a 95% Wilson score interval (etacal_binom_wilson); times
 * are ISO 8601 in UTC (etacal_time_format).
 *
 * Text: the heading and the calibration rule, one line per period (start,
 * calibration rows, orders, on-time rate with hits/n, interval, mean
 * buffer in minutes or "unbounded"/"none", working level), then the
 * overall rate and the count of periods and orders by promise.
 *
 * CSV: period_start, period_end, calib, n, hits, on_time, ci_low, ci_high,
 * mean_buffer_s, level, promise ("finite", "unbounded", "none"; empty for
 * a period without orders); reals to 10 significant digits, empty for
 * none.
 *
 * JSON: {"etacal": version, "file", "target", "window_s", "every_s",
 * "calibration": the rule in words, "periods": [{"start", "end", "calib",
 * "n", "hits", "on_time", "ci": [lo, hi], "mean_buffer_s", "level",
 * "promise"}], "overall": {"n", "hits", "on_time", "ci", "mean_buffer_s"},
 * "promises": {"finite" | "unbounded" | "none": {"periods", "n"}}}; reals
 * to 10 significant digits, null for none (a period without orders).
 *
 * Errors: ETACAL_EINVAL (no result or options, an unknown format, a sink
 * without a write function), ETACAL_ENOMEM, ETACAL_EIO when the sink
 * refuses bytes (it may then have received part of the output). */
int etacal_backtest_write(const etacal_backtest_result *r, const etacal_backtest_opts *opts, const char *source,
                          int format, const etacal_sink *out, etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
