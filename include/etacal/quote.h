/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote.h: promise (quote) tables.
 *
 * A quote table holds, per segment and on-time target tau, a line
 *     promise = offset_s + slope * pred      (seconds)
 * fitted so that at least a share tau of future orders of that segment
 * arrive by the promise (split conformal; see conformal.h).  A segment is a
 * combination of values of the key columns; the global segment has "*" in
 * every key column and is the fallback of segments without a row. */
#ifndef ETACAL_QUOTE_H
#define ETACAL_QUOTE_H

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

enum {
    ETACAL_METHOD_ADD = 0,  /* score actual - pred; promise = pred + q */
    ETACAL_METHOD_RATIO = 1, /* score actual / pred (pred > 0); promise = pred * q */
    ETACAL_METHOD_QR = 2     /* conformalized quantile regression: promise =
                                offset_s + slope * pred + sum coef_j * x_j */
};

/* "add" / "ratio"; NULL for an unknown method. */
const char *etacal_method_name(int method);
/* The method of a name, or -1. */
int etacal_method_parse(const char *name);

/* Why a segment has no row of its own for a target. */
enum {
    ETACAL_OWN_ROW = 0,
    ETACAL_FALLBACK_FEW_ROWS = 1, /* n < min_rows */
    ETACAL_FALLBACK_RANK = 2,     /* k = ceil((n+1) tau) > n: no finite bound */
    ETACAL_FALLBACK_EMPTY = 3     /* a coarser segment whose pooled cell is empty:
                                     every segment below it has a row of its own */
};

/* What the rows behind a table row are (the 'cell' column). */
enum {
    ETACAL_CELL_UNKNOWN = 0, /* a table read without a 'cell' column */
    ETACAL_CELL_OWN = 1,     /* the rows of its own segment (full key combination,
                                or the only segment of a table without keys) */
    ETACAL_CELL_REST = 2,    /* a pooled cell: the rows of the segments below it
                                that have no row of their own (Mondrian conformal
                                on that cell) */
    ETACAL_CELL_ALL = 3      /* the global row when too few rows are left over for
                                a pooled cell: all rows, no guarantee for the
                                segments that fall back to it */
};
/* "own", "rest", "all"; NULL for unknown. */
const char *etacal_cell_name(int cell);

/* Point accuracy of the prediction column against the actuals. */
typedef struct etacal_accuracy {
    size_t n;
    double rmse, mae;
    double mean_error; /* mean of actual - pred: > 0 means orders take longer than predicted */
    size_t on_time;    /* rows with actual <= pred */
} etacal_accuracy;

/* A quote table: opaque, read through the accessors below, built by
 * etacal_quotes_fit or etacal_quotes_read_csv and freed by
 * etacal_quotes_destroy. */
typedef struct etacal_quotes etacal_quotes;

typedef struct etacal_fit_opts {
    int method;             /* ETACAL_METHOD_* */
    const double *targets;  /* on-time targets in (0,1) */
    size_t ntargets;
    size_t min_rows;        /* a segment with fewer rows falls back; 0 means 200 */
    /* method qr only: */
    const size_t *x_cols;   /* extra numeric covariates of the regression */
    size_t nx;
    double split;           /* share of each segment's rows for the regression
                               fit, the rest calibrates; 0 means 0.5 */
    unsigned long seed;     /* of the random split */
    /* 0: the average-case rank ceil((n+1) tau).  In (0,1): the rank that
     * makes the coverage at least tau with this probability over the
     * calibration draw (etacal_conformal_rank_conf). */
    double confidence;
    /* Rows to fit on: mask[i] != 0 (NULL: every row), say to hold the other
     * rows out for etacal_quotes_holdout. */
    const unsigned char *mask;
    /* Non-exchangeable weighted conformal (Barber, Candes, Ramdas &
     * Tibshirani 2023): per-row weights in [0,1] fixed in advance (say
     * recency, 2^(-age/half-life)), the new order's weight 1 as mass at
     * +infinity; the bound is the smallest score s with
     * sum_{s_j <= s} w_j >= tau (1 + sum w).  NULL: unweighted.  Methods
     * add and ratio; not with a confidence. */
    const double *weights;
    /* 0 or 1: the calling thread alone; 2 or more, or ETACAL_THREADS_AUTO:
     * large fits pass over the rows in two halves at once and the quantile
     * regressions of method qr use that many threads (same bits either
     * way). */
    int threads;
} etacal_fit_opts;

