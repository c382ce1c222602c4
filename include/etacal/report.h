/* SPDX-License-Identifier: GPL-3.0-or-later */
/* report.h: one self-contained HTML page that shows a quote table and the
 * evidence behind it (inline SVG charts from svg.h, tables, inline CSS; no
 * script, nothing fetched).  The page draws numbers computed by the other
 * modules (quote, holdout, curve, backtest, binom); it computes no
 * statistic of its own.  Same input, same bytes; its size grows with the
 * number of segments, targets and periods, never with the number of rows. */
#ifndef ETACAL_REPORT_H
#define ETACAL_REPORT_H

#include <stddef.h>

#include "etacal/backtest.h"
#include "etacal/curve.h"
#include "etacal/error.h"
#include "etacal/io.h"
#include "etacal/fit.h"
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

/* Counts of actual - prediction in bins of a nice width (1, 2 or 5 times a
 * power of ten, in minutes) between the type-1 quantiles at 0.5% and 99.5%
 * of the rows counted; rows outside the bins are counted in below/above. */
typedef struct etacal_report_hist {
    size_t nbins;
    double *edges;   /* nbins + 1 edges, seconds */
    size_t *counts;  /* [edges[i], edges[i+1]) */
    size_t n, below, above;
} etacal_report_hist;

/* The histogram of actual - pred over the rows of t with mask[i] != 0 (NULL:
 * every row).  *out is a new object (free with etacal_report_hist_destroy; NULL after an error).  Errors: no
 * row, out of memory. */
int etacal_report_hist_residuals(const etacal_table *t, size_t actual_col, size_t pred_col,
                                 const unsigned char *mask, etacal_report_hist **out, etacal_error *err);
void etacal_report_hist_destroy(etacal_report_hist *x);

/* What the page shows, all borrowed. */
typedef struct etacal_report {
    const char *title;       /* NULL: "Promise report" */
    const char *command;     /* the command line that made the page, shown as is */
    const char *source;      /* the input's name */
    const char *actual_name, *pred_name;
    const char *time_name;   /* NULL without a time column */
    const etacal_read_stats *stats;
    double time_min, time_max; /* seconds since the epoch (NaN without a time column) */
    /* The quote table fitted on the rows not held out, at every target of
     * the page (the cost-curve grid, the calibration levels, the chosen
     * target); its held-out counts and the curve computed from them. */
    const etacal_quotes *q;
    size_t target;           /* index of the chosen target in q->targets */
    const etacal_holdout *ho;
    const etacal_curve *curve;
    size_t held, fitted;     /* rows held out and fitted on */
    const char *held_how;    /* how they were chosen, as a phrase */
    const etacal_report_hist *hist; /* residuals of the rows fitted on */
    const etacal_backtest_result *bt; /* NULL: no backtest section */
    const char *bt_note;     /* with bt NULL and a time column: why there is none */
    double bt_window_s, bt_every_s;
    size_t thin;             /* a segment with fewer held-out rows is marked thin */
    double curve_from;       /* the cost curve shows the targets >= this */
    const char *note;        /* a warning shown under the headline, or NULL */
    double half_life_s;      /* > 0: the fit used recency weights with this half-life */
} etacal_report;

/* Writes the page to out.  Errors: a target index out of range, counts that
 * do not belong to q, a chart that cannot be laid out. */
int etacal_report_write(const etacal_report *r, const etacal_sink *out, etacal_error *err);

/* ---- the whole report as one run ------------------------------------------
 * What `etacal report` does, for any front end: the fit run (fit.h) with
 * the rows held out, at the chosen target and at every level of the cost
 * curve (0.50, 0.51, ..., 0.99) and of the calibration chart (0.05, 0.10,
 * ..., 0.45) that the rows fitted on can bound; the residuals of the rows
 * fitted on, the held-out counts and the cost curve; with a time column the
 * rolling-origin backtest; then the page. */
typedef struct etacal_report_spec {
    /* The fit: one target (none: 0.9), a holdout share (init: 0.2; the
     * latest rows by the time column when there is one, else a seeded
     * random share), no confidence. */
    etacal_fitspec fit;
    const char *title;       /* NULL: "Promise report" */
    const char *command;     /* shown as is under "How this page was made"; may be NULL */
    double window_s, every_s; /* the backtest's window and period (init: 28 d, 1 d) */
    size_t thin;             /* a segment with fewer held-out rows is marked thin (init: 30) */
    double curve_from;       /* the cost curve shows the targets >= this (init: 0.5) */
} etacal_report_spec;

/* A specification with the defaults above and etacal_fitspec_init's. */
void etacal_report_spec_init(etacal_report_spec *s);

/* What a run has to say besides the page, in the order it happened:
 * "the levels of the cost curve and the calibration chart could not be
 * fitted (WHY); the page shows the chosen target only" when a level of the
 * grid cannot be fitted (the page is then made with the chosen target
 * alone), and "no backtest: WHY" when the rows span less than a window
 * (the page says so in place of the backtest).  Filled also when the run
 * fails after a note. */
#define ETACAL_REPORT_MAX_NOTES 2
#define ETACAL_REPORT_NOTE_SZ 512
typedef struct etacal_report_notes {
    size_t n;
    char text[ETACAL_REPORT_MAX_NOTES][ETACAL_REPORT_NOTE_SZ];
} etacal_report_notes;

/* Reads in (a CSV file with a header, read with ro; NULL: defaults), runs
 * the report and writes the page to out (an etacal_outfile's sink makes a
 * file that appears whole or not at all).  The page is written only once
 * everything on it is computed, so after an error before that nothing has
 * reached out.  notes may be NULL.  Errors: the specification
 * (ETACAL_EINVAL), the input (with FILE:LINE), a fit that fails at the
 * chosen target (ETACAL_ENUM), the sink (ETACAL_EIO). */
int etacal_report_csv(const etacal_report_spec *s, const char *in, const etacal_read_opts *ro,
                      const etacal_sink *out, etacal_report_notes *notes, etacal_error *err);

/* The same on a table in memory (its columns found by name, as for
 * etacal_fit_table; t is borrowed).  The page names the table's source. */
int etacal_report_table(const etacal_report_spec *s, const etacal_table *t, const etacal_sink *out,
                        etacal_report_notes *notes, etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
