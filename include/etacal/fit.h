/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fit.h: one fit run, as every command and binding does it.
 *
 * A fit specification names the columns (actual, prediction, keys,
 * covariates, time) and the choices (targets, method, minimum rows, split,
 * seed, assurance, held-out share, recency half-life).  etacal_fitspec_check
 * validates it; a run reads the rows (from a CSV file, or a table already
 * in memory), holds out the rows to score, weighs the others by recency,
 * fits the quote table and scores it on the held-out rows.  `etacal fit`,
 * `publish`, `curve` and `report` are each this run plus what they print or
 * write, and so is a program that embeds the library.
 *
 * Messages name the choices by their command-line spelling (--by, --x,
 * --half-life ...), which the Python keywords follow. */
#ifndef ETACAL_FIT_H
#define ETACAL_FIT_H

#include <stddef.h>

#include "etacal/error.h"
#include "etacal/io.h"
#include "etacal/quantreg.h"
#include "etacal/quote.h"
#include "etacal/table.h"

#ifdef __cplusplus
extern "C" {
#endif
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* The most key columns of a segmentation; the most targets a command line
 * lists (etacal fit --target); the most targets of one fit run (a grid of
 * targets, as the cost curve and the report fit). */
#define ETACAL_MAX_KEYS 16
#define ETACAL_MAX_TARGETS 32
#define ETACAL_FIT_MAX_TARGETS 1000

typedef struct etacal_fitspec {
    const char *actual;        /* column of actual durations, seconds (required) */
    const char *pred;          /* column of predicted durations, seconds (required) */
    const char *const *keys;   /* key columns, at most ETACAL_MAX_KEYS */
    size_t nkeys;
    const char *const *xs;     /* method qr: covariates besides the prediction */
    size_t nx;
    const double *targets;     /* on-time targets in (0,1), ascending or not,
                                  at most ETACAL_FIT_MAX_TARGETS; none: 0.9 */
    size_t ntargets;
    int method;                /* ETACAL_METHOD_* */
    size_t min_rows;           /* 0: 200 */
    double split;              /* method qr: share for the regression; 0: 0.5 */
    unsigned long seed;        /* of every random choice (init: 1) */
    double confidence;         /* 0, or the assurance in (0,1) of the rank rule */
    double holdout;            /* 0, or the share of rows held out and scored */
    const char *time;          /* time column (holdout by time, recency); may be NULL */
    double half_life;          /* 0, or the recency half-life in seconds (needs time) */
    int threads;               /* 0 or 1: the calling thread alone; n, or
                                  ETACAL_THREADS_AUTO: up to n threads, or one
                                  per CPU, for the fit (same result) */
} etacal_fitspec;

/* A specification with the defaults (method add, no keys, no holdout). */
void etacal_fitspec_init(etacal_fitspec *s);

/* Checks a specification: actual and pred given and different, at most
 * ETACAL_MAX_KEYS keys, no key named as a quote-table column (target,
 * method, n, k, offset_s, slope, confidence, coverage_mean, coverage_low,
 * coef_...), no column in two roles or named twice, covariates only with
 * method qr, targets in (0,1), shares in (0,1), time with holdout or
 * half_life, half_life with time and not with a confidence.  ETACAL_OK, or
 * ETACAL_EINVAL with the reason. */
int etacal_fitspec_check(const etacal_fitspec *s, etacal_error *err);

/* The columns a run reads, in this order: actual 0, pred 1, the keys, the
 * covariates, the time; with the flags a fit needs (missing actuals or
 * predictions leave their row out, negative durations are errors, ratio
 * predictions must be positive, the time is a timestamp).  Returns their
 * number (at most ETACAL_FIT_MAX_COLS).  A binding that builds a table from
 * memory for a run uses these. */
#define ETACAL_FIT_MAX_COLS (3 + ETACAL_MAX_KEYS + ETACAL_QR_MAX_COVARIATES)
size_t etacal_fitspec_columns(const etacal_fitspec *s, etacal_colspec *cols);

/* The result of a run: opaque, read through the accessors below, freed by
 * etacal_fit_run_destroy (NULL allowed).  Everything the accessors return is
 * borrowed from the run and lives as long as it. */
typedef struct etacal_fit_run etacal_fit_run;

/* Reads path (a CSV file with a header) with ro (NULL: defaults), then
 * fits as etacal_fit_run_table.  Errors carry FILE:LINE. */
int etacal_fit_csv(const etacal_fitspec *s, const char *path, const etacal_read_opts *ro,
                   etacal_fit_run **out, etacal_error *err);

/* Fits on a table: its columns are found by name (a table from
 * etacal_fitspec_columns' list, from a file or from memory); t is borrowed
 * and must outlive the run.  With a holdout share, the held-out rows (the
 * latest by time when a time column is given, else a seeded random share)
 * are left out of the fit and scored. */
int etacal_fit_table(const etacal_fitspec *s, const etacal_table *t, etacal_fit_run **out,
                     etacal_error *err);

void etacal_fit_run_destroy(etacal_fit_run *r);

/* The rows the run read (its own table for etacal_fit_csv). */
const etacal_table *etacal_fit_run_rows(const etacal_fit_run *r);
/* The fitted quote table. */
const etacal_quotes *etacal_fit_run_quotes(const etacal_fit_run *r);
/* With a holdout: how many rows were held out, which (mask[i] = 1 for a
 * held-out row) and their on-time rates (etacal_quotes_holdout).  Without:
 * 0, NULL, NULL. */
size_t etacal_fit_run_held(const etacal_fit_run *r);
const unsigned char *etacal_fit_run_held_mask(const etacal_fit_run *r);
const etacal_holdout *etacal_fit_run_holdout(const etacal_fit_run *r);
/* The table columns of the keys (nkeys), of the covariates (nx), of the
 * actual and the prediction, and of the time (-1 without one). */
const size_t *etacal_fit_run_key_cols(const etacal_fit_run *r);
const size_t *etacal_fit_run_x_cols(const etacal_fit_run *r);
size_t etacal_fit_run_actual_col(const etacal_fit_run *r);
size_t etacal_fit_run_pred_col(const etacal_fit_run *r);
long etacal_fit_run_time_col(const etacal_fit_run *r);

/* The summary of run for people, as `etacal fit` prints it, to out: the
 * rows read from path (the name it shows), the method, the point accuracy
 * of s->pred, one aligned row per segment (the bound per target; with a
 * confidence the mean of the coverage law of the bound and the coverage it
 * reaches with that confidence, conformal.h; the row an order of the
 * segment gets, found by the quote index's rule), the pooled cells, and
 * with a holdout the on-time rates on the held-out rows with Wilson 95%
 * intervals.  s is the specification the run was made with (its pred,
 * min_rows, holdout and time are shown).  ETACAL_OK; ETACAL_ENOMEM (the
 * output is then incomplete); ETACAL_EIO when the sink refuses bytes. */
int etacal_fit_write_summary(const etacal_fit_run *run, const etacal_fitspec *s, const char *path,
                             const etacal_sink *out, etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