/* On-time rates of a quote table on held-out rows, overall (segs[0]) and
 * per segment of the table at its most specific level (the row's own
 * combination of keys).  n[g] rows, hits[g * ntargets + t] on time with
 * the promise of target t, bare[g] on time with the bare prediction.
 * Rows whose combination is not a segment of the table count overall only. */
typedef struct etacal_holdout {
    size_t nsegs, ntargets;
    size_t *n, *hits, *bare;
    double *promise_sum; /* [g * ntargets + t]: sum of the promises (s) */
    double *pred_sum;    /* [g]: sum of the predictions (s) */
} etacal_holdout;

/* Applies q to the rows of t with mask[i] != 0 (as etacal_apply would,
 * without rounding) and counts who arrives by the promise.  key_cols,
 * x_cols as for the fit (the table's key and covariate columns, in q's
 * order).  *out is a new object (free with etacal_holdout_destroy; NULL
 * after an error). */
int etacal_quotes_holdout(const etacal_quotes *q, const etacal_table *t, size_t actual_col, size_t pred_col,
                          const size_t *key_cols, const size_t *x_cols, const unsigned char *mask,
                          etacal_holdout **out, etacal_error *err);
void etacal_holdout_destroy(etacal_holdout *x);

/* Which rows to hold out: with time_col >= 0 (a numeric column, such as
 * one read with ETACAL_NUM_TIME) the latest share of rows by time (rows at
 * the cut-off time stay in the fit), else a seeded random share.  mask[i]
 * = 1 for the rows to fit on, 0 for the held-out ones; returns how many
 * are held out (0 if none could be, as with share 0), or
 * ETACAL_HOLDOUT_NOMEM when out of memory. */
#define ETACAL_HOLDOUT_NOMEM ((size_t)-1)
size_t etacal_holdout_mask(const etacal_table *t, long time_col, double share, unsigned long seed,
                           unsigned char *mask);

/* Fits a quote table from the rows of t: actual_col and pred_col are
 * numeric columns of t (no NaN: read them with ETACAL_NUM_SKIP_MISSING),
 * key_cols[0..nkeys) key columns.  Errors: no rows, a target outside (0,1),
 * a ratio fit with a prediction <= 0, too few rows for a finite global bound
 * (the message names the minimum). *out is new; free with
 * etacal_quotes_destroy. */
int etacal_quotes_fit(const etacal_table *t, size_t actual_col, size_t pred_col,
                      const size_t *key_cols, size_t nkeys, const etacal_fit_opts *opts,
                      etacal_quotes **out, etacal_error *err);

/* Writes the table as CSV: the key columns, then
 * target,method,n,k,offset_s,slope and, for method qr, one coef_<name>
 * column per extra covariate, then min_<name>,max_<name> per covariate (its
 * range on the rows the segment's regression was fitted on); with a confidence, also confidence,
 * coverage_mean and coverage_low (the mean of the coverage law of the bound
 * and the coverage reached with that confidence); with key columns, a last
 * column cell (own, rest, all: etacal_cell_name) when every row's cell is
 * known; one row per segment with a row of its own and
 * target, global rows first.  Numbers in shortest round-trip form.
 * To a sink, or to a file at path that appears whole or not at all (an
 * existing file there is replaced only when the table is complete). */
int etacal_quotes_write(const etacal_quotes *q, const etacal_sink *out, etacal_error *err);
int etacal_quotes_write_path(const etacal_quotes *q, const char *path, etacal_error *err);

/* Reads a table written by etacal_quotes_write (or by hand, or by SQL):
 * the columns before 'target' are the key columns; 'target', 'method', 'n',
 * 'offset_s' and 'slope' are required, 'coef_<name>' columns are the
 * coefficients of covariates, 'min_<name>' and 'max_<name>' their ranges
 * (for every covariate or for none; none: no clamping), an optional 'cell'
 * column (own on full key combinations, rest, all on the global row;
 * ETACAL_CELL_UNKNOWN without it), others are ignored.  Checks: numbers
 * finite, targets in (0,1), one method, no duplicate (segment, target), a
 * global row for every target.  Errors carry FILE:LINE. */
