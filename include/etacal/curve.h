/* SPDX-License-Identifier: GPL-3.0-or-later */
/* curve.h: the cost curve of on-time targets.  A quote table fitted at
 * every target of a grid on the rows not held out, measured on the held-out
 * rows (etacal_quotes_holdout): per target, the buffer, the mean promise,
 * the mean time added to the bare prediction, the marginal cost of one more
 * point of on-time rate and the rate reached with its Wilson interval,
 * overall and per segment. */
#ifndef ETACAL_CURVE_H
#define ETACAL_CURVE_H

#include <stddef.h>

#include "etacal/error.h"
#include "etacal/fit.h"
#include "etacal/io.h"
#include "etacal/quote.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

typedef struct etacal_curve_point {
    double target;
    /* The score quantile of the row a most specific order of the segment
     * gets (its own, or the nearest coarser level's): seconds (add, qr) or
     * a factor (ratio); +inf when unbounded. */
    double buffer;
    double mean_promise_s; /* over the held-out rows; NaN when there are none */
    double mean_extra_s;   /* mean promise - mean prediction */
    /* (mean promise - that of the previous target) / (100 x the target
     * step): seconds per point of on-time rate; NaN at the first target */
    double marginal_s_per_point;
    size_t n, hits;        /* held-out rows, and those on time */
    double ci_lo, ci_hi;   /* Wilson interval of hits/n; NaN when n = 0 */
} etacal_curve_point;

typedef struct etacal_curve {
    size_t ntargets;
    size_t nsegs;
    size_t *seg;             /* the quote-table segment of each curve segment:
                                0 (overall), then the segments of the most
                                specific level with held-out rows, in table order */
    etacal_curve_point *pts; /* [s * ntargets + t] */
} etacal_curve;

/* The curve of q (fitted at its targets, ascending) measured by h (from
 * etacal_quotes_holdout with the same table), with Wilson intervals at
 * confidence conf in (0,1).  *out is a new object (free with etacal_curve_destroy;
 * NULL after an error). */
int etacal_curve_compute(const etacal_quotes *q, const etacal_holdout *h, double conf, etacal_curve **out,
                         etacal_error *err);
void etacal_curve_destroy(etacal_curve *x);

/* The grid from, from + step, ..., up to to (and below 1) as exact
 * decimals (rounded to 1e-9, so 0.57 is 0.57 and not
 * 0.5700000000000001), at most max values in out; returns how many. */
size_t etacal_curve_grid(double from, double to, double step, double *out, size_t max);

/* Writes the curve cv of a fit run (run made with the specification s at
 * the targets of the grid and a holdout; cv from etacal_curve_compute on
 * its quote table and holdout) to out, in a format:
 *   ETACAL_FORMAT_TEXT  a heading naming path, the method and the held-out
 *                       rows, then per segment an aligned table: target,
 *                       buffer, mean promise and extra time (minutes), the
 *                       marginal cost per point, the on-time rate reached
 *                       and its interval;
 *   ETACAL_FORMAT_CSV   a header, then one line per segment and target:
 *                       the key values, target, buffer, mean_promise_s,
 *                       mean_extra_s, marginal_s_per_point (empty at the
 *                       first target), held_n, held_hits, on_time, ci_low,
 *                       ci_high (numbers %.10g);
 *   ETACAL_FORMAT_JSON  {etacal, file, held_out {rows, of, by}, segments
 *                       [{keys {name: value}, held_n, points [{target,
 *                       buffer, mean_promise_s, mean_extra_s,
 *                       marginal_s_per_point, held_n, held_hits, on_time,
 *                       ci [lo, hi]}]}]}, null for a number that is not
 *                       finite.
 * ETACAL_OK; ETACAL_EINVAL (an unknown format, a run without a holdout);
 * ETACAL_ENOMEM; ETACAL_EIO when the sink refuses bytes. */
int etacal_curve_write(const etacal_curve *cv, const etacal_fit_run *run, const etacal_fitspec *s, const char *path,
                       int format, const etacal_sink *out, etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
