/* SPDX-License-Identifier: GPL-3.0-or-later */
/* backtest.h: would the nightly job have kept its promise?  Rolling origin
 * over time: at each step, a quote table fitted on the preceding window,
 * applied to the next period's orders. */
#ifndef ETACAL_BACKTEST_H
#define ETACAL_BACKTEST_H

#include <stddef.h>

#include "etacal/error.h"
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
    double window_s;      /* calibration window before each period */
    double every_s;       /* period length */
    size_t min_rows;      /* as for the fit (0: 200) */
    double half_life_s;   /* > 0: recency weights within each window */
    double gamma;         /* > 0: adaptive conformal inference (Gibbs &
                             Candes 2021): after each period the working
                             level moves by gamma (target - observed rate) */
    double confidence;    /* as for the fit (not with half_life_s) */
    const size_t *x_cols; /* method qr: covariates, split share and seed */
    size_t nx;
    double split;
    unsigned long seed;
} etacal_backtest_opts;

typedef struct etacal_backtest_period {
    double start, end;    /* [start, end), seconds since the epoch */
    size_t calib;         /* rows in the window before start */
    size_t n, hits;       /* orders of the period, on time with the promise */
    double level;         /* working level used (the target without --adapt) */
    double mean_buffer;   /* mean promise - mean prediction (s); NaN if none */
    int skipped;          /* 1: too few rows to fit a table (no promise) */
} etacal_backtest_period;

typedef struct etacal_backtest_result {
    size_t nperiods;
    etacal_backtest_period *periods;
    size_t n, hits;       /* over every period with a promise */
    double mean_buffer;
} etacal_backtest_result;

/* Rolls over the rows of t by the time column: the first period starts
 * one window after the earliest row.  key_cols as for the fit.  A period
 * whose window has too few rows for a finite global bound is skipped. */
int etacal_backtest_run(const etacal_table *t, size_t actual_col, size_t pred_col, size_t time_col,
                        const size_t *key_cols, size_t nkeys, const etacal_backtest_opts *opts,
                        etacal_backtest_result *out, etacal_error *err);
void etacal_backtest_free(etacal_backtest_result *r);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