int etacal_quotes_read_csv(const char *path, char delim, etacal_quotes **out, etacal_error *err);

void etacal_quotes_destroy(etacal_quotes *q);

/* Recency weights for etacal_fit_opts.weights: w[i] = 2^(-age_i / half_life)
 * with age_i = newest - time[i], newest the latest time among the rows with
 * mask[i] != 0 (NULL: all rows), so the newest row fitted on weighs 1. */
void etacal_recency_weights(const double *time, size_t n, const unsigned char *mask, double half_life,
                            double *w);

/* The promise of row r of q (seconds, before rounding):
 *     max(0, offset_s + slope * pred + sum_j coef_j * clamp(x_j, x_min_j, x_max_j))
 * with x[0..ncoef) the order's covariates in q's coef order (NULL when q
 * has none).  The prediction itself is not clamped (it is the model's own
 * output).  *clamped (may be NULL) is set to 1 when a covariate was moved
 * into its range, *floored (may be NULL) to 1 when the formula gave less
 * than 0.  NaN for a row out of range.  Every user of a table (apply,
 * holdout, publish, the quote index) goes through this one formula. */
double etacal_quotes_promise(const etacal_quotes *q, size_t r, double pred, const double *x, int *clamped,
                             int *floored);

/* ---- read access ----------------------------------------------------------
 * A program outside the library reads a table through these.  Indices out of
 * range give 0, NaN or NULL.  Texts are borrowed from the table. */
size_t etacal_quotes_nkeys(const etacal_quotes *q);
const char *etacal_quotes_key_name(const etacal_quotes *q, size_t j);
int etacal_quotes_method(const etacal_quotes *q);
size_t etacal_quotes_ntargets(const etacal_quotes *q);
double etacal_quotes_target(const etacal_quotes *q, size_t t);
double etacal_quotes_confidence(const etacal_quotes *q); /* 0: the average-case rank */
const etacal_accuracy *etacal_quotes_accuracy(const etacal_quotes *q); /* fitted tables */
size_t etacal_quotes_ncoef(const etacal_quotes *q);
const char *etacal_quotes_coef_name(const etacal_quotes *q, size_t j);
/* Segments: 0 is the global one; keys are "*" where a level leaves them open. */
size_t etacal_quotes_nsegs(const etacal_quotes *q);
const char *etacal_quotes_seg_key(const etacal_quotes *q, size_t g, size_t j);
const char *const *etacal_quotes_seg_keys(const etacal_quotes *q, size_t g);
size_t etacal_quotes_seg_level(const etacal_quotes *q, size_t g);
size_t etacal_quotes_seg_n(const etacal_quotes *q, size_t g);
size_t etacal_quotes_seg_bare_hits(const etacal_quotes *q, size_t g);
size_t etacal_quotes_seg_k(const etacal_quotes *q, size_t g, size_t t);
double etacal_quotes_seg_score(const etacal_quotes *q, size_t g, size_t t);
int etacal_quotes_seg_status(const etacal_quotes *q, size_t g, size_t t); /* ETACAL_OWN_ROW, ... */
/* Rows of the segment's pooled cell at target t (fitted tables; 0 otherwise). */
size_t etacal_quotes_seg_pool_n(const etacal_quotes *q, size_t g, size_t t);
/* Rows: by segment, then target. */
size_t etacal_quotes_nrows(const etacal_quotes *q);
typedef struct etacal_quote_row {
    size_t seg, target;  /* indices of its segment and target */
    size_t n, k;         /* calibration rows behind it and the rank used */
    double offset_s, slope;
    int cell;            /* ETACAL_CELL_*: what the n rows are */
} etacal_quote_row;
int etacal_quotes_row(const etacal_quotes *q, size_t r, etacal_quote_row *out);
double etacal_quotes_row_coef(const etacal_quotes *q, size_t r, size_t j);
/* 1 and the range of covariate j on row r's fitting rows, or 0 (no ranges). */
int etacal_quotes_row_range(const etacal_quotes *q, size_t r, size_t j, double *lo, double *hi);

/* Index of the target equal to tau, or -1. */
long etacal_quotes_find_target(const etacal_quotes *q, double tau);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
