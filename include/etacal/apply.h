/* SPDX-License-Identifier: GPL-3.0-or-later */
/* apply.h: promises for a stream of new orders from a quote table. */
#ifndef ETACAL_APPLY_H
#define ETACAL_APPLY_H

#include <stddef.h>

#include "etacal/error.h"
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

#define ETACAL_APPLY_MAX_TARGETS 32

typedef struct etacal_apply_opts {
    const char *pred_col;   /* the prediction column of the orders (seconds) */
    const char *actual_col; /* optional: actual durations, to report the
                               on-time rate the promises reach; NULL if none */
    const size_t *targets;  /* indices into q->targets; NULL means all */
    size_t ntargets;
    double round_s;         /* round each promise up to a multiple of this; 0: to 1 ms */
    char delim;             /* 0 means ',' */
    int bad_rows;           /* ETACAL_BAD_ROWS_ERROR or _SKIP (empty promise, counted) */
} etacal_apply_opts;

typedef struct etacal_apply_stats {
    size_t rows;          /* data rows written */
    size_t promised;      /* rows with promises */
    size_t missing_pred;  /* rows with an empty / NA prediction: empty promise */
    size_t bad;           /* malformed rows passed through with an empty promise */
    size_t fallback;      /* promised rows whose own segment had no row (first target) */
    size_t clamped;       /* promised rows with a covariate outside the range of
                             the table row (method qr), clamped into it */
    size_t floored;       /* promised rows whose formula gave less than 0: promise 0 */
    /* With actual_col: rows with both a promise and an actual value, and how
     * many arrived by the promise (per selected target, in order) and by the
     * bare prediction. */
    size_t with_actual;
    size_t hits[ETACAL_APPLY_MAX_TARGETS];
    size_t bare_hits;
    size_t first_bad_line;
    /* Sums over promised rows, for the mean promise and the mean extra time
     * over the bare prediction (per selected target). */
    double promise_sum[ETACAL_APPLY_MAX_TARGETS];
    double pred_sum;
} etacal_apply_stats;

/* Streams the orders in in_path to out (a sink): every record is copied
 * byte for byte (quoting kept) with the promise columns appended:
 * "promise_s" for one target, "promise_s_<pct>" (promise_s_90,
 * promise_s_97.5) for several.  The key columns of q are looked up in the
 * orders' header by name.  An order takes the most specific row of the table
 * that matches it: its own segment, then its segment with the last keys
 * replaced by "*", down to the global row (the quote index).  The promise
 * is etacal_quotes_promise's (covariates clamped into the row's range,
 * never below 0), in seconds, rounded up (never down).  Memory does not
 * grow with the number of orders.  After an error the sink has had part of
 * the stream; etacal_apply_path writes a file that appears only when every
 * order is written. */
int etacal_apply(const etacal_quotes *q, const char *in_path, const etacal_sink *out,
                 const etacal_apply_opts *opts, etacal_apply_stats *stats, etacal_error *err);
int etacal_apply_path(const etacal_quotes *q, const char *in_path, const char *out_path,
                      const etacal_apply_opts *opts, etacal_apply_stats *stats, etacal_error *err);

/* The summary of an apply run for people, as `etacal apply` prints it, to
 * out: the orders of the file named orders (the name it shows), promised,
 * without a prediction and malformed, those that took a less specific row,
 * the clamped covariates (method qr), the promises floored at 0, the mean
 * promise and extra time per applied target and, with opts->actual_col,
 * the on-time rate of each target's promise and of the bare prediction on
 * the orders with an actual duration.  opts and stats are those of the run
 * (etacal_apply).  ETACAL_OK; ETACAL_EINVAL (a target index out of
 * range); ETACAL_ENOMEM; ETACAL_EIO when the sink refuses bytes. */
int etacal_apply_write_summary(const etacal_quotes *q, const char *orders, const etacal_apply_opts *opts,
                               const etacal_apply_stats *stats, const etacal_sink *out, etacal_error *err);

/* Rounds a promise up to a multiple of round_s (> 0), or to the next whole
 * millisecond when round_s is 0. */
double etacal_promise_round(double promise, double round_s);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
