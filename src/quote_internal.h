/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_internal.h: what the quote-table fitter, reader and fit run share (layer 4).
 * Not installed. */
#ifndef ETACAL_QUOTE_INTERNAL_H
#define ETACAL_QUOTE_INTERNAL_H

#include "base.h"

/* One segment of a fitted or read table.  keys[j] is the value of key column
 * j, or "*" where the segment's level leaves key j open: --by zone,band gives
 * the levels (zone, band), (zone, *) and (*, *), the global segment.  A
 * segment without a row of its own for a target uses the nearest level
 * above it that has one.
 *
 * Pooled thin cells (fit): the row of a coarser segment, such as (zone, *),
 * is calibrated on its pooled cell, the rows of the segments below it that
 * have no row of their own for that target (the parent's rows minus those
 * of qualified children), so that coverage holds given "a thin segment of
 * this parent" (Mondrian conformal, Vovk et al. 2005).  A full key
 * combination's pooled cell is its own rows.  A cell qualifies with
 * pool_n >= min_rows and a finite bound; otherwise its rows go up into the
 * parent's pooled cell.  The global segment takes the rows left over; when
 * they are none or give no finite bound, its row is calibrated on all rows
 * (ETACAL_CELL_ALL). */
typedef struct etacal_segment {
    char **keys;
    size_t n;          /* calibration rows (fit), or the table's n (read) */
    size_t bare_hits;  /* rows with actual <= pred (fit only) */
    /* Per target (ntargets entries): */
    size_t *k;         /* conformal rank */
    double *score_q;   /* the k-th smallest score: seconds (add) or a factor
                          (ratio); +inf when k > n */
    int *status;       /* ETACAL_OWN_ROW or a fallback reason */
    size_t level;      /* keys it fixes: nkeys for a full combination, 0 global */
    size_t parent;     /* the segment one level up (fit only; 0 = global) */
    size_t *pool_n;    /* per target: rows of its pooled cell (fit); k, score_q
                          and status describe that cell (for the global row
                          with ETACAL_CELL_ALL: all rows) */
} etacal_segment;

/* One row of the quote table. */
typedef struct etacal_quote {
    size_t seg;    /* index into segs */
    size_t target; /* index into targets */
    int method;
    size_t n, k;   /* calibration rows behind the bound, and the rank used */
    double offset_s, slope;
    double *coef;  /* ncoef coefficients of the extra covariates (method qr) */
    /* Method qr: the range of each covariate on the rows the row's regression
     * was fitted on (ncoef each); an order's covariates are clamped into
     * [x_min[j], x_max[j]] before the formula.  NULL: a table without
     * ranges (written before they were stored): no clamping. */
    double *x_min, *x_max;
    int cell;      /* ETACAL_CELL_*: what the n rows are */
} etacal_quote;

/* A quote table.  Read-only for callers; built by etacal_quotes_fit or
 * etacal_quotes_read_csv and freed by etacal_quotes_destroy.  segs[0] is the
 * global segment.  A fitted table has the other segments of every level
 * sorted by their key texts (bytewise, "*" included); a table read from a
 * file keeps the file's order. */
struct etacal_quotes {
    size_t nkeys;
    char **key_names;
    int method;
    size_t ntargets;
    double *targets; /* ascending, distinct */
    size_t nsegs;
    etacal_segment *segs;
    size_t nrows;
    etacal_quote *rows; /* by segment, then target */
    size_t ncoef;       /* extra covariates (method qr): columns coef_<name> */
    char **coef_names;  /* the covariate names, without the coef_ prefix */
    double *coefs;      /* storage of the rows' coef arrays */
    double *ranges;     /* storage of the rows' x_min/x_max arrays; NULL: the
                           table has no covariate ranges */
    double confidence;  /* of the rank rule; 0 for the average-case rank */
    etacal_accuracy accuracy; /* fit only */
};

/* Shared by the fit (quote.c) and its method qr (quote_qr.c): the
 * weighted upper bound of Barber et al. (smallest s with the mass at or
 * below it >= tau (1 + sum w); NaN out of memory), the rank rule with or
 * without an assurance, its minimum n; and the qr fit itself. */
double quote_weighted_upper(const double *s, const double *w, size_t n, double tau, size_t *k);
size_t quote_rank_rule(size_t n, double tau, double conf);
size_t quote_rule_min_n(double tau, double conf);
struct seghier;
int quotes_fit_qr(etacal_quotes *q, const etacal_table *t, const struct seghier *hs, size_t actual_col,
                  size_t pred_col, const etacal_fit_opts *o, size_t min_rows, etacal_error *err);

/* The promise formula of one row (promise.c; etacal_quotes_promise by
 * index). */
double quote_row_promise(const etacal_quotes *q, const etacal_quote *row, double pred, const double *x, int *clamped,
                         int *floored);

/* 1 when a key column may not have this name: a quote-table column
 * (target, method, n, k, offset_s, slope, ...) or a coef_ column (fit.c). */
int fit_key_name_reserved(const char *name);

/* Shared by the table fitter and reader. */
int quotes_set_targets(etacal_quotes *q, const double *targets, size_t n, etacal_error *err);
int segment_alloc(etacal_segment *s, size_t nkeys, size_t ntargets);

#endif
